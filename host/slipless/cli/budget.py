"""`slipless budget`: will the planned run fit the link, the mirror and the battery?

Exit status: 0 when the verdict is ok or warn, 3 when it is refuse (the link
cannot carry the board's data rate: frames will be dropped), 2 for bad input.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import math
import sys
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.table import Table

from slipless.errors import InputError

EXIT_REFUSE = 3
MAX_RUN_S = 30 * 86400.0  # a month: beyond it a typo is likelier than a plan


def add_parser(sub: Any) -> None:
    b = sub.add_parser("budget", help="check a config's data rate against the link, mirror and battery")
    b.add_argument("--config", type=Path, metavar="FILE",
                   help="board config JSON (default: built-in defaults)")
    b.add_argument("--board", metavar="PROFILE",
                   help="board profile (default: the config's profile, else esp32-devkitc)")
    b.add_argument("--link", metavar="PRESET", default=None,
                   help="link assumptions to start from: linux-default (the default), linux-mtu247, "
                        "fast, fastest")
    b.add_argument("--interval-ms", type=float, metavar="MS",
                   help="connection interval, 7.5 to 4000 in 1.25 ms steps")
    b.add_argument("--mtu", type=int, help="ATT MTU, 23 to 517 (the board uses at most 247)")
    b.add_argument("--dle", action=argparse.BooleanOptionalAction, default=None,
                   help="LE Data Length Extension: 251-octet link-layer packets (else 27)")
    b.add_argument("--packets-per-event", type=int, metavar="N",
                   help="link-layer packets a connection event carries, 1 to 100 "
                        "(controller-dependent; default 4)")
    b.add_argument("--encrypted", action=argparse.BooleanOptionalAction, default=None,
                   help="an encrypted (paired) link: 4 more octets per packet")
    b.add_argument("--run-s", type=float, metavar="S",
                   help="planned run length (default: the coil program's length, if any)")
    b.add_argument("--flash-bytes", type=int, metavar="B",
                   help="free space on the board's filesystem for the mirror")
    b.add_argument("--battery-mAh", dest="battery_mAh", type=float, metavar="C",
                   help="battery's rated capacity")
    b.add_argument("--current-mA", dest="current_mA", type=float, metavar="I",
                   help="the board's average draw (default: a typical figure for the profile)")
    b.add_argument("--json", action="store_true", help="print one JSON document instead of tables")


def _positive(name: str, value: float | None, hi: float) -> None:
    if value is not None and not (math.isfinite(value) and 0 < value <= hi):
        raise InputError(f"{name} {value:g}: give a number above 0 and at most {hi:g}")


def link_from(args: argparse.Namespace) -> Any:
    """The preset, with any explicit link option applied (then named "custom")."""
    from slipless.board import budget

    preset = args.link or budget.DEFAULT_LINK
    if preset not in budget.PRESETS:
        raise InputError(f"--link {preset}: not a preset (known: {', '.join(budget.PRESETS)})")
    changes: dict[str, Any] = {}
    if args.interval_ms is not None:
        iv = args.interval_ms
        steps = iv / budget.INTERVAL_STEP_MS
        if not (math.isfinite(iv) and budget.INTERVAL_MIN_MS <= iv <= budget.INTERVAL_MAX_MS
                and abs(steps - round(steps)) < 1e-6):
            raise InputError(f"--interval-ms {iv:g}: a connection interval is 7.5 to 4000 ms in "
                             "1.25 ms steps")
        changes["interval_ms"] = iv
    if args.mtu is not None:
        if not budget.ATT_MTU_MIN <= args.mtu <= budget.ATT_MTU_MAX:
            raise InputError(f"--mtu {args.mtu}: the ATT MTU is {budget.ATT_MTU_MIN} to "
                             f"{budget.ATT_MTU_MAX}")
        changes["mtu"] = args.mtu
    if args.dle is not None:
        changes["dle"] = args.dle
    if args.packets_per_event is not None:
        if not 1 <= args.packets_per_event <= 100:
            raise InputError(f"--packets-per-event {args.packets_per_event}: give 1 to 100")
        changes["packets_per_event"] = args.packets_per_event
    if args.encrypted is not None:
        changes["encrypted"] = args.encrypted
    base = budget.PRESETS[preset]
    if any(getattr(base, k) != v for k, v in changes.items()):
        changes["name"] = "custom"
        changes["about"] = f"{preset} with " + ", ".join(f"{k}={v}" for k, v in changes.items())
    return dataclasses.replace(base, **changes)


def _check_options(args: argparse.Namespace) -> None:
    _positive("--run-s", args.run_s, MAX_RUN_S)
    _positive("--battery-mAh", args.battery_mAh, 1e6)
    _positive("--current-mA", args.current_mA, 1e5)
    if args.flash_bytes is not None and not 0 < args.flash_bytes <= 1 << 40:
        raise InputError(f"--flash-bytes {args.flash_bytes}: give a byte count above 0")
    if args.current_mA is not None and args.battery_mAh is None:
        raise InputError("--current-mA needs --battery-mAh (the battery's capacity)")


def run_budget(args: argparse.Namespace, console: Console) -> int:
    _check_options(args)
    link = link_from(args)
    from slipless.board import budget
    from slipless.board.files import firmware_dir
    from slipless.board.flash import resolve_config

    config, profile = resolve_config(firmware_dir(), args.config, args.board)
    try:
        report = budget.check(config, profile, link, args.run_s, args.flash_bytes, args.battery_mAh,
                              args.current_mA)
    except ValueError as exc:
        raise InputError(f"{args.config or 'default config'}: {exc}") from None
    if args.json:
        sys.stdout.write(json.dumps(budget.document(report), indent=1) + "\n")
    else:
        show(report, console)
    if report.verdict == budget.REFUSE:
        print(f"slipless: refused: {report.reasons[0]}", file=sys.stderr)
        return EXIT_REFUSE
    return 0


def show(report: Any, console: Console) -> None:
    from slipless.board import budget

    t = Table(title=f"what the board sends ({report.profile})", title_justify="left")
    for col in ("frames", "bytes on air", "samples", "frames/s", "B/s"):
        t.add_column(col, justify="left" if col == "frames" else "right")
    for f in report.flows:
        t.add_row(f.what, str(f.frame_bytes), str(f.samples_per_frame or ""), f"{f.frames_per_s:.3f}",
                  f"{f.bytes_per_s:,.1f}")
    console.print(t)
    for line in budget.report_lines(report):
        console.print(line, markup=False, highlight=False)
