"""`slipless predict`: what the model says a rig should show, with its assumptions.

The numbers come from slipless.model.physics; this module gathers the inputs, checks
them (one clear line for a bad one); cli/predict.py prints a table or JSON. The same
`compute()` feeds the simulated rig and `slipless pulses --prediction`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from slipless.errors import InputError
from slipless.model import physics

DIODE_V = 0.7  # plain silicon freewheel diode, for the flyback tail estimate [common practice]

CAUTIONS = (
    "Switching the coil off gives an inductive kick of L di/dt (hundreds of volts): fit a flyback "
    "diode or TVS across it and respect the H-bridge ratings.",
    "A spinning rotor with a battery on it: secure, balance and guard it, limit its speed, stop "
    "it before handling.",
    "These are estimates. Local codes, your institution's safety rules and licensed practice "
    "take precedence.",
)


@dataclass
class RigInputs:
    """The rig, in SI units. Either coil geometry (turns, length, radius) or a
    measured field at `current_a` gives the field."""

    inner_m: float
    outer_m: float
    current_a: float
    omega_rad_s: float
    cap_length_m: float | None = None
    eps_r: float = 1.0
    turns: float | None = None
    coil_length_m: float | None = None
    coil_radius_m: float | None = None
    field_t: float | None = None
    gain: float = 1.0
    input_f: float = 0.0
    latitude_deg: float | None = None
    coil_ohm: float | None = None
    duty: float = 0.5


def check(r: RigInputs) -> None:
    """Raise InputError naming the first unusable input."""
    if not 0 < r.inner_m < r.outer_m:
        raise InputError("need 0 < --inner-mm < --outer-mm")
    positive = {"--cap-length-mm": r.cap_length_m, "--eps-r": r.eps_r, "--turns": r.turns,
                "--coil-length-mm": r.coil_length_m, "--coil-radius-mm": r.coil_radius_m,
                "--coil-ohms": r.coil_ohm}
    for name, v in positive.items():
        if v is not None and not v > 0:
            raise InputError(f"{name} must be positive")
    if r.input_f < 0:
        raise InputError("--input-pF cannot be negative")
    if not 0 <= r.duty <= 1:
        raise InputError("--duty is a fraction between 0 and 1")
    if r.latitude_deg is not None and not -90 <= r.latitude_deg <= 90:
        raise InputError("--latitude-deg must be between -90 and 90")
    if r.input_f > 0 and r.cap_length_m is None:
        raise InputError("--input-pF needs --cap-length-mm (charge sharing needs the capacitance)")
    geometry = (r.turns, r.coil_length_m, r.coil_radius_m)
    if r.field_t is None and None in geometry:
        raise InputError("give the coil (--turns, --coil-length-mm, --coil-radius-mm) "
                         "or a measured --field-mT")
    if r.field_t is None and r.current_a == 0:
        raise InputError("--amps must not be zero when the field comes from the coil geometry")
    if r.field_t is not None and r.current_a == 0:
        raise InputError("--amps: give the current at which --field-mT was measured")


def compute(r: RigInputs) -> dict[str, Any]:
    """Every predicted quantity, SI units, keyed by name_unit."""
    check(r)
    res: dict[str, Any] = {}
    has_coil = r.turns is not None and r.coil_length_m is not None and r.coil_radius_m is not None
    if r.field_t is not None:
        field = r.field_t
    else:
        assert r.turns and r.coil_length_m and r.coil_radius_m
        field = physics.solenoid_field_on_axis(r.turns, r.current_a, r.coil_length_m,
                                               r.coil_radius_m)
        res["field_long_solenoid_T"] = physics.long_solenoid_field(r.turns, r.current_a,
                                                                   r.coil_length_m)
    res["field_T"] = field
    res["field_T_per_A"] = field / r.current_a
    cap = None
    if r.cap_length_m is not None:
        cap = physics.cylinder_capacitance(r.inner_m, r.outer_m, r.cap_length_m, r.eps_r)
        res["capacitance_F"] = cap
    emf = physics.unipolar_emf(r.omega_rad_s, field, r.inner_m, r.outer_m)
    res["emf_V"] = emf
    amp_in = emf if cap is None else physics.shared_voltage(emf, cap, r.input_f)
    if cap is not None:
        res["charge_C"] = cap * emf
        res["amp_input_V"] = amp_in
    res["amp_output_V"] = r.gain * amp_in
    res["slope_V_per_A_rad_s"] = physics.signal_per_amp_rad_s(
        r.inner_m, r.outer_m, res["field_T_per_A"], r.gain, cap, r.input_f)
    _earth(r, res)
    if has_coil:
        assert r.turns and r.coil_length_m and r.coil_radius_m
        res["inductance_H"] = physics.long_solenoid_inductance(r.turns, r.coil_length_m,
                                                               r.coil_radius_m)
        res["coil_energy_J"] = physics.coil_energy(res["inductance_H"], r.current_a)
    if r.coil_ohm is not None:
        _heating(r, res, has_coil)
    return res


def _earth(r: RigInputs, res: dict[str, Any]) -> None:
    # Without a latitude the pole gives the largest value: report that bound.
    lat = 90.0 if r.latitude_deg is None else r.latitude_deg
    rate = physics.earth_vertical_rate(lat)
    res["earth_rate_rad_s"] = rate
    res["earth_amp_output_V"] = res["slope_V_per_A_rad_s"] * r.current_a * rate
    res["earth_fraction"] = abs(rate / r.omega_rad_s) if r.omega_rad_s else math.inf


def _heating(r: RigInputs, res: dict[str, Any], has_coil: bool) -> None:
    assert r.coil_ohm is not None
    res["coil_mean_power_W"] = physics.mean_coil_power(r.current_a, r.coil_ohm, r.duty)
    if "inductance_H" in res:
        res["coil_tau_s"] = res["inductance_H"] / r.coil_ohm
        res["flyback_tail_s"] = physics.flyback_decay_time(r.current_a, r.coil_ohm,
                                                           res["inductance_H"], DIODE_V)
    if has_coil:
        assert r.coil_length_m and r.coil_radius_m
        res["coil_rise_K"] = physics.coil_temperature_rise(res["coil_mean_power_W"],
                                                           r.coil_length_m, r.coil_radius_m)


def warnings_for(r: RigInputs, res: dict[str, Any]) -> list[str]:
    out = []
    rise = res.get("coil_rise_K")
    if rise is not None and rise > physics.HEATING_LIMIT_K:
        out.append(
            f"coil heating: {res['coil_mean_power_W']:.3g} W mean ({r.current_a:g} A, "
            f"{r.coil_ohm:g} ohm, duty {r.duty:g}) gives about {rise:.0f} K rise in still air, "
            f"above the {physics.HEATING_LIMIT_K:.0f} K rule of thumb (common practice: "
            f"{physics.SURFACE_LOSS_W_M2K:g} W/(m^2 K) over the coil's outer surface). Lower the "
            "current or duty, add cooling or a thermal cut-out.")
    elif r.coil_ohm is not None and rise is None:
        out.append(f"coil heating: {res['coil_mean_power_W']:.3g} W mean; give --coil-length-mm "
                   "and --coil-radius-mm to estimate the temperature rise")
    if r.omega_rad_s == 0:
        out.append("rotation rate is zero: only the Earth's rotation term remains")
    return out
