"""`slipless predict`: what the model says a rig should show, with its assumptions.

The numbers come from slipless.model.physics; this module gathers the inputs, checks
them (one clear line for a bad one); cli/predict.py prints a table or JSON. The same
`compute()` feeds the simulated rig and `slipless pulses --prediction`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Any

from slipless.errors import InputError
from slipless.model import physics

DIODE_V = 0.7  # plain silicon freewheel diode, for the flyback tail estimate [common practice]

# Bench rotors carrying a board and a cell are run far below the few hundred m/s at which
# solid rotors burst; past RIM_WARN_M_S we warn, past RIM_REFUSE_M_S no bench rotor survives
# (the input is surely a unit slip) [common practice]. Same for the coil current: a bench
# coil on an H-bridge carries amperes to tens of amperes [common practice].
RIM_WARN_M_S = 100.0
RIM_REFUSE_M_S = 1000.0
AMPS_WARN = 100.0

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
    measured field at `current_a` gives the field. A feedback capacitance selects the
    charge-amplifier mode; without it the amplifier is a voltage amplifier."""

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
    feedback_f: float | None = None
    cap_offset_m: float = 0.0

    @property
    def has_coil(self) -> bool:
        return None not in (self.turns, self.coil_length_m, self.coil_radius_m)

    @property
    def mode(self) -> str:
        return "voltage" if self.feedback_f is None else "charge"


# the command-line option behind each input, for the one-line errors
OPTION = {"inner_m": "--inner-mm", "outer_m": "--outer-mm", "current_a": "--amps",
          "omega_rad_s": "--rpm/--rad-per-s", "cap_length_m": "--cap-length-mm",
          "eps_r": "--eps-r", "turns": "--turns", "coil_length_m": "--coil-length-mm",
          "coil_radius_m": "--coil-radius-mm", "field_t": "--field-mT", "gain": "--gain",
          "input_f": "--input-pF", "latitude_deg": "--latitude-deg", "coil_ohm": "--coil-ohms",
          "duty": "--duty", "feedback_f": "--feedback-pF", "cap_offset_m": "--cap-offset-mm"}


def check(r: RigInputs) -> None:
    """Raise InputError naming the first unusable input."""
    for f in fields(r):
        v = getattr(r, f.name)
        if v is not None and not math.isfinite(v):
            raise InputError(f"{OPTION.get(f.name, f.name)} must be a finite number, not {v}")
    if not 0 < r.inner_m < r.outer_m:
        raise InputError("need 0 < --inner-mm < --outer-mm")
    for name in ("cap_length_m", "eps_r", "turns", "coil_length_m", "coil_radius_m", "coil_ohm",
                 "feedback_f"):
        v = getattr(r, name)
        if v is not None and not v > 0:
            raise InputError(f"{OPTION[name]} must be positive")
    if r.input_f < 0:
        raise InputError("--input-pF cannot be negative")
    if not 0 <= r.duty <= 1:
        raise InputError("--duty is a fraction between 0 and 1")
    if r.latitude_deg is not None and not -90 <= r.latitude_deg <= 90:
        raise InputError("--latitude-deg must be between -90 and 90")
    if r.input_f > 0 and r.cap_length_m is None:
        raise InputError("--input-pF needs --cap-length-mm (charge sharing needs the capacitance)")
    if r.feedback_f is not None and r.cap_length_m is None:
        raise InputError("--feedback-pF needs --cap-length-mm (the charge needs the capacitance)")
    if r.field_t is None and not r.has_coil:
        raise InputError("give the coil (--turns, --coil-length-mm, --coil-radius-mm) "
                         "or a measured --field-mT")
    if r.cap_offset_m != 0 and not r.has_coil:
        raise InputError("--cap-offset-mm needs the coil (--turns, --coil-length-mm, "
                         "--coil-radius-mm): a measured field has no profile to shift along")
    if r.field_t is None and r.current_a == 0:
        raise InputError("--amps must not be zero when the field comes from the coil geometry")
    if r.field_t is not None and r.current_a == 0:
        raise InputError("--amps: give the current at which --field-mT was measured")
    rim = abs(r.omega_rad_s) * r.outer_m
    if rim > RIM_REFUSE_M_S:
        raise InputError(f"--rpm/--rad-per-s: a rim speed of {rim:.0f} m/s at the outer "
                         f"cylinder is beyond any bench rotor (over {RIM_REFUSE_M_S:.0f} m/s); "
                         "check the units")


