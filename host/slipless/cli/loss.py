"""`slipless loss`: was the record complete, and if not, what is missing, when and why.

Exit status: 0 when the share of frames never obtained is at or under
--max-loss (without --max-loss any loss passes), 3 when over it (one line on
stderr says by how much), 2 for bad input.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from rich.console import Console

from slipless.errors import InputError

EXIT_OVER = 3
PLOT_SUFFIXES = (".png", ".svg", ".pdf")


def add_parser(sub: Any) -> None:
    p = sub.add_parser("loss", help="account for every frame and sample: what was lost, when, why")
    p.add_argument("inputs", nargs="+", type=Path, metavar="INPUT")
    p.add_argument("--mirror", type=Path, action="append", default=[], metavar="FILE",
                   help="the board's file mirror, merged after the inputs (repeatable)")
    p.add_argument("--json", action="store_true", help="print one JSON document instead of tables")
    p.add_argument("--max-loss", type=float, metavar="PERCENT",
                   help="exit 3 when more than PERCENT of the frames are missing (default: report only)")
    p.add_argument("--plot", type=Path, metavar="FILE.png", help="write the timeline (and angle) figure")
    p.add_argument("--angle-stream", metavar="NAME",
                   help="rotation-rate stream to integrate for the rotor angle "
                        "(default: the first stream with a rate unit such as rad/s)")
    p.add_argument("--index-marker", type=int, metavar="N",
                   help="take the angle from marker events with value N, one per revolution")
    p.add_argument("--angle-bins", type=int, default=12, metavar="N",
                   help="angle bins over a turn (default 12, i.e. 30 degrees)")
    p.add_argument("--gmin", type=int, default=16, metavar="N",
                   help="arrivals in a row that end a burst (RFC 3611 Gmin, default 16)")


def _check_options(args: argparse.Namespace) -> None:
    if args.max_loss is not None and not 0 <= args.max_loss <= 100:
        raise InputError(f"--max-loss {args.max_loss:g}: give a percentage from 0 to 100")
    if not 1 <= args.angle_bins <= 360:
        raise InputError(f"--angle-bins {args.angle_bins}: give 1 to 360")
    if args.gmin < 1:
        raise InputError(f"--gmin {args.gmin}: give 1 or more")
    if args.plot is not None:
        if args.plot.suffix.lower() not in PLOT_SUFFIXES:
            raise InputError(f"--plot {args.plot}: name a .png, .svg or .pdf file")
        parent = args.plot.resolve().parent
        if not parent.is_dir():
            raise InputError(f"--plot {args.plot}: folder {parent} does not exist")


def run_loss(args: argparse.Namespace, console: Console) -> int:
    _check_options(args)
    from slipless.cli.loss_text import print_report
    from slipless.loss.account import analyse
    from slipless.loss.report import document
    from slipless.run import open_run

    facts = open_run(args.inputs, args.mirror, angle_stream=args.angle_stream,
                     keep_samples=False).facts
    accounts = analyse(facts, args.angle_stream, args.index_marker, args.angle_bins, args.gmin)
    doc = document(accounts, facts, args.max_loss)
    if args.json:
        sys.stdout.write(json.dumps(doc, indent=1) + "\n")
    else:
        print_report(accounts, doc, console)
    if args.plot is not None:
        from slipless.loss.plot import plot

        try:
            plot(accounts, args.plot)
        except OSError as exc:
            raise InputError(f"--plot {args.plot}: cannot write ({exc.strerror})") from exc
        if not args.json:
            console.print(f"figure written to {args.plot}")
    if doc["passed"]:
        return 0
    worst = max(doc["runs"], key=lambda r: r["loss_fraction"])
    print(f"slipless: {100 * doc['loss_fraction']:.3f} % of frames missing, over --max-loss "
          f"{args.max_loss:g} % (board {worst['board']} run {worst['run']}: "
          f"{worst['frames_lost']} lost on the radio, {worst['frames_dropped_board']} dropped "
          "on the board)", file=sys.stderr)
    return EXIT_OVER
