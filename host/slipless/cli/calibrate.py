"""`slipless calibrate`: measure a calibration from a run, write it as a file
that `pulses`, `align` and `report` apply with --calibration."""

from __future__ import annotations

import argparse
import math
import re
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.table import Table

from slipless.calib import measure
from slipless.calib.file import AmpCal, Calibration, StreamCal, save
from slipless.decode.store import ChannelStore
from slipless.errors import InputError
from slipless.protocol import wire

_ZERO = re.compile(r"^(?P<name>[^@]+)@(?P<t0>[-+0-9.eE]+):(?P<t1>[-+0-9.eE]+)$")


def add_parser(sub: Any) -> None:
    c = sub.add_parser("calibrate", help="measure offsets, the amplifier's charge gain and the "
                       "gyro's bias and scale from a run; write a calibration file")
    c.add_argument("inputs", nargs="+", type=Path, metavar="INPUT")
    c.add_argument("--mirror", type=Path, action="append", default=[], metavar="FILE")
    c.add_argument("--out", type=Path, required=True, metavar="FILE.json",
                   help="the calibration file to write (an existing file is never replaced)")
    c.add_argument("--board", type=int, help="the board calibrated (default: the only one)")
    c.add_argument("--zero", action="append", default=[], metavar="NAME@T0:T1",
                   help="the stream's input is zero between board times T0 and T1 s: its "
                        "reading there is its offset (repeatable)")
    c.add_argument("--step", metavar="NAME",
                   help="the charge amplifier's output stream that saw a known charge step")
    c.add_argument("--step-pF", type=float, metavar="C",
                   help="the calibration capacitor the step went through, pF")
    c.add_argument("--step-volts", type=float, metavar="V", help="the voltage step applied to it")
    c.add_argument("--step-at", type=float, metavar="T",
                   help="board time of the step, s (default: where the output jumps most)")
    c.add_argument("--step-tolerance", type=float, default=1.0, metavar="PCT",
                   help="relative standard uncertainty of C x V, %% (default 1)")
    c.add_argument("--gyro", metavar="NAME", help="rotation-rate stream: bias from where the "
                   "rotor stands, scale from index markers (with --index-marker)")
    c.add_argument("--index-marker", type=int, metavar="N",
                   help="EVENTS marker value the index sensor sends once a revolution")
    c.add_argument("--latitude-deg", type=float, metavar="DEG",
                   help="take the Earth's rate about the vertical off the gyro bias")


def _one_board(run: Any, board: int | None) -> int:
    boards = sorted({b for b, _, _ in run.channels})
    if board is None:
        if len(boards) != 1:
            raise InputError(f"the inputs hold boards {boards}: choose one with --board")
        return boards[0]
    if board not in boards:
        raise InputError(f"--board {board}: not in the inputs (boards {boards})")
    return board


def _store(run: Any, name: str, board: int) -> tuple[ChannelStore, int]:
    """The stream's longest run on the board (and its tick rate)."""
    found = [(ch.n, ch, r) for (b, r, _), ch in sorted(run.channels.items())
             if b == board and ch.info.name == name]
    if not found:
        have = sorted({ch.info.name for (b, _, _), ch in run.channels.items() if b == board})
        raise InputError(f"no stream {name!r} on board {board} (streams: {', '.join(have)})")
    _, ch, r = max(found, key=lambda f: f[0])
    return ch, run.decoder.runs[(board, r)].tick_hz or 1_000_000


def _finite(value: float | None, what: str, positive: bool = False) -> float:
    if value is None or not math.isfinite(value) or (positive and value <= 0):
        raise InputError(f"{what}: must be a finite{' positive' if positive else ''} number, "
                         f"not {value}")
    return value


