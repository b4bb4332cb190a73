"""`slipless align` on the command line: options, the clock-model table, JSON.

Kept apart from align.py so building the parser imports no numpy or scipy.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from rich.console import Console

from slipless.align.period import UNITS_NS as _UNITS_NS
from slipless.align.period import parse_period, parse_signed_time
from slipless.cli.text_tables import column, print_table, table


def period_ns(text: str) -> int:
    """'1ms', '10ms', '0.5s', '250us' -> nanoseconds (an argparse type)."""
    try:
        return parse_period(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from exc


def signed_ns(text: str) -> int:
    """'1.4ms', '-0.3ms', '0ms' -> nanoseconds (an argparse type)."""
    try:
        return parse_signed_time(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from exc


def add_parser(sub: Any) -> None:
    from slipless.decode.tables import FORMATS

    a = sub.add_parser("align", help="put every board's samples on the laptop's clock and a common grid")
    a.add_argument("inputs", nargs="+", type=Path, metavar="INPUT")
    a.add_argument("--grid", type=period_ns, required=True, metavar="PERIOD",
                   help="spacing of the wide table, e.g. 1ms, 10ms, 0.5s")
    a.add_argument("--out", type=Path, required=True, metavar="DIR", help="folder for the tables")
    a.add_argument("--mirror", type=Path, action="append", default=[], metavar="FILE",
                   help="the board's file mirror, merged after the inputs (repeatable)")
    a.add_argument("--window", type=period_ns, default=period_ns("10min"), metavar="PERIOD",
                   help="longest piece of the clock model (default 10min); pieces of a half, "
                        "quarter or eighth of it where the data ask (a bending clock)")
    a.add_argument("--asymmetry", type=signed_ns, default=0, metavar="TIME",
                   help="least latency board -> laptop minus laptop -> board, e.g. 1.4ms for "
                        "notifications with a long air time (default 0: equal both ways)")
    a.add_argument("--format", choices=FORMATS, default="csv", help="table format (default csv)")
    a.add_argument("--json", action="store_true", help="print the clock model as JSON instead of a table")
    a.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    a.add_argument("--calibration", type=Path, metavar="FILE",
                   help="a calibration from `slipless calibrate`: corrected values in the tables")


def run_align(args: argparse.Namespace, console: Console) -> int:
    from slipless.run import open_run

    show = not (args.quiet or args.json)
    from slipless.cli.progress import bytes_progress
    from slipless.io.folders import out_folder

    out_folder(args.out)  # before the decoding, not after it
    cal = None
    if args.calibration is not None:
        from slipless.calib.file import load

        cal = load(args.calibration)  # a bad file fails before any decoding
    run = open_run(args.inputs, args.mirror, progress=bytes_progress(console if show else None))
    if cal is not None:
        done = run.calibrate(cal)
        if show:
            console.print(f"calibration {args.calibration.name}: "
                          f"{', '.join(done) or 'no stream of these inputs'} corrected")
    from slipless.align.aligned import align_collected

    result = align_collected(run.collected, args.out, args.format, args.grid, args.window / 1e9,
                             args.asymmetry / 1e9)
    if args.json:
        print(json.dumps(result.to_json(), indent=2))
        return 0
    if args.quiet:
        return 0
    print_models(result, console)
    console.print(f"grid: {result.grid_rows:,} rows x {len(result.grid_columns)} channels "
                  f"every {_fmt_period(args.grid)} ({result.grid_clock})")
    console.print(f"aligned tables written to {args.out}/ (samples, events, status, grid, clock.json)")
    return 0


def _fmt_period(ns: int) -> str:
    for unit in ("h", "min", "s", "ms", "us"):
        if ns % _UNITS_NS[unit] == 0:
            return f"{ns // _UNITS_NS[unit]}{unit}"
    return f"{ns}ns"


def print_models(result: Any, console: Console) -> None:
    t = table("clock model: board time -> laptop time")
    for name in ("board", "run", "frames", "syncs", "skew ppm", "per piece", "offset s",
                 "delay ms", "± ms", "basis"):
        column(t, name)
    notes = list(result.notes)
    for (b, r), c in sorted(result.clocks.items()):
        m = c.model
        notes += [f"board {b} run {r}: {n}" for n in c.notes + (m.notes if m is not None else [])]
        if m is None:
            t.add_row(str(b), str(r), *(["-"] * 7), "none")
            continue
        ws = m.window_skews_ppm
        t.add_row(str(b), str(r), f"{m.points:,}", f"{m.kept}/{m.exchanges}", f"{m.skew_ppm:+.3f}",
                  f"{ws.min():+.2f}..{ws.max():+.2f}" if ws.size > 1 else "-", f"{m.offset_s():.6f}",
                  f"{m.delay_p50_s * 1e3:.1f}/{m.delay_p95_s * 1e3:.1f}",
                  f"{m.uncertainty_s * 1e3:.3f}", "sync+rx" if m.kept else "rx only")
    print_table(console, t)
    console.print("skew: board clock rate over the laptop's, minus one (+ = board fast), overall "
                  "and per piece; offset: laptop monotonic minus board time at the first timed frame; "
                  "delay: one-way delay above the fit, median/95th percentile (the residual spread); "
                  "±: bound on the mapped time's error over the run (align/clockmodel.py says how it is "
                  "made); basis: time-sync exchanges and receive times, or receive times only")
    if any(c.model is not None and c.model.kept for c in result.clocks.values()):
        asym = max((abs(c.model.asymmetry_s) for c in result.clocks.values() if c.model is not None),
                   default=0.0)
        split = "equal both ways" if asym == 0 else "as --asymmetry says"
        notes.append(f"level: the pings measure the sum of both ways' least latency, not its split; "
                     f"it is taken {split} (a notification's longer air time makes the board -> "
                     "laptop way slower and the laptop times late by half the difference)")
    if any(c.model is not None and not c.model.kept for c in result.clocks.values()):
        notes.append("one-way only: without time-sync exchanges the laptop time includes the link's "
                     "least latency, which receive times alone cannot measure (not in ±)")
    for n in notes:
        console.print(f"note: {n}")
