"""`slipless predict` on the command line: options -> RigInputs, a table or strict JSON."""

from __future__ import annotations

import argparse
import json
import math
from dataclasses import asdict
from typing import Any

from rich.console import Console
from rich.table import Table

from slipless.errors import InputError
from slipless.model import physics
from slipless.model.predict import (
    CAUTIONS,
    RigInputs,
    assumptions_for,
    compute,
    notes_for,
    warnings_for,
)

# every number the predict parser takes (attribute names; the option is --name-with-dashes)
_NUMBERS = ("inner_mm", "outer_mm", "cap_length_mm", "cap_offset_mm", "eps_r", "turns",
            "coil_length_mm", "coil_radius_mm", "field_mT", "amps", "coil_ohms", "duty", "rpm",
            "rad_per_s", "gain", "input_pF", "feedback_pF", "latitude_deg")


def inputs_from_args(a: argparse.Namespace) -> RigInputs:
    for name in _NUMBERS:  # argparse's float() takes nan and inf: name the option here
        v = getattr(a, name)
        if v is not None and not math.isfinite(v):
            raise InputError(f"--{name.replace('_', '-')} must be a finite number, not {v}")
    mm = 1e-3
    if a.rpm is None and a.rad_per_s is None:
        raise InputError("give the rotation rate: --rpm or --rad-per-s")
    omega = physics.rpm_to_rad_s(a.rpm) if a.rpm is not None else a.rad_per_s
    opt = lambda v, k: None if v is None else v * k  # noqa: E731
    return RigInputs(
        inner_m=a.inner_mm * mm, outer_m=a.outer_mm * mm, current_a=a.amps, omega_rad_s=omega,
        cap_length_m=opt(a.cap_length_mm, mm), eps_r=a.eps_r, turns=a.turns,
        coil_length_m=opt(a.coil_length_mm, mm), coil_radius_m=opt(a.coil_radius_mm, mm),
        field_t=opt(a.field_mT, 1e-3), gain=a.gain, input_f=a.input_pF * 1e-12,
        latitude_deg=a.latitude_deg, coil_ohm=a.coil_ohms, duty=a.duty,
        feedback_f=opt(a.feedback_pF, 1e-12), cap_offset_m=a.cap_offset_mm * mm)


def run_predict(args: argparse.Namespace, console: Console) -> int:
    rig = inputs_from_args(args)
    res = compute(rig)
    warns = warnings_for(rig, res)
    notes = notes_for(rig, res)
    if args.json:
        doc = {"inputs": asdict(rig), "amplifier_mode": rig.mode, "results": res,
               "notes": notes, "assumptions": assumptions_for(rig), "warnings": warns,
               "cautions": list(CAUTIONS)}
        print(json.dumps(strict(doc), indent=2, allow_nan=False))
        return 0
    render(rig, res, notes, warns, console)
    return 0