def compute(r: RigInputs) -> dict[str, Any]:
    """Every predicted quantity, SI units, keyed by name_unit (None: not defined here)."""
    check(r)
    res: dict[str, Any] = {}
    _field(r, res)
    cap = None
    if r.cap_length_m is not None:
        cap = physics.cylinder_capacitance(r.inner_m, r.outer_m, r.cap_length_m, r.eps_r)
        res["capacitance_F"] = cap
    emf = physics.unipolar_emf(r.omega_rad_s, res["field_mean_T"], r.inner_m, r.outer_m)
    res["emf_V"] = emf
    if r.has_coil:
        res["emf_centre_V"] = physics.unipolar_emf(r.omega_rad_s, res["field_T"], r.inner_m,
                                                   r.outer_m)
    _amplifier(r, res, cap, emf)
    res["slope_V_per_A_rad_s"] = physics.signal_per_amp_rad_s(
        r.inner_m, r.outer_m, res["field_mean_T_per_A"], r.gain, cap, r.input_f, r.feedback_f)
    res["rim_speed_m_s"] = abs(r.omega_rad_s) * r.outer_m
    _earth(r, res)
    if r.has_coil:
        assert r.turns and r.coil_length_m and r.coil_radius_m
        res["nagaoka_K"] = float(physics.nagaoka_coefficient(r.coil_length_m, r.coil_radius_m))
        res["inductance_H"] = float(physics.solenoid_inductance(r.turns, r.coil_length_m,
                                                                r.coil_radius_m))
        res["inductance_long_solenoid_H"] = physics.long_solenoid_inductance(
            r.turns, r.coil_length_m, r.coil_radius_m)
        res["coil_energy_J"] = physics.coil_energy(res["inductance_H"], r.current_a)
    if r.coil_ohm is not None:
        _heating(r, res)
    return res


def _field(r: RigInputs, res: dict[str, Any]) -> None:
    """field_T: on the axis at the coil centre (or as measured); field_mean_T: the uniform
    field that gives the same EMF, from the coil's flux through the annulus averaged over
    the capacitor's length (a measured field is scaled by the coil's profile when the
    coil is given too, and taken as uniform when it is not)."""
    field = r.field_t
    if r.has_coil:
        assert r.turns and r.coil_length_m and r.coil_radius_m
        centre = physics.solenoid_field_on_axis(r.turns, r.current_a, r.coil_length_m,
                                                r.coil_radius_m)
        res["field_long_solenoid_T"] = physics.long_solenoid_field(r.turns, r.current_a,
                                                                   r.coil_length_m)
        per = physics.annulus_emf(1.0, r.turns, 1.0, r.coil_length_m, r.coil_radius_m,
                                  r.inner_m, r.outer_m, r.cap_length_m or 0.0, r.cap_offset_m)
        shape = per / physics.unipolar_emf(1.0, centre / r.current_a, r.inner_m, r.outer_m)
        field = centre if field is None else field
        res["field_T"] = field
        res["field_mean_T"] = field * shape
        res["emf_centre_over_mean"] = 1.0 / shape
    else:
        assert field is not None
        res["field_T"] = res["field_mean_T"] = field
    res["field_T_per_A"] = res["field_T"] / r.current_a
    res["field_mean_T_per_A"] = res["field_mean_T"] / r.current_a


