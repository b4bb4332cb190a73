"""`slipless record` and `slipless pull`: the command-line side of recording."""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import platform
import signal
import tempfile
import time
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.live import Live
from rich.text import Text

from slipless.cli.watch import add_view_options, show, view_options
from slipless.errors import InputError
from slipless.io.capture import CaptureWriter
from slipless.record.recorder import Progress, Recorder, RecordOptions
from slipless.record.transports import BACKENDS, LinkError
from slipless.version import __version__

RUN_CAUTION = (
    "Caution: START runs the board's pulse program: the coil will be energised. The rotor "
    "must be secured, balanced and guarded; keep clear while it turns; local codes and "
    "your institution's safety rules come first."
)


def add_parsers(sub: Any) -> None:
    r = sub.add_parser("record", help="record a run from a board over BLE into a capture file")
    r.add_argument("--out", type=Path, required=True, metavar="FILE.slcap",
                   help="capture file to write (an existing file is never overwritten)")
    r.add_argument("--board", dest="target", metavar="NAME|ADDRESS",
                   help="board to connect to (default: the first advertising the slipless service)")
    r.add_argument("--backend", choices=BACKENDS, default="bleak",
                   help="bleak: the laptop's Bluetooth (default); bumble: an HCI dongle")
    r.add_argument("--transport", default="usb:0",
                   help="bumble transport spec (default usb:0)")
    _add_notify_option(r)
    r.add_argument("--duration", type=float, default=0.0, metavar="S",
                   help="stop after S seconds (default: until the run ends or Ctrl-C)")
    r.add_argument("--label", default="", help="run label sent with START (at most 32 bytes); "
                   "kept in the capture")
    r.add_argument("--operator", default="", metavar="NAME", help="who ran it (kept in the capture)")
    r.add_argument("--prediction", "--rig", dest="rig", type=Path, metavar="FILE.json",
                   help="the rig's `slipless predict --json` output (strict JSON), kept in the "
                        "capture")
    r.add_argument("--amplifier", default="", metavar="TEXT",
                   help="the amplifier's settings as set on the bench (kept in the capture)")
    r.add_argument("--ping-every", type=float, default=1.0, metavar="S",
                   help="time-sync ping cadence (default 1 s)")
    r.add_argument("--no-start", action="store_true",
                   help="only listen: do not send START (the coil stays as it is)")
    r.add_argument("--sync-every", type=float, default=1.0, metavar="S",
                   help="flush and fsync the capture every S seconds (default 1)")
    _add_key_options(r)
    r.add_argument("--watch", action="store_true",
                   help="show the run live while it records: a page on 127.0.0.1 (or, with "
                        "--watch-terminal, this terminal) with plots and alarms")
    add_view_options(r, prefix="watch-")

    p = sub.add_parser("pull", help="copy the board's file mirror to the laptop (USB or BLE)")
    how = p.add_mutually_exclusive_group(required=True)
    how.add_argument("--port", help="over USB: the board's serial port (mpremote)")
    how.add_argument("--link", action="store_true", help="over BLE, like record (board idle)")
    p.add_argument("--path", default="/mirror.bin", help="mirror path on the board (USB)")
    p.add_argument("--board", dest="target", metavar="NAME|ADDRESS", help="board to connect to")
    p.add_argument("--backend", choices=BACKENDS, default="bleak")
    p.add_argument("--transport", default="usb:0", help="bumble transport spec")
    _add_notify_option(p)
    p.add_argument("--out", type=Path, required=True, metavar="FILE",
                   help="where to write it (an existing file is never overwritten)")
    _add_key_options(p)


def _add_notify_option(p: Any) -> None:
    p.add_argument("--notify-method", choices=("start", "acquire"), default="start",
                   help="BlueZ only: notifications as D-Bus signals (StartNotify, default) or "
                        "through a socket (AcquireNotify)")


def _add_key_options(p: Any) -> None:
    p.add_argument("--key", type=Path, metavar="FILE",
                   help="board key written by `slipless flash` (default: the only one held)")
    p.add_argument("--insecure", action="store_true",
                   help="send start/stop/pull without a key (a board with a key refuses them)")


def signer_for(args: argparse.Namespace, console: Console) -> Any:
    """keys.Signer for --key (or the only key held); None with --insecure and no key."""
    from slipless.record import keys

    path = keys.find_key(args.key)
    if path is None:
        if not args.insecure:
            raise InputError("no board key on this laptop: flash the board with `slipless flash` "
                             "(it writes one), give --key FILE, or send unauthenticated commands "
                             "with --insecure")
        console.print("warning: --insecure: commands go without a key; anyone in radio range "
                      "can send them too, and a board flashed with a key refuses them",
                      style="bold yellow")
        return None
    return keys.Signer(keys.load_key(path), keys.counter_path_for(path))


