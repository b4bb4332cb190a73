"""`slipless report` options (argparse only, quick import; the work is in report.py)."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from rich.console import Console

from slipless.errors import InputError


def add_parser(sub: Any) -> None:
    p = sub.add_parser("report", help="one self-contained HTML page about a run (plots embedded)")
    p.add_argument("inputs", nargs="+", type=Path, metavar="INPUT")
    p.add_argument("--out", type=Path, required=True, metavar="FILE.html")
    p.add_argument("--mirror", type=Path, action="append", default=[], metavar="FILE",
                   help="the board's file mirror, merged after the inputs (repeatable)")
    p.add_argument("--prediction", type=Path, metavar="FILE",
                   help="`slipless predict --json` output, for the contrast with the model")
    p.add_argument("--title", default="slipless run report")
    p.add_argument("--calibration", type=Path, metavar="FILE",
                   help="a calibration from `slipless calibrate`: streams corrected first")


def run_report(args: argparse.Namespace, console: Console) -> int:
    _check_out(args.out)
    from slipless.report.page import collect, write
    from slipless.run import open_run

    if args.calibration is not None:
        from slipless.calib.file import load

        load(args.calibration)  # a bad file fails before any decoding
    data = collect(open_run(args.inputs, args.mirror), args.prediction, args.calibration)
    write(data, args.out, args.title)
    console.print(f"report written to {args.out}")
    return 0


def _check_out(out: Path) -> None:
    if out.suffix.lower() not in (".html", ".htm"):
        raise InputError(f"--out {out}: name an .html file")
    if not out.resolve().parent.is_dir():
        raise InputError(f"--out {out}: folder {out.resolve().parent} does not exist")