def _amplifier(r: RigInputs, res: dict[str, Any], cap: float | None, emf: float) -> None:
    if cap is not None:
        res["charge_C"] = cap * emf
    if r.feedback_f is not None:
        assert cap is not None
        res["feedback_F"] = r.feedback_f
        res["amp_output_V"] = r.gain * physics.charge_amp_output(emf, cap, r.feedback_f)
        return
    amp_in = emf if cap is None else physics.shared_voltage(emf, cap, r.input_f)
    if cap is not None:
        res["amp_input_V"] = amp_in
    res["amp_output_V"] = r.gain * amp_in


def _earth(r: RigInputs, res: dict[str, Any]) -> None:
    # Without a latitude the pole gives the largest value: report that bound.
    lat = 90.0 if r.latitude_deg is None else r.latitude_deg
    rate = physics.earth_vertical_rate(lat)
    res["earth_rate_rad_s"] = rate
    res["earth_b_V_per_A"] = res["slope_V_per_A_rad_s"] * rate
    res["earth_amp_output_V"] = res["earth_b_V_per_A"] * r.current_a
    # a stopped rotor has no rate to compare with: no ratio rather than an infinite one
    res["earth_fraction"] = abs(rate / r.omega_rad_s) if r.omega_rad_s else None


def _heating(r: RigInputs, res: dict[str, Any]) -> None:
    assert r.coil_ohm is not None
    res["coil_mean_power_W"] = physics.mean_coil_power(r.current_a, r.coil_ohm, r.duty)
    if "inductance_H" in res:
        res["coil_tau_s"] = res["inductance_H"] / r.coil_ohm
        res["flyback_tail_s"] = physics.flyback_decay_time(r.current_a, r.coil_ohm,
                                                           res["inductance_H"], DIODE_V)
    if r.has_coil:
        assert r.coil_length_m and r.coil_radius_m
        res["coil_rise_K"] = physics.coil_temperature_rise(res["coil_mean_power_W"],
                                                           r.coil_length_m, r.coil_radius_m)


CHARGE_AMP_ASSUMPTION = ("charge amplifier ideal: open-loop gain high enough that its input "
                         "stays at virtual earth, no leakage across the capacitor or feedback")


def assumptions_for(r: RigInputs) -> list[str]:
    """The model's assumptions; a charge amplifier replaces the charge-sharing one."""
    if r.mode == "voltage":
        return list(physics.ASSUMPTIONS)
    return [CHARGE_AMP_ASSUMPTION if a.startswith("induced charge shared") else a
            for a in physics.ASSUMPTIONS]


def notes_for(r: RigInputs, res: dict[str, Any]) -> list[str]:
    """What the numbers mean: the amplifier's mode, the field model, the Earth's term."""
    out = [amplifier_note(r)]
    if r.has_coil:
        scaled = "" if r.field_t is None else " (its profile scaled to the measured --field-mT)"
        out.append(f"EMF from the coil's flux{scaled} through the annulus between the cylinders "
                   f"{_span(r)}: the on-axis value at the coil centre would give "
                   f"{res['emf_centre_over_mean']:.4g} times it")
    out.append(earth_note(r, res))
    return out


def amplifier_note(r: RigInputs) -> str:
    if r.mode == "charge":
        return ("amplifier: charge amplifier, output = gain x C x EMF / Cf (its input a virtual "
                "earth; an inverting stage gives the opposite sign)")
    return "amplifier: voltage amplifier, output = gain x EMF x C / (C + Cin)"


def earth_note(r: RigInputs, res: dict[str, Any]) -> str:
    return ("the Earth's rotation adds the same rate to the rotor's in both field signs and in "
            "every rotation condition, the stopped runs too: with w the rate against the bench, "
            "its induction term is field-odd and rotation-even within a run, so `slipless "
            f"pulses` puts it in the field term b, not in d: {res['earth_b_V_per_A']:.3g} V/A, "
            f"{res['earth_amp_output_V']:.3g} V at {r.current_a:g} A (a rotation channel that "
            "includes the Earth's rate, as a perfect gyro would, carries it into d instead)")


