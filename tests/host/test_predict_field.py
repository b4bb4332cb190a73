"""The finite coil's field over the capacitor, and its inductance, in slipless.model.physics:
each formula against published values or against an independent route (Biot-Savart and
Neumann integrals done numerically with scipy.integrate), and the over-prediction of the
coil-centre value that these formulas fix."""

from __future__ import annotations

import math

import pytest
from scipy import integrate

from slipless.model import physics

MU0 = physics.MU0
# the bench rig of README's example: a = 20 mm, b = 40 mm in a coil of R = 50 mm, l = 200 mm
A, B, R, LEN, N = 0.02, 0.04, 0.05, 0.20, 500


# ---- independent routes ----------------------------------------------------------------------
def loop_bz_biot_savart(radius: float, r: float, z: float) -> float:
    """B_z per ampere of one circular loop, by the Biot-Savart integral over the loop's angle
    (Jackson, Classical Electrodynamics, 3rd ed., sec. 5.5 [from memory]):
    mu0 R / (4 pi) int (R - r cos p) / (R^2 + r^2 + z^2 - 2 R r cos p)^1.5 dp."""
    def f(p: float) -> float:
        return (radius - r * math.cos(p)) / (radius**2 + r**2 + z**2
                                             - 2 * radius * r * math.cos(p)) ** 1.5
    value, _ = integrate.quad(f, 0, math.pi, epsabs=0, epsrel=1e-10, limit=200)  # symmetric
    return MU0 * radius / (2 * math.pi) * value


def neumann_mutual(r1: float, r2: float, d: float) -> float:
    """Neumann's formula for two coaxial circles: mu0 r1 r2 / 2 int cos p / dist dp."""
    def f(p: float) -> float:
        return math.cos(p) / math.sqrt(r1**2 + r2**2 + d**2 - 2 * r1 * r2 * math.cos(p))
    value, _ = integrate.quad(f, 0, 2 * math.pi, epsabs=0, epsrel=1e-12, limit=200)
    return MU0 * r1 * r2 / 2 * value


def sheet_inductance(turns: float, length: float, radius: float) -> float:
    """Self-inductance of a current sheet as the sum of the mutual inductances of its
    loops: (N/l)^2 int int M(R, R, z - z') dz dz' = 2 (N/l)^2 int_0^l M(R, R, u) (l - u) du.
    The log singularity at u = 0 is taken on its own small interval."""
    f = lambda u: physics.loop_mutual_inductance(radius, radius, u) * (length - u)  # noqa: E731
    edge = length * 1e-3
    near, _ = integrate.quad(f, 0, edge, epsabs=0, epsrel=1e-12, limit=500)
    far, _ = integrate.quad(f, edge, length, epsabs=0, epsrel=1e-12, limit=500)
    return 2 * (turns / length) ** 2 * (near + far)


# ---- Maxwell's mutual inductance of two circles ------------------------------------------------
@pytest.mark.parametrize("r1, r2, d", [(0.05, 0.02, 0.0), (0.05, 0.04, 0.03), (0.05, 0.05, 0.01),
                                       (0.03, 0.07, 0.2)])
def test_loop_mutual_inductance_against_neumann(r1: float, r2: float, d: float) -> None:
    assert physics.loop_mutual_inductance(r1, r2, d) == pytest.approx(neumann_mutual(r1, r2, d),
                                                                      rel=1e-9)


def test_loop_mutual_inductance_far_apart_is_two_dipoles() -> None:
    # d >> r: M -> mu0 pi r1^2 r2^2 / (2 d^3) (dipole field on the axis, standard)
    r1, r2, d = 0.01, 0.02, 3.0
    assert physics.loop_mutual_inductance(r1, r2, d) == pytest.approx(
        MU0 * math.pi * r1**2 * r2**2 / (2 * d**3), rel=1e-4)
    assert physics.loop_mutual_inductance(0.0, r2, d) == 0.0


# ---- B_z off the axis (Derby & Olbert) ---------------------------------------------------------
@pytest.mark.parametrize("z", [0.0, 0.03, 0.1, 0.17, -0.25])
def test_field_z_on_the_axis_is_the_textbook_formula(z: float) -> None:
    # B(z) = mu0 N I/(2L)[(z+L/2)/sqrt((z+L/2)^2+R^2) - (z-L/2)/sqrt((z-L/2)^2+R^2)]
    # (references 8b [verified: textbook problem statement])
    expected = MU0 * N * 2.0 / (2 * LEN) * ((z + LEN / 2) / math.hypot(z + LEN / 2, R)
                                            - (z - LEN / 2) / math.hypot(z - LEN / 2, R))
    assert physics.solenoid_field_z(N, 2.0, LEN, R, 0.0, z) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("r, z", [(0.02, 0.0), (0.04, 0.05), (0.045, 0.11), (0.07, 0.0),
                                  (0.03, -0.2)])
