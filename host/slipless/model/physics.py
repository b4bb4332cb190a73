"""Published formulas for the rotating-capacitor experiment, as pure functions.

SI units throughout (metres, amperes, tesla, farads, volts, rad/s). The
constants are CODATA values as scipy.constants carries them. Each docstring
names its formula; the formulas are models with stated assumptions (see
ASSUMPTIONS), not verdicts on what a co-rotating amplifier must show.
"""

from __future__ import annotations

import math

from scipy import constants

MU0 = constants.mu_0  # N/A^2 (CODATA, via scipy)
EPS0 = constants.epsilon_0  # F/m (CODATA, via scipy)
# WGS 84 defining constant for the Earth's rotation rate. The IERS rate
# (7.292115146706979e-5) agrees to 7 significant figures; we use WGS 84's.
EARTH_RATE_RAD_S = 7.2921150e-5

ASSUMPTIONS = (
    "field uniform and axial over the capacitor (the on-axis value at the coil centre is used)",
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
                         capacitance_f: float | None, input_f: float) -> float:
    """The model's interaction slope: amplifier volts per (coil ampere x rad/s).

    gain x Cs/(Cs + Cin) x (b^2 - a^2)/2 x (B per ampere). Without a capacitance
    (unknown length) no charge sharing is applied.
    """
    share = 1.0 if capacitance_f is None else capacitance_f / (capacitance_f + input_f)
    return gain * share * unipolar_emf(1.0, field_t_per_a, inner_m, outer_m)