def _span(r: RigInputs) -> str:
    at = "at the coil's centre" if r.cap_offset_m == 0 else \
        f"{r.cap_offset_m * 1e3:g} mm from the coil's centre"
    if r.cap_length_m is None:
        return f"in the plane {at} (no --cap-length-mm to average over)"
    return f"averaged over the capacitor's {r.cap_length_m * 1e3:g} mm length, its middle {at}"


def warnings_for(r: RigInputs, res: dict[str, Any]) -> list[str]:
    out = _heating_warnings(r, res) + _fit_warnings(r, res)
    rim = res["rim_speed_m_s"]
    if rim > RIM_WARN_M_S:
        out.append(f"rim speed {rim:.0f} m/s at the outer cylinder (radius "
                   f"{r.outer_m * 1e3:g} mm): bench rotors are run far below the few hundred "
                   f"m/s at which solid rotors burst (common practice: warn above "
                   f"{RIM_WARN_M_S:.0f} m/s); check the speed and guard the rotor")
    if abs(r.current_a) > AMPS_WARN:
        out.append(f"--amps {r.current_a:g}: far beyond a bench coil on an H-bridge (common "
                   f"practice: warn above {AMPS_WARN:.0f} A); check the units and the drive")
    if r.mode == "charge" and r.input_f > 0:
        out.append("--input-pF is not used with --feedback-pF: an ideal charge amplifier holds "
                   "its input at virtual earth, so the cable capacitance takes no charge")
    if r.omega_rad_s == 0:
        out.append("rotation rate is zero: only the Earth's rotation term remains")
    return out


def _heating_warnings(r: RigInputs, res: dict[str, Any]) -> list[str]:
    rise = res.get("coil_rise_K")
    if rise is not None and rise > physics.HEATING_LIMIT_K:
        return [
            f"coil heating: {res['coil_mean_power_W']:.3g} W mean ({r.current_a:g} A, "
            f"{r.coil_ohm:g} ohm, duty {r.duty:g}) gives about {rise:.0f} K rise in still air, "
            f"above the {physics.HEATING_LIMIT_K:.0f} K rule of thumb (common practice: "
            f"{physics.SURFACE_LOSS_W_M2K:g} W/(m^2 K) over the coil's outer surface). Lower the "
            "current or duty, add cooling or a thermal cut-out."]
    if r.coil_ohm is not None and rise is None:
        return [f"coil heating: {res['coil_mean_power_W']:.3g} W mean; give --coil-length-mm "
                "and --coil-radius-mm to estimate the temperature rise"]
    return []


def _fit_warnings(r: RigInputs, res: dict[str, Any]) -> list[str]:
    """Does the capacitor fit inside the coil?"""
    if not r.has_coil:
        return []
    assert r.coil_length_m and r.coil_radius_m
    out = []
    if r.outer_m >= r.coil_radius_m:
        out.append(f"the capacitor does not fit inside the coil: its outer radius "
                   f"{r.outer_m * 1e3:g} mm is not below the coil's {r.coil_radius_m * 1e3:g} mm "
                   "(the model counts the field at and beyond the winding, but the "
                   "cylinder would have to pass through it)")
    half = (r.cap_length_m or 0.0) / 2.0
    lo, hi = r.cap_offset_m - half, r.cap_offset_m + half
    if lo < -r.coil_length_m / 2.0 or hi > r.coil_length_m / 2.0:
        out.append(f"the capacitor ({lo * 1e3:g} to {hi * 1e3:g} mm from the coil's centre) "
                   f"reaches past the coil's ends (+-{r.coil_length_m * 500:g} mm): its ends sit "
                   "in the fringe field, which the averaged flux counts; the centre value "
                   f"would over-predict by {res['emf_centre_over_mean']:.3g}x")
    return out
