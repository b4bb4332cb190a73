"""Published formulas for the rotating-capacitor experiment, as pure functions.

SI units throughout (metres, amperes, tesla, farads, volts, rad/s). The
constants are CODATA values as scipy.constants carries them. Each docstring
names its formula; the formulas are models with stated assumptions (see
ASSUMPTIONS), not verdicts on what a co-rotating amplifier must show.
"""

from __future__ import annotations

import math

from scipy import constants, integrate, special

MU0 = constants.mu_0  # N/A^2 (CODATA, via scipy)
EPS0 = constants.epsilon_0  # F/m (CODATA, via scipy)
# WGS 84 defining constant for the Earth's rotation rate. The IERS rate
# (7.292115146706979e-5) agrees to 7 significant figures; we use WGS 84's.
EARTH_RATE_RAD_S = 7.2921150e-5

ASSUMPTIONS = (
    "coil: a thin uniform current sheet (a single-layer winding of radius R); the EMF uses its "
    "flux through the annulus a..b averaged over the capacitor's length (a measured field "
    "without coil geometry is taken as uniform)",
    "field quasi-static on the plateau: the coil current has settled, dB/dt ~ 0",
    "EMF = motional EMF along a radial path rotating rigidly with both cylinders "
    "(Faraday disc / homopolar form)",
    "where the amplifier's circuit closes decides what it sees: a loop rotating rigidly with the "
    "cylinders in a static axisymmetric field links no changing flux, so the measured term may be "
    "anything from zero to the model value - that is what the experiment tests",
    "induced charge shared between the capacitor and the amplifier input capacitance only "
    "(no leakage, cable or stray capacitance unless included in the input capacitance)",
    "amplifier gain flat from DC to the pulse rate",
)


def rpm_to_rad_s(rpm: float) -> float:
    """Revolutions per minute to rad/s: omega = 2 pi rpm / 60."""
    return 2.0 * math.pi * rpm / 60.0


def rad_s_to_rpm(omega_rad_s: float) -> float:
    return omega_rad_s * 60.0 / (2.0 * math.pi)


def long_solenoid_field(turns: float, current_a: float, length_m: float) -> float:
    """Ideal long solenoid: B = mu0 N I / L."""
    return MU0 * turns * current_a / length_m


def solenoid_field_on_axis(turns: float, current_a: float, length_m: float, radius_m: float,
                           z_m: float = 0.0) -> float:
    """Finite solenoid on its axis: B = mu0 N I / (2 L) (cos theta1 + cos theta2).

    theta1, theta2 are the angles from the axis to the rims of the two ends,
    seen from the point z (z = 0 is the centre). At the centre this is
    mu0 (N/L) I L / sqrt(L^2 + 4 R^2).
    """
    if length_m <= 0 or radius_m <= 0:
        raise ValueError("coil length and radius must be positive")
    near, far = length_m / 2.0 - z_m, length_m / 2.0 + z_m
    cos1 = near / math.hypot(near, radius_m)
    cos2 = far / math.hypot(far, radius_m)
    return MU0 * turns * current_a / (2.0 * length_m) * (cos1 + cos2)


def long_solenoid_inductance(turns: float, length_m: float, radius_m: float) -> float:
    """Ideal long solenoid: L = mu0 N^2 A / l (end effects ignored: an upper bound)."""
    return MU0 * turns**2 * math.pi * radius_m**2 / length_m


def nagaoka_coefficient(length_m: float, radius_m: float) -> float:
    """Nagaoka's coefficient K(2R/l) of a current-sheet solenoid (Nagaoka 1909, from Lorenz's
    exact formula; Grover, Inductance Calculations, 1946, ch. 16):

        K = 4 / (3 pi k') [ (k'^2 / k^2) (K(k) - E(k)) + E(k) - k ],
        k = 2R / sqrt(4R^2 + l^2), k' = l / sqrt(4R^2 + l^2),

    with K(k), E(k) the complete elliptic integrals of modulus k (scipy takes m = k^2).
    K -> 1 for a long coil (its first terms 1 - 8R/(3 pi l)), K < 1 always.
    """
    if length_m <= 0 or radius_m <= 0:
        raise ValueError("coil length and radius must be positive")
    diag = math.hypot(2.0 * radius_m, length_m)
    k, kp = 2.0 * radius_m / diag, length_m / diag
    m = k * k
    big_k, big_e = special.ellipk(m), special.ellipe(m)
    return 4.0 / (3.0 * math.pi * kp) * (kp * kp / m * (big_k - big_e) + big_e - k)