def measure_all(args: argparse.Namespace, run: Any) -> tuple[Calibration, list[tuple[str, ...]]]:
    board = _one_board(run, args.board)
    cal = Calibration(source=", ".join(p.name for p in args.inputs), board=board)
    rows: list[tuple[str, ...]] = []
    for spec in args.zero:
        m = _ZERO.match(spec)
        if m is None:
            raise InputError(f"--zero {spec!r}: want NAME@T0:T1 (board seconds), e.g. cap_amp@2:10")
        ch, hz = _store(run, m["name"], board)
        t0, t1 = float(m["t0"]), float(m["t1"])
        if not t1 > t0:
            raise InputError(f"--zero {spec!r}: T1 must be after T0")
        z = measure.zero(ch, hz, t0, t1)
        sc = cal.streams.setdefault(ch.info.name, StreamCal())
        sc.offset, sc.offset_se = z.value, z.se
        sc.how.append(f"zero {t0:g}-{t1:g} s")
        cal.units[ch.info.name] = ch.info.unit
        rows.append((ch.info.name, "offset", f"{z.value:.6g} {ch.info.unit}",
                     f"{z.se:.2g}", f"{z.n:,} samples, {t0:g}-{t1:g} s"))
    if args.step is not None:
        cap_f = _finite(args.step_pF, "--step-pF", positive=True) * 1e-12
        volts = _finite(args.step_volts, "--step-volts")
        tol = _finite(args.step_tolerance, "--step-tolerance") / 100
        ch, hz = _store(run, args.step, board)
        st = measure.step(ch, hz, args.step_at)
        gain, se = measure.charge_gain(st, cap_f, volts)
        se = math.hypot(se, abs(gain) * tol)
        cal.amplifier = AmpCal(ch.info.name, gain, se,
                               f"step {volts:g} V through {args.step_pF:g} pF at {st.at_s:.3f} s")
        rows.append((ch.info.name, "charge gain", f"{gain:.5g} V/C", f"{se:.2g}",
                     f"step {st.size:.5g} {ch.info.unit} at {st.at_s:.3f} s"))
    if args.gyro is not None:
        ch, hz = _store(run, args.gyro, board)
        bias, seconds = measure.gyro_bias(ch, hz, args.latitude_deg)
        sc = cal.streams.setdefault(ch.info.name, StreamCal())
        sc.bias, sc.bias_se = bias.value, bias.se
        sc.how.append(f"stopped {seconds:.0f} s" + (f", Earth at {args.latitude_deg:g} deg off"
                                                     if args.latitude_deg is not None else ""))
        rows.append((ch.info.name, "bias", f"{bias.value:.5g} {ch.info.unit}", f"{bias.se:.2g}",
                     f"{seconds:.0f} s standing"))
        if args.index_marker is not None:
            ev = run.events()
            sel = ((ev["board"] == board) & (ev["code"] == wire.EV_MARKER)
                   & (ev["value"] == args.index_marker))
            scale, sse, turns = measure.gyro_scale(ch, hz, ev["tick_us"][sel], bias.value)
            sc.scale, sc.scale_se = scale, sse
            sc.how.append(f"index marker {args.index_marker}, {turns} turns")
            rows.append((ch.info.name, "scale", f"{scale:.6g}", f"{sse:.2g}", f"{turns} turns"))
        cal.units[ch.info.name] = ch.info.unit
    if not rows:
        raise InputError("nothing to measure: give --zero, --step or --gyro")
    return cal, rows


def run_calibrate(args: argparse.Namespace, console: Console) -> int:
    from slipless.cli.record import check_new_file
    from slipless.run import open_run

    check_new_file(args.out, "calibration")
    run = open_run(args.inputs, args.mirror)
    cal, rows = measure_all(args, run)
    save(cal, args.out)
    t = Table(title=f"calibration of board {cal.board}", title_justify="left")
    for col in ("stream", "what", "value", "std. uncertainty", "from"):
        t.add_column(col, justify="left" if col in ("stream", "what", "from") else "right")
    for row in rows:
        t.add_row(*row)
    console.print(t)
    console.print(f"calibration written to {args.out}; apply it with --calibration {args.out} "
                  "(pulses, align, report)")
    return 0
