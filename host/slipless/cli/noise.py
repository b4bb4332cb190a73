"""`slipless noise`: each stream's Welch spectrum and noise floor, its overlapping
Allan deviation with intervals and the IEEE Std 952 terms, and how small a d
(and b) the pulse fit resolves against the number of pulses and run time."""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.table import Table

from slipless.errors import InputError

PLOT_SUFFIXES = (".png", ".svg", ".pdf")
_PULSE_OPTIONS = ("signal", "current", "rotation", "by")


def add_parser(sub: Any) -> None:
    p = sub.add_parser("noise", help="noise per stream (Welch spectrum, Allan deviation, gyro "
                       "terms) and the pulse fit's reach against run time")
    p.add_argument("inputs", nargs="+", type=Path, metavar="INPUT")
    p.add_argument("--mirror", type=Path, action="append", default=[], metavar="FILE",
                   help="the board's file mirror, merged after the inputs (repeatable)")
    p.add_argument("--stream", action="append", metavar="NAME",
                   help="analyse this stream only (repeatable; default: every stream)")
    p.add_argument("--window", metavar="START:END",
                   help="only board time START to END seconds (a quiet stretch, say)")
    p.add_argument("--band", default="1:100", metavar="LOW:HIGH",
                   help="band of the noise floor, Hz (default 1:100, cut at the Nyquist rate)")
    p.add_argument("--nperseg", type=int, metavar="N",
                   help="Welch segment length in samples (default: about 4 s, a power of two)")
    p.add_argument("--interval", type=float, default=None, metavar="LEVEL",
                   help="level of the Allan deviation's intervals (default 0.683, one sigma)")
    rg = p.add_argument_group("reach of the pulse fit")
    rg.add_argument("--prediction", type=Path, metavar="FILE",
                    help="output of `slipless predict --json`: the predicted d and the Earth's term")
    rg.add_argument("--level", type=float, default=0.95,
                    help="confidence level of the smallest resolvable d and b (default 0.95)")
    rg.add_argument("--no-pulses", action="store_true", help="streams only, no pulse analysis")
    rg.add_argument("--signal", metavar="NAME", help="amplifier stream (default cap_amp)")
    rg.add_argument("--current", metavar="NAME", help="coil current stream (default coil_current)")
    rg.add_argument("--rotation", metavar="NAME", help="rotation-rate stream (default gyro_z)")
    rg.add_argument("--by", choices=("current", "sign"), help="s in the fit (default current)")
    p.add_argument("--json", action="store_true", help="print one JSON document instead of tables")
    p.add_argument("--plot", type=Path, metavar="FILE.png",
                   help="write the figure: spectra, Allan deviations, reach")


def pair(text: str | None, option: str) -> tuple[float, float] | None:
    """'A:B' -> (A, B) as floats."""
    if text is None:
        return None
    parts = text.split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        a, b = float(parts[0]), float(parts[1])
    except ValueError:
        raise InputError(f"{option} {text!r}: expected two numbers as A:B, e.g. 1:100") from None
    if not (math.isfinite(a) and math.isfinite(b)):
        raise InputError(f"{option} {text!r}: give finite numbers")
    return a, b


def _check_plot(path: Path | None) -> None:
    if path is None:
        return
    if path.suffix.lower() not in PLOT_SUFFIXES:
        raise InputError(f"--plot {path}: name a .png, .svg or .pdf file")
    if not path.resolve().parent.is_dir():
        raise InputError(f"--plot {path}: folder {path.resolve().parent} does not exist")


def run_noise(args: argparse.Namespace, console: Console) -> int:
    from slipless.noise.allan import ONE_SIGMA
    from slipless.noise.analysis import analyse
    from slipless.noise.document import to_dict
    from slipless.run import open_run

    band, window = pair(args.band, "--band"), pair(args.window, "--window")
    assert band is not None
    _check_plot(args.plot)
    options = {k: getattr(args, k) for k in _PULSE_OPTIONS if getattr(args, k) is not None}
    run = open_run(args.inputs, args.mirror)
    result = analyse(run, args.stream, args.nperseg, band,
                     ONE_SIGMA if args.interval is None else args.interval, window,
                     pulses=not args.no_pulses, pulse_options=options, prediction=args.prediction,
                     reach_level=args.level,
                     pulses_required=bool(options) or args.prediction is not None)
    if args.plot is not None:
        from slipless.noise.plot import save

        save(result, args.plot)
    if args.json:
        print(json.dumps(to_dict(result), indent=1, allow_nan=False))
        return 0
    render(result, console)
    if args.plot is not None:
        console.print(f"figure: {args.plot}")
    return 0


# ---- text -------------------------------------------------------------------------------------
def g(v: float | None, digits: int = 3) -> str:
    return "-" if v is None or not math.isfinite(v) else f"{v:.{digits}g}"


def duration(s: float | None) -> str:
    """Seconds as a person reads them."""
    if s is None or not math.isfinite(s):
        return "-"
    for unit, size, top in (("s", 1, 120), ("min", 60, 7200), ("h", 3600, 172800),
                            ("days", 86400, 2 * 365.25 * 86400)):
        if s < top:
            return f"{s / size:.3g} {unit}"
    return f"{s / (365.25 * 86400):.3g} years"