def strict(value: Any) -> Any:
    """The same structure with every non-finite number as None (null): strict JSON."""
    if isinstance(value, dict):
        return {k: strict(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [strict(v) for v in value]
    if isinstance(value, float):
        return float(value) if math.isfinite(value) else None
    return value


_ROWS = (  # key, label, unit, formula
    ("field_T", "field on the axis (coil centre)", "T", "mu0 N I/(2L) (cos t1 + cos t2)"),
    ("field_long_solenoid_T", "  long-coil value", "T", "mu0 N I / L"),
    ("field_mean_T", "field over the annulus, length mean", "T", "<flux a..b> / (pi (b^2 - a^2))"),
    ("capacitance_F", "capacitance", "F", "2 pi eps0 eps_r L / ln(b/a)"),
    ("emf_V", "EMF between the cylinders", "V", "w <flux a..b> / (2 pi)"),
    ("emf_centre_V", "  from the centre field", "V", "w B (b^2 - a^2) / 2"),
    ("charge_C", "  charge on the capacitor", "C", "C V"),
    ("amp_input_V", "at the amplifier input", "V", "V C/(C + Cin)"),
    ("feedback_F", "charge amplifier feedback", "F", "Cf"),
    ("amp_output_V", "at the amplifier output", "V", "gain x input"),
    ("slope_V_per_A_rad_s", "output per A per rad/s", "V/(A rad/s)", "d in `slipless pulses`"),
    ("rim_speed_m_s", "rim speed at the outer cylinder", "m/s", "|w| b"),
    ("earth_rate_rad_s", "Earth's rotation, vertical part", "rad/s", "Omega sin(latitude)"),
    ("earth_b_V_per_A", "  its term in b", "V/A", "d Omega sin(latitude)"),
    ("earth_amp_output_V", "  its output term", "V", "same chain"),
    ("inductance_H", "coil inductance (Nagaoka)", "H", "K mu0 N^2 A / l"),
    ("nagaoka_K", "  Nagaoka's coefficient", "", "K(2R/l), elliptic integrals"),
    ("inductance_long_solenoid_H", "  long-coil value", "H", "mu0 N^2 A / l"),
    ("coil_tau_s", "  rise time constant", "s", "L / R"),
    ("flyback_tail_s", "  tail through a 0.7 V diode", "s", "(L/R) ln(1 + I R / Vd)"),
    ("coil_energy_J", "  energy released at switch-off", "J", "L I^2 / 2"),
    ("coil_mean_power_W", "coil heating, mean", "W", "I^2 R x duty"),
    ("coil_rise_K", "  temperature rise (rule of thumb)", "K", "P / (h 2 pi R L)"),
)
_CHARGE_FORMULA = {"amp_output_V": "gain x Q / Cf"}


def render(rig: RigInputs, res: dict[str, Any], notes: list[str], warns: list[str],
           console: Console) -> None:
    t = Table(title=f"model prediction ({rig.mode} amplifier)", title_justify="left")
    for col, just in (("quantity", "left"), ("value", "right"), ("formula", "left")):
        t.add_column(col, justify=just)  # type: ignore[arg-type]
    for key, label, unit, formula in _ROWS:
        if res.get(key) is not None:
            if rig.mode == "charge":
                formula = _CHARGE_FORMULA.get(key, formula)
            t.add_row(label, si(res[key], unit), formula)
    console.print(t)
    lat = "at the pole (no latitude given: the upper bound)" if rig.latitude_deg is None \
        else f"at latitude {rig.latitude_deg:g} deg"
    share = "the rotor is stopped" if res["earth_fraction"] is None \
        else f"{res['earth_fraction']:.2g} of the rotor's rate"
    console.print(f"Earth's rotation {lat}: {si(res['earth_rate_rad_s'], 'rad/s')}, {share}.")
    console.print("notes:")
    for n in notes:
        console.print(f"  - {n}", highlight=False)
    console.print("assumptions (a model, not a verdict):")
    for a in assumptions_for(rig):
        console.print(f"  - {a}")
    for w in warns:
        console.print(f"[bold]warning:[/bold] {w}")
    console.print("cautions:")
    for c in CAUTIONS:
        console.print(f"  - {c}")


_PREFIXES = ((1e-15, "f"), (1e-12, "p"), (1e-9, "n"), (1e-6, "u"), (1e-3, "m"), (1.0, ""),
             (1e3, "k"), (1e6, "M"))


def si(value: float, unit: str) -> str:
    """4 significant figures with an SI prefix (plain units like 'V/(A rad/s)' stay plain)."""
    if not math.isfinite(value):
        return f"{value} {unit}"
    if value == 0 or "/" in unit or unit in ("K", ""):
        return f"{value:.4g} {unit}"
    mag = abs(value)
    scale, prefix = _PREFIXES[0]
    for s, p in _PREFIXES:
        if mag >= s:
            scale, prefix = s, p
    return f"{value / scale:.4g} {prefix}{unit}"
