"""`slipless report` options (argparse only, quick import; the work is in report.py)."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from rich.console import Console

from slipless.cli.analysis_args import STREAM_OPTIONS, add_stream_options
from slipless.errors import InputError


def add_parser(sub: Any) -> None:
    p = sub.add_parser("report", help="one self-contained HTML page about a run (plots embedded)")
    p.add_argument("inputs", nargs="+", type=Path, metavar="INPUT",
                   help="captures, raw streams, or folders written by `slipless decode` "
                        "(their inputs.json leads to the captures, checked by SHA-256)")
    p.add_argument("--out", type=Path, required=True, metavar="FILE.html")
    p.add_argument("--mirror", type=Path, action="append", default=[], metavar="FILE",
                   help="the board's file mirror, merged after the inputs (repeatable)")
    p.add_argument("--prediction", type=Path, metavar="FILE",
                   help="`slipless predict --json` output, for the contrast with the model")
    p.add_argument("--title", default="slipless run report")
    p.add_argument("--calibration", type=Path, metavar="FILE",
                   help="a calibration from `slipless calibrate`: streams corrected first")
    add_stream_options(p)


def run_report(args: argparse.Namespace, console: Console) -> int:
    check_out(args.out)
    from slipless.report.decoded import split_inputs
    from slipless.report.page import collect, write
    from slipless.run import open_run

    if args.calibration is not None:
        from slipless.calib.file import load

        load(args.calibration)  # a bad file fails before any decoding
    given = split_inputs(args.inputs, args.mirror)  # decode folders: checked before decoding
    streams = {k: getattr(args, k) for k in STREAM_OPTIONS}
    data = collect(open_run(given.inputs, given.mirrors), args.prediction, args.calibration,
                   streams=streams)
    data.unchecked = given.unchecked
    write(data, args.out, args.title)
    console.print(f"report written to {args.out}")
    return 0


def check_out(out: Path) -> None:
    if out.suffix.lower() not in (".html", ".htm"):
        raise InputError(f"--out {out}: name an .html file")
    if not out.resolve().parent.is_dir():
        raise InputError(f"--out {out}: folder {out.resolve().parent} does not exist")
