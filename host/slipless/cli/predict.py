"""`slipless predict` on the command line: options -> RigInputs, a table or JSON."""

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
from slipless.model.predict import CAUTIONS, RigInputs, compute, warnings_for


def inputs_from_args(a: argparse.Namespace) -> RigInputs:
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
        latitude_deg=a.latitude_deg, coil_ohm=a.coil_ohms, duty=a.duty)


def run_predict(args: argparse.Namespace, console: Console) -> int:
    rig = inputs_from_args(args)
    res = compute(rig)
    warns = warnings_for(rig, res)
    if args.json:
        print(json.dumps({"inputs": asdict(rig), "results": res,
                          "assumptions": list(physics.ASSUMPTIONS), "warnings": warns,
                          "cautions": list(CAUTIONS)}, indent=2))
        return 0
    render(rig, res, warns, console)
    return 0


_ROWS = (  # key, label, unit, formula
    ("field_T", "field on the axis (coil centre)", "T", "mu0 N I/(2L) (cos t1 + cos t2)"),
    ("field_long_solenoid_T", "  long-coil value", "T", "mu0 N I / L"),
    ("capacitance_F", "capacitance", "F", "2 pi eps0 eps_r L / ln(b/a)"),
    ("emf_V", "EMF between the cylinders", "V", "w B (b^2 - a^2) / 2"),
    ("charge_C", "  charge on the capacitor", "C", "C V"),
    ("amp_input_V", "at the amplifier input", "V", "V C/(C + Cin)"),
    ("amp_output_V", "at the amplifier output", "V", "gain x input"),
    ("slope_V_per_A_rad_s", "output per A per rad/s", "V/(A rad/s)", "d in `slipless pulses`"),
    ("earth_rate_rad_s", "Earth's rotation, vertical part", "rad/s", "Omega sin(latitude)"),
    ("earth_amp_output_V", "  its output term", "V", "same chain"),
    ("inductance_H", "coil inductance (long-coil estimate)", "H", "mu0 N^2 A / l"),
    ("coil_tau_s", "  rise time constant", "s", "L / R"),
    ("flyback_tail_s", "  tail through a 0.7 V diode", "s", "(L/R) ln(1 + I R / Vd)"),
    ("coil_energy_J", "  energy released at switch-off", "J", "L I^2 / 2"),
    ("coil_mean_power_W", "coil heating, mean", "W", "I^2 R x duty"),
    ("coil_rise_K", "  temperature rise (rule of thumb)", "K", "P / (h 2 pi R L)"),
)


def render(rig: RigInputs, res: dict[str, Any], warns: list[str], console: Console) -> None:
    t = Table(title="model prediction", title_justify="left")
    for col, just in (("quantity", "left"), ("value", "right"), ("formula", "left")):
        t.add_column(col, justify=just)  # type: ignore[arg-type]
    for key, label, unit, formula in _ROWS:
        if key in res:
            t.add_row(label, si(res[key], unit), formula)
    console.print(t)
    lat = "at the pole (no latitude given: the upper bound)" if rig.latitude_deg is None \
        else f"at latitude {rig.latitude_deg:g} deg"
    console.print(f"Earth's rotation {lat}: {res['earth_fraction']:.2g} of the rotor's rate, "
                  f"giving {si(res['earth_amp_output_V'], 'V')} at the output: below any "
                  "resolvable signal on a bench rig.")
    console.print("assumptions (a model, not a verdict):")
    for a in physics.ASSUMPTIONS:
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
    if value == 0 or "/" in unit or unit == "K":
        return f"{value:.4g} {unit}"
    mag = abs(value)
    scale, prefix = _PREFIXES[0]
    for s, p in _PREFIXES:
        if mag >= s:
            scale, prefix = s, p
    return f"{value / scale:.4g} {prefix}{unit}"