def test_field_z_off_the_axis_against_biot_savart(r: float, z: float) -> None:
    # independent: Biot-Savart loops, summed over the winding's N/l turns per metre
    value, _ = integrate.quad(lambda zp: loop_bz_biot_savart(R, r, z - zp), -LEN / 2, LEN / 2,
                              epsabs=0, epsrel=1e-11, limit=200)
    assert physics.solenoid_field_z(N, 1.0, LEN, R, r, z) == pytest.approx(value * N / LEN,
                                                                           rel=1e-8)


def test_field_z_long_coil_limit() -> None:
    # a long coil: mu0 n I inside at any radius, about zero outside (references 8b)
    n_per_m, length = 1000.0, 50.0
    inside = [physics.solenoid_field_z(n_per_m * length, 1.0, length, R, r, 0.0)
              for r in (0.0, 0.02, 0.049)]
    assert inside == pytest.approx([physics.long_solenoid_field(n_per_m * length, 1.0, length)] * 3,
                                   rel=1e-5)
    assert abs(physics.solenoid_field_z(n_per_m * length, 1.0, length, R, 0.08, 0.0)) < 1e-5 * inside[0]


# ---- flux and its average ----------------------------------------------------------------------
@pytest.mark.parametrize("r, z", [(0.02, 0.0), (0.04, 0.07), (0.06, 0.12)])
def test_flux_is_the_area_integral_of_bz(r: float, z: float) -> None:
    # two routes: Maxwell's M summed over the winding, against int_0^r 2 pi r' B_z dr'
    value, _ = integrate.quad(lambda rr: 2 * math.pi * rr * physics.solenoid_field_z(
        N, 1.0, LEN, R, rr, z), 0, r, epsabs=0, epsrel=1e-11, limit=200)
    assert physics.solenoid_flux_mean(N, 1.0, LEN, R, r, 0.0, z) == pytest.approx(value, rel=1e-8)


@pytest.mark.parametrize("span, centre", [(0.1, 0.0), (0.2, 0.0), (0.6, 0.0), (0.1, 0.06)])
def test_annulus_emf_against_a_double_integral(span: float, centre: float) -> None:
    # independent: (1/l) int dz int_a^b omega r B_z(r, z) dr, with B_z from Derby & Olbert
    omega = 3.0
    value, _ = integrate.dblquad(lambda r, z: omega * r * physics.solenoid_field_z(N, 1.0, LEN, R,
                                                                                   r, z),
                                 centre - span / 2, centre + span / 2, A, B, epsabs=0,
                                 epsrel=1e-9)
    assert physics.annulus_emf(omega, N, 1.0, LEN, R, A, B, span, centre) == pytest.approx(
        value / span, rel=1e-7)


def test_annulus_emf_in_a_long_coil_is_the_uniform_field_formula() -> None:
    # long coil: B uniform = mu0 n I, and the EMF is omega B (b^2 - a^2)/2 (references 8a)
    n_per_m, length, omega = 1000.0, 50.0, 2 * math.pi
    emf = physics.annulus_emf(omega, n_per_m * length, 1.0, length, R, A, B, 0.2)
    uniform = physics.unipolar_emf(omega, physics.long_solenoid_field(n_per_m * length, 1.0, length),
                                   A, B)
    assert emf == pytest.approx(uniform, rel=1e-5)


@pytest.mark.parametrize("span, centre", [(0.3, 0.02), (0.05, -0.08), (0.0, 0.04)])
def test_on_axis_mean_closed_form(span: float, centre: float) -> None:
    # int u/sqrt(u^2 + R^2) du = sqrt(u^2 + R^2): closed form against scipy.integrate.quad
    if span == 0:
        expected = physics.solenoid_field_on_axis(N, 1.0, LEN, R, centre)
    else:
        value, _ = integrate.quad(lambda z: physics.solenoid_field_on_axis(N, 1.0, LEN, R, z),
                                  centre - span / 2, centre + span / 2, epsabs=0, epsrel=1e-12)
        expected = value / span
    assert physics.solenoid_field_on_axis_mean(N, 1.0, LEN, R, span, centre) == pytest.approx(
        expected, rel=1e-11)


def test_thin_annulus_near_the_axis_sees_the_on_axis_mean() -> None:
    # r -> 0: the flux is pi r^2 B(z) on the axis, so a thin core sees the on-axis mean
    core = 1e-4
    per = physics.annulus_emf(1.0, N, 1.0, LEN, R, core / 2, core, 0.15)
    axis = physics.unipolar_emf(1.0, physics.solenoid_field_on_axis_mean(N, 1.0, LEN, R, 0.15),
                                core / 2, core)
    assert per == pytest.approx(axis, rel=1e-5)


# ---- the coil-centre value over-predicts -------------------------------------------------------
def centre_over_mean(coil_length: float, span: float) -> float:
    centre = physics.unipolar_emf(1.0, physics.solenoid_field_on_axis(N, 1.0, coil_length, R), A, B)
    return centre / physics.annulus_emf(1.0, N, 1.0, coil_length, R, A, B, span)