def _central(args: argparse.Namespace) -> tuple[Any, Any]:
    if args.backend == "bleak":
        from slipless.record.transports.bleak_central import BleakCentral

        try:
            return BleakCentral(args.target, notify_method=args.notify_method), None
        except LinkError as exc:
            raise InputError(str(exc)) from exc
    try:
        from bumble.device import Device
        from bumble.hci import Address
        from bumble.transport import open_transport
    except ImportError as exc:
        raise InputError("the bumble back end needs bumble: pip install 'slipless[ble]'") from exc
    from slipless.record.transports.bumble_central import BumbleCentral

    async def make() -> Any:
        transport = await open_transport(args.transport)
        device = Device.with_hci("slipless", Address("F0:F1:F2:F3:F4:F5"), transport.source,
                                 transport.sink)
        await device.power_on()
        return BumbleCentral(device, args.target), transport

    return None, make


async def _pull_link(args: argparse.Namespace, console: Console, signer: Any = None) -> int:
    """PULL over BLE: what arrives is frames; the file written is a mirror file."""
    central, make = _central(args)
    transport = None
    if make is not None:
        central, transport = await make()
    with tempfile.TemporaryDirectory() as tmp:
        writer = CaptureWriter(Path(tmp) / "pull.slcap", {"backend": args.backend})
        rec = Recorder(central, writer, RecordOptions(pull=True, ping_every_s=3600,
                                                      signer=signer))
        try:
            await pull_into(rec, writer, args.out)
        except LinkError as exc:
            raise InputError(str(exc)) from exc
        finally:
            if transport is not None:
                await transport.close()
    if rec.auth_error or rec.sink.last_error:
        raise InputError(f"the board refused the pull: {rec.auth_error or rec.sink.last_error}")
    console.print(f"{args.out.stat().st_size:,} bytes of mirror written to {args.out}; merge it "
                  f"with: slipless decode CAPTURE --mirror {args.out} --out DIR")
    return 0


async def pull_into(rec: Recorder, writer: CaptureWriter, out: Path) -> None:
    """Run a pull and write the bytes the board sent, as a mirror file."""
    from slipless.io.capture import RX, CaptureReader

    await rec.run()
    writer.close()
    with writer.path.open("rb") as f, out.open("wb") as dst:
        for r in CaptureReader(f):
            if r.type == RX:
                dst.write(r.payload)


def status_line(p: Progress, started: float) -> Text:
    dt = max(time.monotonic() - started, 1e-6)
    bat = f"{p.battery_mv / 1000:.2f} V" if p.battery_mv else "?"
    return Text(f"[{p.state}] {p.frames:,} frames ({p.frames / dt:.1f}/s)  "
                f"{p.samples:,} samples ({p.samples / dt:,.0f}/s)  gaps {p.gaps} "
                f"(missing {p.missing})  resends pending {p.resends_pending}  "
                f"lost {sum(b - a + 1 for a, b in p.lost_ranges)}  reconnects {p.reconnects}  "
                f"battery {bat}" + (f"  link: {p.link_error}" if p.link_error else ""))


def check_new_file(path: Path, what: str) -> None:
    """Recordings are never overwritten: refuse an existing --out, naming a free one."""
    if path.is_dir():
        raise InputError(f"{path}: is a directory, expected a {what} file name")
    if path.exists() or path.is_symlink():
        free = next(c for n in range(2, 10000)
                    if not (c := path.with_name(f"{path.stem}-{n}{path.suffix}")).exists())
        raise InputError(f"{path} exists: slipless never overwrites a {what}; choose another "
                         f"--out (e.g. {free})")
    if not path.parent.is_dir():
        raise InputError(f"{path}: folder {path.parent} does not exist")


def host_info() -> dict[str, Any]:
    """What recorded the run: the capture header keeps it beside the data."""
    from slipless.record.transports import package_version

    found = {pkg: v for pkg in ("bleak", "bumble", "dbus-fast") if (v := package_version(pkg))}
    return {"os": platform.system(), "os_release": platform.release(),
            "machine": platform.machine(), "python": platform.python_version(),
            "packages": found}


def run_record(args: argparse.Namespace, console: Console) -> int:
    if len(args.label.encode()) > 32:
        raise InputError("--label: at most 32 bytes")
    check_new_file(args.out, "capture")
    args.rig_doc = read_rig(args.rig)  # a bad file fails before any file is written
    if args.watch:
        view_options(args, "watch-")  # its errors too come before any file is written
    signer = signer_for(args, console)  # before any file is written: no key, no capture
    if not args.no_start:
        console.print(RUN_CAUTION, style="bold")
    return asyncio.run(_record(args, console, signer))


