"""Each formula of slipless.model.physics against a published or worked value, and
against an independent computation (numerical integration or an ODE solver).

Worked values are those of /work/shared/references.md sections 8 and 9, which
name the books; their tags are kept beside each check.
"""

from __future__ import annotations

import math

import pytest
from scipy import constants, integrate

from slipless.model import physics

TWO_PI = 2 * math.pi


# ---- constants (references 8d) -------------------------------------------------------
def test_constants_are_codata_via_scipy() -> None:
    # CODATA 2022 (Tiesinga et al., NIST 2024) as scipy.constants carries it; the
    # tolerance admits the CODATA 2018 values of older scipy releases (8d).
    assert physics.MU0 == constants.mu_0
    assert physics.EPS0 == constants.epsilon_0
    assert physics.MU0 == pytest.approx(1.25663706127e-6, rel=1e-9)
    assert physics.EPS0 == pytest.approx(8.8541878188e-12, rel=1e-9)
    # independent: mu0 eps0 c^2 = 1 (c exact in the SI)
    assert physics.MU0 * physics.EPS0 * constants.c**2 == pytest.approx(1.0, rel=1e-11)


# ---- unipolar EMF (references 8a) -----------------------------------------------------
@pytest.mark.parametrize("a, b, field, omega, volts", [
    # 8a.1 [computed]: a = 2 cm, b = 4 cm, 10 mT, one revolution per second
    (0.02, 0.04, 0.010, TWO_PI, 3.769911e-5),
    # 8a.2 Serway & Jewett ch. 31 homopolar problem [verified: problem statement]: full disc
    (0.0, 0.400, 0.900, 3200 * TWO_PI / 60, 24.1274),
    # 8a.3 [computed]
    (0.01, 0.03, 0.100, 5 * TWO_PI, 1.256637e-3),
])
def test_unipolar_emf_worked_values(a: float, b: float, field: float, omega: float,
                                    volts: float) -> None:
    assert physics.unipolar_emf(omega, field, a, b) == pytest.approx(volts, rel=1e-5)


def test_unipolar_emf_is_the_line_integral_of_v_cross_b() -> None:
    # independent: integrate omega r B dr from a to b numerically
    a, b, field, omega = 0.013, 0.047, 0.0321, 17.0
    value, _ = integrate.quad(lambda r: omega * r * field, a, b)
    assert physics.unipolar_emf(omega, field, a, b) == pytest.approx(value, rel=1e-12)
    assert physics.unipolar_emf(-omega, field, a, b) == -physics.unipolar_emf(omega, field, a, b)


def test_interaction_contrast_of_the_2x2_design() -> None:
    # 8a contrast rule (Box, Hunter & Hunter, two-level factorials [from memory]):
    # (1/4)[V(+B,+w) - V(-B,+w) - V(+B,-w) + V(-B,-w)] = k omega B for V = k w B + ...
    w, field = 6.0, 0.01
    v = {(sb, sw): physics.unipolar_emf(sw * w, sb * field, 0.02, 0.04) + 0.1 * sb + 0.5 * sw
         for sb in (1, -1) for sw in (1, -1)}
    contrast = (v[1, 1] - v[-1, 1] - v[1, -1] + v[-1, -1]) / 4
    assert contrast == pytest.approx(physics.unipolar_emf(w, field, 0.02, 0.04))  # offsets cancel


# ---- solenoid (references 8b) ------------------------------------------------------------
def test_finite_solenoid_worked_values() -> None:
    # 8b [computed, scipy mu_0]; the form mu0 N I/(2L)(cos t1 + cos t2) [verified: textbook problem]
    n, i, length, r = 500, 2.0, 0.20, 0.05
    assert physics.long_solenoid_field(n, i, length) == pytest.approx(6.283185e-3, rel=1e-6)
    centre = physics.solenoid_field_on_axis(n, i, length, r)
    assert centre == pytest.approx(5.619852e-3, rel=1e-6)
    assert centre / physics.long_solenoid_field(n, i, length) == pytest.approx(2 / math.sqrt(5))
    end = physics.solenoid_field_on_axis(n, i, length, r, z_m=length / 2)
    assert end == pytest.approx(3.047793e-3, rel=1e-6)
    assert physics.solenoid_field_on_axis(1000, 10.0, 0.30, 0.06) == pytest.approx(3.889194e-2,
                                                                                   rel=1e-6)


