"""`slipless pulses`: the command (its options are in analysis_args.py).

Captures, raw streams and mirror files are decoded once into a Run; folders
written by `slipless decode` are read back as tables.
"""

from __future__ import annotations

import argparse

from rich.console import Console

from slipless.errors import InputError


def run_pulses(args: argparse.Namespace, console: Console) -> int:
    from slipless.cli.pulses_text import print_report
    from slipless.pulses.analysis import analyse, settings_from_args
    from slipless.pulses.data import read_tables
    from slipless.pulses.report import write_outputs
    from slipless.run import open_run

    st, opt = settings_from_args(args)
    if opt.calibration is not None and any(d.is_dir() for d in args.inputs):
        raise InputError("--calibration applies to captures, raw streams and mirror files: a "
                         "folder of decoded tables holds values already scaled")
    runs = [rd for d in args.inputs if d.is_dir() for rd in read_tables(d)]
    files = [p for p in args.inputs if not p.is_dir()]
    if files or args.mirror:
        run = open_run(files, args.mirror)
        if opt.calibration is not None:
            run.calibrate(opt.calibration)
        decoded = run.pulse_runs()
        if not decoded:
            names = ", ".join(str(p) for p in [*files, *args.mirror])
            raise InputError(f"{names}: no slipless frames found (not a capture, or wholly damaged)")
        runs += decoded
    result = analyse(runs, st, opt)
    paths = write_outputs(result, args.out, args.format, plots=not args.no_plots)
    if not args.quiet:
        print_report(result, console)
        console.print(f"written to {args.out}/: {', '.join(p.name for p in paths)}")
    return 0