async def _record(args: argparse.Namespace, console: Console, signer: Any = None) -> int:
    central, make = _central(args)
    transport = None
    if make is not None:
        try:
            central, transport = await make()
        except Exception as exc:  # bumble raises many kinds for a missing dongle
            raise InputError(f"cannot open bumble transport {args.transport}: {exc}") from exc
    meta = {"slipless": __version__, "created_wall_ns": time.time_ns(),
            "created_mono_ns": time.monotonic_ns(), "host": platform.node(),
            "backend": args.backend, "sources": [{"target": args.target or ""}],
            "sync_every_s": args.sync_every, "label": args.label, "recorder": host_info(),
            "operator": args.operator, "amplifier": args.amplifier,
            **({"rig": args.rig_doc} if args.rig_doc is not None else {})}
    try:
        writer = CaptureWriter(args.out, meta, args.sync_every, exclusive=True)
    except FileExistsError:
        raise InputError(f"{args.out} exists: slipless never overwrites a capture; choose "
                         "another --out") from None
    except OSError as exc:
        raise InputError(f"{args.out}: cannot write ({exc.strerror})") from exc
    opts = RecordOptions(duration_s=args.duration, label=args.label,
                         ping_every_s=args.ping_every, start=not args.no_start,
                         signer=signer, ask_board=True, on_note=lambda text: console.print(
                             f"note: {text}", markup=False, highlight=False))
    started = time.monotonic()
    state = watch_state(args)
    in_terminal = state is not None and args.watch_terminal  # the view replaces the status line
    with contextlib.nullcontext() if in_terminal else Live(
            console=console, auto_refresh=False, transient=False) as live:

        def on_progress(p: Progress) -> None:
            if live is not None:
                live.update(status_line(p, started), refresh=True)
            if state is not None:
                state.link(p.state == "live", p.state, writer.clock.mono_ns(), p.link_error)

        rec = Recorder(central, writer, opts, on_progress, watch=state)
        loop = asyncio.get_running_loop()
        loop.add_signal_handler(signal.SIGINT, rec.stop)  # Ctrl-C: STOP, drain, close
        never_connected = False
        try:
            if state is None:
                progress = await rec.run()
            else:
                job = asyncio.ensure_future(rec.run())
                await show(state, writer.clock.mono_ns, args, console, job, prefix="watch-")
                progress = job.result()
        except LinkError as exc:
            never_connected = rec.commands_sent == 0  # nothing heard or said: no recording
            raise InputError(str(exc) + (f" (no capture kept: {args.out} removed)"
                                         if never_connected else "")) from exc
        finally:
            loop.remove_signal_handler(signal.SIGINT)
            writer.close()
            if never_connected:
                args.out.unlink(missing_ok=True)  # else the next try would be refused
            if transport is not None:
                await transport.close()
    console.print(f"capture written to {args.out} ({writer.records:,} records, "
                  f"{writer.bytes:,} bytes); decode it with: slipless decode {args.out} --out DIR")
    if rec.auth_error:
        raise InputError(f"the board refused a command ({rec.auth_error}): check the key "
                         "(--key) matches the one flashed")
    if progress.lost_ranges:
        lost = ", ".join(f"{a}-{b}" for a, b in progress.lost_ranges)
        console.print(f"the board no longer held frames {lost}: pull its mirror to recover them "
                      "(slipless pull), or they are lost")
    return 0


def read_rig(path: Path | None) -> dict[str, Any] | None:
    """The --prediction (--rig) file: `slipless predict --json` output, strict JSON (no
    NaN or Infinity: predict writes null for those), small enough for the header."""
    if path is None:
        return None
    import json

    from slipless.io.json_text import parse_json

    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"--prediction {path}: cannot read ({getattr(exc, 'strerror', None) or exc})") \
            from None
    doc = parse_json(text, path)
    try:
        json.loads(text, parse_constant=_not_strict)
    except ValueError as exc:
        raise InputError(f"--prediction {path}: not strict JSON: {exc}") from None
    if not isinstance(doc, dict) or "results" not in doc:
        raise InputError(f"--prediction {path}: not the output of `slipless predict --json`")
    if len(text.encode()) > 32_000:
        raise InputError(f"--prediction {path}: over 32 kB: the capture's header holds at most 64 kB")
    return doc


def _not_strict(name: str) -> Any:
    raise ValueError(f"{name} is not a JSON number (slipless predict --json writes null)")


def watch_state(args: argparse.Namespace) -> Any:
    """The live view's state for --watch (None without it)."""
    if not getattr(args, "watch", False):
        return None
    from slipless.live.state import LiveState

    return LiveState(view_options(args, "watch-"), title=f"slipless record: {args.out.name}")


def run_pull(args: argparse.Namespace, console: Console) -> int:
    check_new_file(args.out, "mirror file")
    if args.link:
        return asyncio.run(_pull_link(args, console, signer_for(args, console)))
    from slipless.board.flash import Board, FlashError, check_port

    check_port(args.port)
    board = Board(args.port)
    with tempfile.TemporaryDirectory() as tmp:
        local = Path(tmp) / "mirror.bin"
        try:
            board.run(["fs", "cp", ":" + args.path, str(local)], 600, f"copying {args.path}")
        except FlashError as exc:
            raise InputError(str(exc)) from exc
        data = local.read_bytes()
    args.out.write_bytes(data)
    console.print(f"{len(data):,} bytes of {args.path} written to {args.out}; merge it with: "
                  f"slipless decode CAPTURE --mirror {args.out} --out DIR")
    return 0