def test_centre_value_over_predicts_as_the_capacitor_lengthens() -> None:
    # The figures the model is fixed for [computed here, with the formulas checked above]:
    # coil 2R/l = 0.5 (R 50 mm, l 200 mm), annulus 20..40 mm:
    assert centre_over_mean(LEN, LEN / 2) == pytest.approx(1.0061, abs=1e-4)  # 100 mm: 0.6 %
    assert centre_over_mean(LEN, LEN) == pytest.approx(1.1068, abs=1e-4)  # as long: about 11 %
    assert centre_over_mean(LEN, 3 * LEN) == pytest.approx(2.7239, abs=1e-4)  # 3x: 2.7x here
    # a coil as long as its diameter (2R/l = 1, l = 100 mm): three times as long gives about 2.2x
    assert centre_over_mean(2 * R, 6 * R) == pytest.approx(2.2399, abs=1e-4)
    # the on-axis field alone (no radial variation) would say 14.6 % for the 200 mm case
    axis = physics.solenoid_field_on_axis(N, 1.0, LEN, R) / physics.solenoid_field_on_axis_mean(
        N, 1.0, LEN, R, LEN)
    assert axis == pytest.approx(1.1456, abs=1e-4)


def test_an_offset_capacitor_sees_less_and_symmetrically() -> None:
    mid = physics.annulus_emf(1.0, N, 1.0, LEN, R, A, B, 0.1)
    up = physics.annulus_emf(1.0, N, 1.0, LEN, R, A, B, 0.1, 0.04)
    down = physics.annulus_emf(1.0, N, 1.0, LEN, R, A, B, 0.1, -0.04)
    assert up == pytest.approx(down, rel=1e-10) and up < mid


# ---- Nagaoka's coefficient and the inductance --------------------------------------------------
@pytest.mark.parametrize("diameter_over_length, k", [
    # Nagaoka's table (Nagaoka 1909; reprinted by Grover, Inductance Calculations, 1946) [from
    # memory: the four-figure values as tabulated; the independent route below checks them]
    (0.1, 0.9588), (0.2, 0.9201), (0.5, 0.8181), (1.0, 0.6884), (2.0, 0.5255), (5.0, 0.3198),
    (10.0, 0.2033)])
def test_nagaoka_coefficient_table_values(diameter_over_length: float, k: float) -> None:
    length = 1.0
    assert physics.nagaoka_coefficient(length, diameter_over_length * length / 2) == pytest.approx(
        k, abs=6e-5)


@pytest.mark.parametrize("length, radius", [(0.2, 0.05), (0.05, 0.05), (1.0, 0.02)])
def test_nagaoka_inductance_is_the_sum_of_loop_mutuals(length: float, radius: float) -> None:
    # independent: the current sheet as loops, each pair by Maxwell's M (checked above)
    assert physics.solenoid_inductance(N, length, radius) == pytest.approx(
        sheet_inductance(N, length, radius), rel=1e-8)


def test_nagaoka_long_coil_series() -> None:
    # long coil: K = 1 - 8R/(3 pi l) + O((R/l)^2) (the first terms of the series, from memory;
    # it follows from the elliptic form as k -> 0)
    length, radius = 1.0, 1e-3
    k = physics.nagaoka_coefficient(length, radius)
    assert abs(k - (1 - 8 * radius / (3 * math.pi * length))) < 2 * (radius / length) ** 2
    # the bench coil: 12.337 mH long-coil value (references 8b) x 0.8181 = 10.093 mH
    assert physics.solenoid_inductance(N, LEN, R) == pytest.approx(10.093e-3, rel=1e-4)


def test_bad_geometry_is_refused() -> None:
    for bad in (lambda: physics.nagaoka_coefficient(0.0, 0.05),
                lambda: physics.solenoid_flux_mean(N, 1.0, -1.0, R, A),
                lambda: physics.solenoid_field_z(N, 1.0, LEN, 0.0, A, 0.0)):
        with pytest.raises(ValueError):
            bad()


# ---- charge amplifier --------------------------------------------------------------------------
def test_charge_amplifier_conserves_charge() -> None:
    # ideal charge amplifier (virtual earth): all of Q = Cs V lands on Cf, Vout Cf = Q
    # (op-amp integrator, e.g. Horowitz & Hill, The Art of Electronics, ch. 4 [from memory])
    cs, cf, v = 8.026e-12, 10e-12, 2.1e-5
    out = physics.charge_amp_output(v, cs, cf)
    assert out * cf == pytest.approx(cs * v, rel=1e-12)
    slope = physics.signal_per_amp_rad_s(A, B, 5.6e-3, 3.0, cs, 0.0, cf)
    assert slope == pytest.approx(3.0 * cs / cf * physics.unipolar_emf(1.0, 5.6e-3, A, B))
    with pytest.raises(ValueError):
        physics.signal_per_amp_rad_s(A, B, 5.6e-3, 1.0, None, 0.0, cf)