def solenoid_inductance(turns: float, length_m: float, radius_m: float) -> float:
    """Current-sheet solenoid: L = K mu0 N^2 pi R^2 / l, K Nagaoka's coefficient."""
    return nagaoka_coefficient(length_m, radius_m) * long_solenoid_inductance(
        turns, length_m, radius_m)


def loop_mutual_inductance(r1_m: float, r2_m: float, gap_m: float) -> float:
    """Two coaxial circles (Maxwell, Treatise 1873, art. 701; Grover 1946, ch. 11):

        M = mu0 sqrt(r1 r2) [ (2/k - k) K(k) - (2/k) E(k) ],
        k^2 = 4 r1 r2 / ((r1 + r2)^2 + d^2).

    Per ampere in one circle, the flux through the other. Zero when a radius is zero.
    K comes from 1 - k^2 (ellipkm1) to keep its digits near the winding, where k -> 1.
    """
    if r1_m == 0 or r2_m == 0:
        return 0.0
    far = (r1_m + r2_m) ** 2 + gap_m**2
    m, m1 = 4.0 * r1_m * r2_m / far, ((r1_m - r2_m) ** 2 + gap_m**2) / far
    k = math.sqrt(m)
    return MU0 * math.sqrt(r1_m * r2_m) * ((2.0 / k - k) * special.ellipkm1(m1)
                                           - 2.0 / k * special.ellipe(m))


def solenoid_flux_mean(turns: float, current_a: float, length_m: float, radius_m: float,
                       r_m: float, span_m: float = 0.0, centre_m: float = 0.0) -> float:
    """Flux of a current-sheet solenoid through a coaxial circle of radius r, averaged over
    the circle's axial position across a span (centred at centre_m from the coil's centre;
    span 0: the flux at centre_m).

    The coil is N/l loops per metre, so Phi(r, z) = (N I / l) int M(r, R, z - z') dz' over the
    winding; averaging over z in the span is one integral over u = z - z', weighted by the
    length of the winding and the span that are u apart (a trapezoid in u).
    """
    if length_m <= 0 or radius_m <= 0:
        raise ValueError("coil length and radius must be positive")
    half, lo_c, hi_c = length_m / 2.0, centre_m - span_m / 2.0, centre_m + span_m / 2.0

    def overlap(u: float) -> float:  # winding length u below the span, per metre of span
        if span_m == 0:
            return 1.0 if -half <= centre_m - u <= half else 0.0
        return max(0.0, min(half, hi_c - u) - max(-half, lo_c - u)) / span_m

    lo, hi = lo_c - half, hi_c + half
    knees = sorted({0.0, lo_c + half, hi_c - half} - {lo, hi})
    value, _ = integrate.quad(lambda u: loop_mutual_inductance(r_m, radius_m, u) * overlap(u),
                              lo, hi, points=[x for x in knees if lo < x < hi], limit=200,
                              epsabs=0.0, epsrel=1e-10)
    return turns * current_a / length_m * value