def test_finite_solenoid_against_summed_loops() -> None:
    # independent: Biot-Savart on the axis of one loop, mu0 I R^2 / (2 (R^2 + z^2)^1.5),
    # integrated over a uniform winding of N/L turns per metre
    n, i, length, r, z = 800, 1.5, 0.12, 0.04, 0.025

    def loop(zp: float) -> float:
        return physics.MU0 * i * r**2 / (2 * (r**2 + (z - zp) ** 2) ** 1.5) * n / length

    value, _ = integrate.quad(loop, -length / 2, length / 2)
    assert physics.solenoid_field_on_axis(n, i, length, r, z_m=z) == pytest.approx(value, rel=1e-10)


def test_long_solenoid_limits() -> None:
    # 8b: B -> mu0 n I and B_end / B_centre -> 1/2 as L/R grows [verified: problem statement]
    n_per_m, i, r = 1000.0, 1.0, 0.01
    length = 100.0
    centre = physics.solenoid_field_on_axis(n_per_m * length, i, length, r)
    end = physics.solenoid_field_on_axis(n_per_m * length, i, length, r, z_m=length / 2)
    assert centre == pytest.approx(physics.long_solenoid_field(n_per_m * length, i, length), rel=1e-7)
    assert end / centre == pytest.approx(0.5, rel=1e-4)


def test_solenoid_inductance_worked_value() -> None:
    # 8b [computed]: mu0 N^2 A / L for N = 500, L = 0.20 m, R = 0.05 m: 12.337 mH
    assert physics.long_solenoid_inductance(500, 0.20, 0.05) == pytest.approx(12.337e-3, rel=1e-4)


# ---- cylindrical capacitor (references 8c) ---------------------------------------------
@pytest.mark.parametrize("eps_r, farads", [(1.0, 8.026074e-12), (2.1, 16.854755e-12)])
def test_cylinder_capacitance_worked_values(eps_r: float, farads: float) -> None:
    # 8c (standard, e.g. Griffiths ch. 2 [from memory]; values [computed])
    assert physics.cylinder_capacitance(0.02, 0.04, 0.10, eps_r) == pytest.approx(farads, rel=1e-6)
    # per metre with b/a = e: 2 pi eps0 = 55.6325 pF/m
    assert physics.cylinder_capacitance(1.0, math.e, 1.0) == pytest.approx(55.6325e-12, rel=1e-6)


def test_cylinder_capacitance_from_gauss_law() -> None:
    # independent: a line charge lambda gives E = lambda / (2 pi eps r); V = integral E dr; C = Q/V
    a, b, length, eps_r, lam = 0.011, 0.029, 0.3, 3.3, 1e-9
    v, _ = integrate.quad(lambda r: lam / (2 * math.pi * physics.EPS0 * eps_r * r), a, b)
    assert physics.cylinder_capacitance(a, b, length, eps_r) == pytest.approx(lam * length / v,
                                                                              rel=1e-10)


def test_charge_on_the_capacitor_worked_value() -> None:
    # 8c: Q = C V for 8a.1 on the vacuum capacitor: 3.0258e-16 C (about 1889 electrons)
    q = physics.cylinder_capacitance(0.02, 0.04, 0.10) * physics.unipolar_emf(TWO_PI, 0.01, 0.02, 0.04)
    assert q == pytest.approx(3.0258e-16, rel=1e-4)
    assert q / constants.e == pytest.approx(1889, abs=1)


def test_charge_sharing_conserves_charge() -> None:
    # independent: charge conservation, Cs V = (Cs + Cin) V' (basic electrostatics)
    cs, cin, v = 8e-12, 30e-12, 2e-5
    shared = physics.shared_voltage(v, cs, cin)
    assert (cs + cin) * shared == pytest.approx(cs * v, rel=1e-12)
    assert physics.shared_voltage(v, cs, 0.0) == v


# ---- Earth's rotation (references 8e) ------------------------------------------------------
@pytest.mark.parametrize("lat, rate", [(45, 5.156304e-5), (52, 5.746265e-5), (90, 7.292115e-5)])
def test_earth_vertical_rate(lat: float, rate: float) -> None:
    # 8e: WGS 84 Omega = 7 292 115.0e-11 rad/s [verified]; Omega sin(lat) [standard]
    assert physics.earth_vertical_rate(lat) == pytest.approx(rate, rel=1e-6)


def test_earth_rate_gives_the_sidereal_day() -> None:
    # 8e consistency check: 2 pi / Omega = 86164.10 s (sidereal day)
    assert TWO_PI / physics.EARTH_RATE_RAD_S == pytest.approx(86164.10, abs=0.01)
    # 8e [computed]: Earth-only EMF for geometry 8a.1 at 45 deg: 3.0938e-10 V
    emf = physics.unipolar_emf(physics.earth_vertical_rate(45), 0.01, 0.02, 0.04)
    assert emf == pytest.approx(3.0938e-10, rel=1e-4)


