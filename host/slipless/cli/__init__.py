"""The `slipless` command line.

Every user-facing failure is one line on stderr and a non-zero exit:
2 for bad input or usage, 1 for anything unexpected (a bug: please report).
"""

from __future__ import annotations

import argparse
import importlib
import json
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import NoReturn

from rich.console import Console

from slipless.cli.text_tables import column, print_table, table
from slipless.decode.decoder import Decoder
from slipless.decode.tables import FORMATS
from slipless.errors import SliplessError
from slipless.protocol import wire
from slipless.version import __version__

EXIT_INPUT = 2


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> NoReturn:  # one line, not the usage block
        self.exit(EXIT_INPUT, f"slipless: error: {message} (see slipless --help)\n")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="slipless", description=(
        "Instruments on a rotor, by radio: flash and configure the board, record its runs over "
        "Bluetooth LE (and watch them live), account every lost sample, put every channel and "
        "board on one clock, reduce pulsed-field runs to contrasts with uncertainties, compare "
        "them with the prediction. `slipless demo` runs it all on a simulated rig."))
    p.add_argument("--version", action="version", version=f"slipless {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    d = sub.add_parser("decode", help="decode captures or raw byte streams into tidy tables")
    d.add_argument("inputs", nargs="+", type=Path, metavar="INPUT")
    d.add_argument("--out", type=Path, required=True, metavar="DIR", help="folder for the tables")
    d.add_argument("--mirror", type=Path, action="append", default=[], metavar="FILE",
                   help="the board's file mirror, merged after the inputs (repeatable)")
    d.add_argument("--format", choices=FORMATS, default="csv", help="table format (default csv)")
    d.add_argument("--quiet", action="store_true", help="no progress bar or summary")

    m = sub.add_parser("demo", help="a simulated run (the board's firmware, a lossy radio, the "
                       "recorder) analysed end to end, with a report")
    m.add_argument("--out", type=Path, default=Path("demo-out"), metavar="DIR")
    m.add_argument("--seconds", type=float, default=180.0,
                   help="simulated run length, 60 to 3600 (default 180)")
    m.add_argument("--seed", type=int, default=1)
    from slipless.sim.links import DEFAULT_LINK, LINKS

    m.add_argument("--link", choices=tuple(LINKS), default=DEFAULT_LINK,
                   help="the radio link: " + "; ".join(f"{k}: {v.what}" for k, v in LINKS.items())
                   + f" (default {DEFAULT_LINK})")

    f = sub.add_parser("flash", help="check a config, compile and copy the firmware to a board, verify")
    f.add_argument("--port", help="the board's serial port, e.g. /dev/ttyUSB0 or COM3 (not needed "
                   "with --dry-run)")
    f.add_argument("--board", metavar="PROFILE",
                   help="board profile (default: the config's profile, else esp32-devkitc)")
    f.add_argument("--config", type=Path, metavar="FILE", help="config JSON (default: built-in defaults)")
    f.add_argument("--dry-run", action="store_true", help="print what would be copied; touch nothing")

    from slipless.cli.record import add_parsers as add_record_parsers

    add_record_parsers(sub)
    from slipless.cli.analysis_args import add_parsers as add_analysis_parsers

    add_analysis_parsers(sub)
    from slipless.cli.loss import add_parser as add_loss_parser

    add_loss_parser(sub)
    from slipless.cli.align import add_parser as add_align_parser

    add_align_parser(sub)
    from slipless.cli.report import add_parser as add_report_parser

    add_report_parser(sub)
    from slipless.cli.budget import add_parser as add_budget_parser

    add_budget_parser(sub)
    from slipless.cli.board import add_parser as add_control_parser

    add_control_parser(sub)
    from slipless.cli.watch import add_parser as add_watch_parser

    add_watch_parser(sub)
    from slipless.cli.calibrate import add_parser as add_calibrate_parser

    add_calibrate_parser(sub)
    from slipless.cli.noise import add_parser as add_noise_parser

    add_noise_parser(sub)
    from slipless.cli.campaign import add_parser as add_campaign_parser

    add_campaign_parser(sub)
    return p


# command -> (module, function): each is imported only when it runs
COMMANDS = {
    "demo": ("slipless.cli.demo", "run_demo"),
    "flash": ("slipless.cli.flash", "run_flash"),
    "align": ("slipless.cli.align", "run_align"),
    "record": ("slipless.cli.record", "run_record"),
    "pull": ("slipless.cli.record", "run_pull"),
    "predict": ("slipless.cli.predict", "run_predict"),
    "pulses": ("slipless.cli.pulses", "run_pulses"),
    "loss": ("slipless.cli.loss", "run_loss"),
    "report": ("slipless.cli.report", "run_report"),
    "budget": ("slipless.cli.budget", "run_budget"),
    "board": ("slipless.cli.board", "run_board"),
    "watch": ("slipless.cli.watch", "run_watch"),
    "calibrate": ("slipless.cli.calibrate", "run_calibrate"),
    "noise": ("slipless.cli.noise", "run_noise"),
    "campaign": ("slipless.cli.campaign", "run_campaign"),
}


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    if not (sys.argv[1:] if argv is None else argv):  # bare `slipless`: what it can do
        parser.print_help()
        return 0
    args = parser.parse_args(argv)
    console = Console(width=None if sys.stdout.isatty() else 110)
    try:
        if args.command == "decode":
            return cmd_decode(args, console)
        module, func = COMMANDS[args.command]
        run: Callable[[argparse.Namespace, Console], int] = getattr(
            importlib.import_module(module), func)  # lazily: decoding needs none of them
        return run(args, console)
    except SliplessError as exc:
        print(f"slipless: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("slipless: interrupted", file=sys.stderr)
        return 130
    return 1  # pragma: no cover - argparse enforces a command


def decode_files(inputs: Sequence[Path], out: Path, fmt: str, console: Console | None,
                 mirrors: Sequence[Path] = ()) -> Decoder:
    """Decode every input (then every mirror file) into tables in `out`.

    Inputs are merged by board, run and sequence number: the first copy of a
    frame wins, later copies are duplicates, so the order is radio first,
    then the mirror filling what the radio lost. Returns the decoder for its
    counts.
    """
    from slipless.cli.progress import bytes_progress
    from slipless.run import open_run

    run = open_run(inputs, mirrors, tables=out, table_format=fmt, progress=bytes_progress(console),
                   hold=False)
    from slipless.report.decoded import sha256_of

    # what each capture's header says of the run (label, operator, amplifier, rig...), and
    # each input's SHA-256, so `slipless report DIR` can tell the captures are the same
    meta = run.metadata()
    for m in meta:
        m["sha256"] = sha256_of(Path(m["path"]))
    (out / "inputs.json").write_text(json.dumps({"inputs": meta}, indent=1, default=str) + "\n")
    return run.decoder


def cmd_decode(args: argparse.Namespace, console: Console) -> int:
    dec = decode_files(args.inputs, args.out, args.format, None if args.quiet else console,
                       args.mirror)
    if not args.quiet:
        print_summary(dec, console)
        console.print(f"tables written to {args.out}/")
    return 0


def print_summary(dec: Decoder, console: Console) -> None:
    t = table("decoded runs")
    # gaps left: what is still missing after resends and mirrors (loss counts the gaps
    # in what arrived live, before they were filled)
    for col in ("board", "run", "fw", "frames", "gaps left", "missing", "corrupt", "dup",
                "samples", "events", "end"):
        column(t, col, left=col == "end")
    for r in sorted(dec.runs.values(), key=lambda r: r.key):
        corrupt = dec.corrupt_guess(r)
        end = wire.END_REASON_NAMES.get(r.end["reason"], "?") if r.end else "(none seen)"
        t.add_row(str(r.board), str(r.run), r.fw or "?", str(r.received), str(len(r.gaps)),
                  str(dec.missing(r) - corrupt), str(corrupt), str(r.duplicates), str(r.samples),
                  str(r.events), end)
    print_table(console, t)
    c = dec.counters
    damaged = c.corrupt + c.overlong + c.file_damaged
    in_files = (f"; {c.file_damaged:,} of them stretches of capture files skipped, "
                f"{c.file_damaged_bytes:,} B" if c.file_damaged else "")
    console.print(
        f"bytes {c.bytes:,}  good frames {c.frames:,}  damaged segments {damaged:,} "
        f"({c.corrupt_bytes + c.file_damaged_bytes:,} B{in_files})  "
        f"skipped at start {c.skipped_bytes:,} B")
    notes = []
    if c.unknown_kind:
        notes.append(f"{c.unknown_kind} frames of a kind this release does not know were skipped")
    if c.bad_version:
        notes.append(f"{c.bad_version} frames of protocol version(s) "
                     f"{sorted(c.versions_seen)} were skipped")
    if c.malformed:
        notes.append(f"{c.malformed} frames passed the CRC but did not match their layout "
                     "or carried a tick past board time")
    for r in dec.runs.values():
        if r.undecodable:
            notes.append(f"board {r.board} run {r.run}: {r.undecodable} frames could not be "
                         "decoded (no descriptor, a stream it does not define, or a sample "
                         "type this release does not read)")
        if r.ticks_uncertain:
            notes.append(f"board {r.board} run {r.run}: {r.ticks_uncertain} frames gave "
                         "samples or events whose board time is uncertain (too far in seq "
                         "from every tick reference)")
    for n in notes + dec.notes:
        console.print(f"note: {n}")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