def annulus_emf(omega_rad_s: float, turns: float, current_a: float, coil_length_m: float,
                coil_radius_m: float, inner_m: float, outer_m: float, span_m: float = 0.0,
                centre_m: float = 0.0) -> float:
    """Motional EMF between coaxial cylinders of radii a < b rotating in a finite solenoid,
    averaged over their length (the span) at an axial offset centre_m.

    Along a radial path at height z the EMF is int_a^b omega r B_z(r, z) dr =
    omega/(2 pi) [Phi(b, z) - Phi(a, z)], Phi the flux through the circle of that radius
    (unipolar_emf for a uniform field). v x B of rigid rotation in a static axisymmetric
    field is omega/(2 pi) grad Phi, so each electrode's potential follows Phi along its
    length, and the charge on a long coaxial pair is its capacitance per metre times the
    local gap voltage: the charge, and so the amplifier, sees the length average.

    The radial variation of B_z is kept (Phi is the exact flux of the current sheet), since
    at bench sizes it matters at the per-cent level: a = 20, b = 40 mm in a coil of R = 50,
    l = 200 mm, with a 100 mm capacitor the centre value over-predicts by 0.6 % with it and
    2.3 % from the on-axis field alone; with a 200 mm one, 10.7 % and 14.6 %.
    """
    flux = (solenoid_flux_mean(turns, current_a, coil_length_m, coil_radius_m, outer_m, span_m,
                               centre_m)
            - solenoid_flux_mean(turns, current_a, coil_length_m, coil_radius_m, inner_m, span_m,
                                 centre_m))
    return omega_rad_s * flux / (2.0 * math.pi)


def solenoid_field_on_axis_mean(turns: float, current_a: float, length_m: float,
                                radius_m: float, span_m: float, centre_m: float = 0.0) -> float:
    """The on-axis field of solenoid_field_on_axis averaged over a span, in closed form:
    int u / sqrt(u^2 + R^2) du = sqrt(u^2 + R^2), so the mean is
    mu0 N I / (2 l s) [h(z + l/2) - h(z - l/2)] between the span's ends, h(u) = sqrt(u^2 + R^2)."""
    if span_m <= 0:
        return solenoid_field_on_axis(turns, current_a, length_m, radius_m, centre_m)

    def h(z: float) -> float:
        return math.hypot(z + length_m / 2.0, radius_m) - math.hypot(z - length_m / 2.0, radius_m)

    ends = h(centre_m + span_m / 2.0) - h(centre_m - span_m / 2.0)
    return MU0 * turns * current_a / (2.0 * length_m * span_m) * ends


def solenoid_field_z(turns: float, current_a: float, length_m: float, radius_m: float,
                     r_m: float, z_m: float) -> float:
    """Axial field of a current-sheet solenoid anywhere off its axis (Derby & Olbert,
    Am. J. Phys. 78, 229 (2010), eq. for B_z):

        B_z = mu0 n I / pi * R / (R + r) [beta+ C(k+, g^2, 1, g) - beta- C(k-, g^2, 1, g)],
        z+- = z +- l/2, beta+- = z+- / sqrt(z+-^2 + (R + r)^2), g = (R - r) / (R + r),
        k+-^2 = (z+-^2 + (R - r)^2) / (z+-^2 + (R + r)^2),

    C(kc, p, c, s) Bulirsch's complete elliptic integral, through Carlson's forms:
    C = c R_F(0, kc^2, 1) + (s - p c) R_J(0, kc^2, 1, p) / 3. Not valid on the winding (r = R).
    """
    if length_m <= 0 or radius_m <= 0 or r_m < 0:
        raise ValueError("coil length and radius must be positive, r not negative")
    g = (radius_m - r_m) / (radius_m + r_m)
    total = 0.0
    for sign, zz in ((1.0, z_m + length_m / 2.0), (-1.0, z_m - length_m / 2.0)):
        far = zz * zz + (radius_m + r_m) ** 2
        kc2 = (zz * zz + (radius_m - r_m) ** 2) / far
        cel = special.elliprf(0.0, kc2, 1.0) + (g - g * g) * special.elliprj(0.0, kc2, 1.0,
                                                                               g * g) / 3.0
        total += sign * zz / math.sqrt(far) * cel
    return MU0 * turns / length_m * current_a / math.pi * radius_m / (radius_m + r_m) * total


def cylinder_capacitance(inner_m: float, outer_m: float, length_m: float,
                         eps_r: float = 1.0) -> float:
    """Coaxial cylinders: C = 2 pi eps0 eps_r L / ln(b/a) (fringe fields ignored)."""
    if not 0 < inner_m < outer_m:
        raise ValueError("need 0 < inner radius < outer radius")
    return 2.0 * math.pi * EPS0 * eps_r * length_m / math.log(outer_m / inner_m)