# ---- coil current (references 9) -------------------------------------------------------------
@pytest.mark.parametrize("t, amps", [(5e-3, 1.896362), (10e-3, 2.593994), (15e-3, 2.850639),
                                     (25e-3, 2.979786)])
def test_rl_rise_worked_values(t: float, amps: float) -> None:
    # 9: 12 V, 4 ohm, 20 mH (Horowitz & Hill ch. 1 [from memory]; values [computed])
    assert physics.rl_current(t, 12.0, 4.0, 20e-3) == pytest.approx(amps, rel=1e-6)


def test_rl_rise_against_an_ode_solver() -> None:
    # independent: integrate L di/dt = V - R i numerically
    v, r, ind = 9.0, 3.0, 0.05
    sol = integrate.solve_ivp(lambda t, i: [(v - r * i[0]) / ind], (0, 0.08), [0.0],
                              t_eval=[0.004, 0.02, 0.06], rtol=1e-10, atol=1e-12)
    for t, i in zip(sol.t, sol.y[0]):
        assert physics.rl_current(t, v, r, ind) == pytest.approx(i, rel=1e-7)
    # 9: 63.21 % at tau, 95.02 % at 3 tau, 99.33 % at 5 tau
    tau = ind / r
    for k, frac in ((1, 0.6321), (3, 0.9502), (5, 0.9933)):
        assert physics.rl_current(k * tau, v, r, ind) / (v / r) == pytest.approx(frac, abs=5e-5)


def test_coil_energy_worked_value() -> None:
    # 9 [computed]: L I^2 / 2 for 20 mH and 3 A is 0.09 J
    assert physics.coil_energy(20e-3, 3.0) == pytest.approx(0.09)


def test_flyback_tail_against_an_ode_solver() -> None:
    # 9: a plain freewheel diode: L di/dt = -(R i + Vd) until the current is zero [derived];
    # independent: integrate and stop at zero current
    i0, r, ind, vd = 2.0, 4.0, 12e-3, 0.7
    hit_zero = lambda t, i: i[0]  # noqa: E731
    hit_zero.terminal = True  # type: ignore[attr-defined]
    sol = integrate.solve_ivp(lambda t, i: [-(r * i[0] + vd) / ind], (0, 1.0), [i0],
                              events=hit_zero, rtol=1e-10, atol=1e-12)
    assert physics.flyback_decay_time(i0, r, ind, vd) == pytest.approx(sol.t_events[0][0], rel=1e-6)
    assert physics.flyback_decay_time(i0, r, ind, 0.0) == math.inf


def test_heating_rule_arithmetic() -> None:
    # the rule itself is common practice (h ~ 10 W/(m^2 K)); only its arithmetic is checked
    p = physics.mean_coil_power(5.0, 4.0, 0.5)
    assert p == 50.0
    assert physics.coil_temperature_rise(p, 0.2, 0.05) == pytest.approx(50 / (10 * TWO_PI * 0.01))


def test_rpm_conversion() -> None:
    # 8a.2: 3200 rev/min = 335.1032 rad/s [computed]
    assert physics.rpm_to_rad_s(3200) == pytest.approx(335.1032, rel=1e-7)
    assert physics.rad_s_to_rpm(physics.rpm_to_rad_s(-60.0)) == pytest.approx(-60.0)


def test_signal_slope_is_the_chain_per_amp_and_rad_s() -> None:
    # gain x C/(C+Cin) x (b^2-a^2)/2 x B/I: one ampere at one rad/s through the whole chain
    c = physics.cylinder_capacitance(0.02, 0.04, 0.1)
    b_per_a = physics.solenoid_field_on_axis(500, 1.0, 0.2, 0.05)
    chain = 100 * physics.shared_voltage(physics.unipolar_emf(1.0, b_per_a, 0.02, 0.04), c, 10e-12)
    assert physics.signal_per_amp_rad_s(0.02, 0.04, b_per_a, 100, c, 10e-12) == pytest.approx(chain)


def test_bad_geometry_is_refused() -> None:
    with pytest.raises(ValueError):
        physics.cylinder_capacitance(0.04, 0.02, 0.1)
    with pytest.raises(ValueError):
        physics.solenoid_field_on_axis(100, 1.0, 0.0, 0.05)