def render(result: Any, console: Console) -> None:
    _streams(result, console)
    for s in result.streams:
        if s.allan is not None and len(s.allan):
            _allan(s, console)
    if result.sensitivity is not None:
        _reach(result.sensitivity, console)
    elif result.sensitivity_note and result.sensitivity_note != "not asked for":
        console.print(f"reach of the pulse fit: none ({result.sensitivity_note})")


def _streams(result: Any, console: Console) -> None:
    lo, hi = result.band_hz
    t = Table(title=f"noise by stream (floor: median over {lo:g}-{hi:g} Hz)", title_justify="left")
    for col in ("board:run", "stream", "unit", "rate Hz", "spans", "longest", "floor /sqrt(Hz)",
                "N /sqrt(Hz)", "B", "K *sqrt(Hz)"):
        t.add_column(col, justify="left" if col in ("stream", "unit") else "right")
    notes, degrees = [], []
    for s in result.streams:
        terms = s.gyro.all() if s.gyro is not None else ()
        vals = [g(x.value) + ("*" if x.note.startswith("upper") else "") for x in terms] or ["-"] * 3
        deg = ", ".join(f"{x.name} {g(x.deg_value)} {x.deg_unit}" for x in terms
                        if x.deg_value is not None)
        t.add_row(f"{s.board}:{s.run}", s.name, s.unit, f"{s.rate_hz:g}", str(s.spans),
                  duration(s.longest_s), g(s.floor), *vals)
        if deg:
            degrees.append(f"{s.name}: {deg}")
        if s.note:
            notes.append(f"{s.name}: {s.note}")
    console.print(t)
    console.print("N angle random walk (slope -1/2, read at 1 s), B bias instability (minimum / "
                  "0.664; * an upper bound), K rate random walk (slope +1/2, read at 3 s): "
                  "IEEE Std 952's Allan variance method, in each stream's unit. A stream "
                  "carries its signal too (rotation steps, coil pulses): pick a quiet stretch "
                  "with --window for the noise alone.")
    for d in degrees:
        console.print(f"in degrees: {d}")
    for n in notes:
        console.print(f"note: {n}")


def _allan(s: Any, console: Console) -> None:
    from slipless.noise.allan import NOISE_NAMES

    c = s.allan
    t = Table(title=f"{s.name} ({s.board}:{s.run}): overlapping Allan deviation, "
              f"{c.level:.1%} intervals", title_justify="left")
    for col in ("tau s", f"adev {s.unit}", "interval", "edf", "noise type"):
        t.add_column(col, justify="left" if col in ("interval", "noise type") else "right")
    for i in range(len(c)):
        t.add_row(g(float(c.tau_s[i]), 4), g(float(c.adev[i]), 4),
                  f"{g(float(c.lo[i]))} to {g(float(c.hi[i]))}", g(float(c.edf[i])),
                  NOISE_NAMES[int(c.alpha[i])])
    console.print(t)


def _reach(s: Any, console: Console) -> None:
    every = 1 / s.pulse_rate_hz
    t = Table(title=f"reach of the pulse fit: {s.pulses} pulses, one every {every:.3g} s",
              title_justify="left")
    for col in ("pulses", "run time", f"|d| {s.unit_d}", f"|b| {s.unit_b}"):
        t.add_column(col, justify="right")
    for r in s.rows:
        t.add_row(f"{r.pulses:.3g}", duration(r.run_s), g(r.d_min), g(r.b_min))
    console.print(t)
    console.print(f"|d|, |b|: the smallest told from zero at {s.level:.0%} (z se, from the Allan "
                  "deviation of the fit's residuals)")
    if s.predicted_d is not None:
        console.print(f"predicted d {g(s.predicted_d)} {s.unit_d}: "
                      + _needs(s.d_pulses, s.pulses, s.run_s(s.d_pulses), s.se_d))
    if s.earth_b is not None:
        console.print(f"Earth's rotation: its part of the field term b is {g(s.earth_b)} "
                      f"{s.unit_b} (b, not d: it adds one rate to both field signs); a b that "
                      "small is "
                      + _needs(s.earth_pulses, s.pulses, s.run_s(s.earth_pulses), s.se_b)
                      + f". b here is {g(s.b)} {s.unit_b}, mostly field artifact, which would "
                      "have to be known better than the Earth's part to see it.")
    for n in s.notes:
        if not n.startswith("the Earth"):
            console.print(f"note: {n}")


def _needs(pulses: float | None, have: int, run_s: float | None, se: float) -> str:
    if not (math.isfinite(se) and se > 0):
        return "of unknown reach (the fit gave no usable standard error)"
    if pulses is None:
        return "not resolved by averaging: the drift floor stays above it"
    if pulses <= have:
        return f"resolved within these {have} pulses"
    return f"resolved after about {pulses:.3g} pulses, {duration(run_s)} of run"