def unipolar_emf(omega_rad_s: float, field_t: float, inner_m: float, outer_m: float) -> float:
    """Motional EMF between radii a and b rotating in an axial field:
    V = omega B (b^2 - a^2) / 2 (Faraday disc for a = 0)."""
    return omega_rad_s * field_t * (outer_m**2 - inner_m**2) / 2.0


def charge_amp_output(emf_v: float, source_f: float, feedback_f: float) -> float:
    """Ideal charge amplifier: its input is a virtual earth, so the source's whole charge
    Q = Cs V flows onto the feedback capacitor: Vout = Cs V / Cf in magnitude (an inverting
    stage gives the opposite sign; cable capacitance at the input takes no charge)."""
    return emf_v * source_f / feedback_f


def shared_voltage(emf_v: float, source_f: float, input_f: float) -> float:
    """Charge sharing: a source of capacitance Cs at open-circuit voltage V
    connected to an input capacitance Cin settles at V Cs / (Cs + Cin)."""
    return emf_v * source_f / (source_f + input_f)


def earth_vertical_rate(latitude_deg: float) -> float:
    """The vertical component of the Earth's rotation: Omega sin(latitude)."""
    return EARTH_RATE_RAD_S * math.sin(math.radians(latitude_deg))


def rl_current(t_s: float, supply_v: float, resistance_ohm: float, inductance_h: float) -> float:
    """Series R-L switched onto a DC supply at t = 0: i = (V/R)(1 - exp(-t R/L))."""
    return supply_v / resistance_ohm * (1.0 - math.exp(-t_s * resistance_ohm / inductance_h))


def flyback_decay_time(current_a: float, resistance_ohm: float, inductance_h: float,
                       diode_v: float) -> float:
    """Time for a coil current to reach zero through a plain freewheel diode.

    From L di/dt = -(R i + Vd): i(t) = (I0 + Vd/R) exp(-t R/L) - Vd/R, which
    is zero at t = (L/R) ln(1 + I0 R / Vd).
    """
    tau = inductance_h / resistance_ohm
    if diode_v <= 0:
        return math.inf
    return tau * math.log1p(abs(current_a) * resistance_ohm / diode_v)


def coil_energy(inductance_h: float, current_a: float) -> float:
    """Energy stored in the coil's field: E = L I^2 / 2 (released at switch-off)."""
    return 0.5 * inductance_h * current_a**2


def mean_coil_power(current_a: float, resistance_ohm: float, duty: float) -> float:
    """Joule heating averaged over the pulse program: P = I^2 R x duty."""
    return current_a**2 * resistance_ohm * duty


# Rule of thumb [common practice]: a coil's outer surface loses heat to still
# air by convection and radiation at roughly 10 W/(m^2 K); the steady rise is
# then P / (h A). Winding insulation and nearby plastics want the rise kept
# well below ~40 K. It ignores end faces, winding depth and enclosures.
SURFACE_LOSS_W_M2K = 10.0
HEATING_LIMIT_K = 40.0


def coil_temperature_rise(mean_power_w: float, length_m: float, radius_m: float) -> float:
    """Steady temperature rise from the surface rule of thumb: dT = P / (h 2 pi R L)."""
    return mean_power_w / (SURFACE_LOSS_W_M2K * 2.0 * math.pi * radius_m * length_m)


def signal_per_amp_rad_s(inner_m: float, outer_m: float, field_t_per_a: float, gain: float,
                         capacitance_f: float | None, input_f: float,
                         feedback_f: float | None = None) -> float:
    """The model's interaction slope: amplifier volts per (coil ampere x rad/s).

    gain x Cs/(Cs + Cin) x (b^2 - a^2)/2 x (B per ampere), B the uniform field that gives
    the same EMF (the annulus and length average). Without a capacitance (unknown length)
    no charge sharing is applied; with a feedback capacitance (charge amplifier) the chain
    is gain x Cs/Cf instead.
    """
    if feedback_f is not None:
        if capacitance_f is None:
            raise ValueError("a charge amplifier needs the capacitance")
        share = capacitance_f / feedback_f
    else:
        share = 1.0 if capacitance_f is None else capacitance_f / (capacitance_f + input_f)
    return gain * share * unipolar_emf(1.0, field_t_per_a, inner_m, outer_m)
