"""`slipless board ...`: find boards in range and talk to one outside a run.

    slipless board find     boards advertising the slipless service: name, address, RSSI
    slipless board status   one line: identity, battery, temperature, RAM, config, firmware,
                            key, run
    slipless board stop     STOP (coil off, run ended), confirmed by the board
    slipless board ping     round trips and the clock offset (RFC 5905 on-wire formulas)

The logic lives in control.py and transports/scan.py; this module parses
options, opens the back end and prints. Imports stay light until a command runs.
"""

from __future__ import annotations

import argparse
import asyncio
import json
from collections.abc import Awaitable, Callable, Coroutine
from pathlib import Path
from typing import Any, TypeVar

from rich.console import Console

from slipless.errors import InputError
from slipless.protocol import wire

T = TypeVar("T")
BACKENDS = ("bleak", "bumble")  # as slipless.record.transports.BACKENDS (not imported: keep --help quick)
MAX_WAIT_S = 600.0  # longest scan or answer wait an option may ask for
MAX_PINGS = 1000
LAPTOP_ADDRESS = "F0:F1:F2:F3:F4:F5"  # the bumble device's own address (as `slipless record`)

STOP_CAUTION = ("Caution: the board has switched the coil off, but the rotor may still be "
                "turning: wait until it has stopped before you reach in or handle it. Local codes "
                "and your institution's safety rules come first.")

# How a command runs its coroutine (tests run it in simulated time instead).
run_async: Callable[[Coroutine[Any, Any, int]], int] = asyncio.run


def _number(text: str, kind: type, what: str, ok: Callable[[float], bool], limits: str) -> Any:
    """An argparse type: `text` as `kind`, or one line saying what is wrong."""
    try:
        v = kind(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not {what}") from None
    if not ok(v):
        raise argparse.ArgumentTypeError(limits)
    return v


def _seconds(text: str) -> float:
    return _number(text, float, "a number of seconds", lambda v: 0 < v <= MAX_WAIT_S,
                   f"must be above 0 and at most {MAX_WAIT_S:g} s")


def _gap(text: str) -> float:
    return _number(text, float, "a number of seconds", lambda v: 0 <= v <= 60,
                   "must be between 0 and 60 s")


def _count(text: str) -> int:
    return _number(text, int, "a whole number", lambda v: 1 <= v <= MAX_PINGS,
                   f"must be between 1 and {MAX_PINGS}")


def _add_backend(p: Any) -> None:
    p.add_argument("--backend", choices=BACKENDS, default="bleak",
                   help="bleak: the laptop's Bluetooth (default); bumble: an HCI dongle")
    p.add_argument("--transport", default="usb:0", metavar="SPEC",
                   help="bumble transport spec (default usb:0)")


def _add_target(p: Any) -> None:
    p.add_argument("--board", dest="target", metavar="NAME|ADDRESS",
                   help="board to talk to (default: the first advertising the slipless service)")
    _add_backend(p)
    p.add_argument("--timeout", type=_seconds, default=10.0, metavar="S",
                   help="seconds to look for the board, and to wait for each answer (default 10)")


def _add_key(p: Any, insecure_help: str) -> None:
    g = p.add_mutually_exclusive_group()
    g.add_argument("--key", type=Path, metavar="FILE",
                   help="board key written by `slipless flash` (default: the one this laptop "
                        "holds for the board id the board reports)")
    g.add_argument("--insecure", action="store_true", help=insecure_help)


def add_parser(sub: Any) -> None:
    b = sub.add_parser("board", help="find boards in range; status, stop or ping one outside a run")
    cmds = b.add_subparsers(dest="board_command", required=True, metavar="COMMAND")

    f = cmds.add_parser("find", help="list boards advertising the slipless service (name, "
                        "address, RSSI)")
    _add_backend(f)
    f.add_argument("--seconds", type=_seconds, default=5.0, metavar="S",
                   help="how long to listen (default 5)")
    f.add_argument("--json", action="store_true", help="one JSON document instead of lines")

    s = cmds.add_parser("status", help="one line: identity, battery, temperature, RAM, config "
                        "hash, key check, run state")
    _add_target(s)
    _add_key(s, "do not check the key (status is read either way)")
    s.add_argument("--config", type=Path, metavar="FILE",
                   help="the config file the board was flashed with: compare its hash")
    s.add_argument("--firmware", action="store_true",
                   help="compare the board's firmware hash with the code files this laptop's "
                        "`slipless flash` would copy (compiles them with mpy-cross)")
    s.add_argument("--json", action="store_true", help="one JSON document instead of a line")

    t = cmds.add_parser("stop", help="stop the board's run and switch its coil off")
    _add_target(t)
    _add_key(t, "send STOP without a key (a board flashed with a key refuses it)")

    g = cmds.add_parser("ping", help="round-trip times and the board's clock offset")
    _add_target(g)
    g.add_argument("--count", type=_count, default=5, metavar="N", help="pings to send (default 5)")
    g.add_argument("--every", type=_gap, default=0.2, metavar="S",
                   help="seconds between pings (default 0.2)")
    g.add_argument("--json", action="store_true", help="one JSON document instead of lines")


def run_board(args: argparse.Namespace, console: Console) -> int:
    commands: dict[str, Callable[[argparse.Namespace, Console], Coroutine[Any, Any, int]]] = {
        "find": _find, "status": _status, "stop": _stop, "ping": _ping}
    if getattr(args, "key", None) is not None:
        from slipless.record import keys

        keys.load_key(args.key)  # a bad key file is refused before the radio is touched
    if getattr(args, "config", None) is not None:
        _check_config(args.config)
    return run_async(commands[args.board_command](args, console))


def _check_config(path: Path) -> None:
    from slipless.board.files import firmware_dir
    from slipless.board.flash import load_board_config_module, parse_config_file

    parse_config_file(load_board_config_module(firmware_dir()), path)


# ---- back ends ------------------------------------------------------------------------
async def open_bumble(spec: str) -> tuple[Any, Callable[[], Awaitable[None]]]:
    """A powered-on bumble Device on the transport `spec`, and how to close it."""
    try:
        from bumble.device import Device
        from bumble.hci import Address
        from bumble.transport import open_transport
    except ImportError as exc:
        raise InputError("the bumble back end needs bumble: pip install 'slipless[ble]'") from exc
    try:
        transport = await open_transport(spec)
        device = Device.with_hci("slipless", Address(LAPTOP_ADDRESS), transport.source,
                                 transport.sink)
        await device.power_on()
    except Exception as exc:  # bumble raises many kinds for a missing or busy dongle
        raise InputError(f"cannot open bumble transport {spec}: {exc or type(exc).__name__}"
                         ) from exc
    return device, transport.close


async def _nothing() -> None:
    return None


async def _central(args: argparse.Namespace) -> tuple[Any, Callable[[], Awaitable[None]]]:
    from slipless.record.transports import LinkError

    if args.backend == "bleak":
        from slipless.record.transports.bleak_central import BleakCentral

        try:
            return BleakCentral(args.target, args.timeout), _nothing
        except LinkError as exc:
            raise InputError(str(exc)) from exc
    from slipless.record.transports.bumble_central import BumbleCentral

    device, close = await open_bumble(args.transport)
    return BumbleCentral(device, args.target, args.timeout), close


async def _with_board(args: argparse.Namespace, work: Callable[[Any], Awaitable[T]]) -> T:
    """Connect (finding the board within --timeout), run work(link), hang up."""
    from slipless.record import control

    central, close = await _central(args)
    try:
        async with control.connected(central, args.timeout, 2 * args.timeout) as link:
            return await work(link)
    finally:
        await close()


def _key_chooser(args: argparse.Namespace) -> Callable[[Any], tuple[Any, str]]:
    """--key FILE, else this laptop's key for the board id the board reports."""
    from slipless.record import keys

    def choose(info: Any) -> tuple[Any, str]:
        if args.insecure:
            return None, "--insecure"
        path = args.key if args.key is not None else keys.key_path(info.board)
        if args.key is None and not path.is_file():
            return None, f"no key for board {info.board} on this laptop"
        return keys.Signer(keys.load_key(path), keys.counter_path_for(path)), ""

    return choose


def _out(console: Console, text: str) -> None:
    console.print(text, markup=False, highlight=False, soft_wrap=True)


# ---- find -----------------------------------------------------------------------------
async def _find(args: argparse.Namespace, console: Console) -> int:
    from slipless.record.transports import LinkError, scan

    try:
        if args.backend == "bleak":
            found = await scan.scan_bleak(args.seconds)
        else:
            device, close = await open_bumble(args.transport)
            try:
                found = await scan.scan_bumble(device, args.seconds)
            finally:
                await close()
    except LinkError as exc:
        raise InputError(str(exc)) from exc
    if not found:
        raise InputError(f"no board advertising the slipless service heard in {args.seconds:g} s "
                         "(is it powered, in range and not connected to another laptop?)")
    if args.json:
        _out(console, json.dumps({"seconds": args.seconds, "backend": args.backend,
                                  "boards": [{"name": s.name, "address": s.address,
                                              "rssi_dbm": s.rssi_dbm} for s in found]}))
        return 0
    width = max(len(s.name) for s in found)
    for s in found:
        rssi = f"{s.rssi_dbm} dBm" if s.rssi_dbm is not None else "RSSI not reported"
        _out(console, f"{s.name or '(no name)':<{width}}  {s.address}  {rssi}")
    return 0


# ---- status ---------------------------------------------------------------------------
async def _status(args: argparse.Namespace, console: Console) -> int:
    from slipless.record import control, keys

    def laptop_sha(info: Any) -> tuple[str | None, str]:
        if args.config is None:
            return None, ""
        key = args.key if args.key is not None else keys.key_path(info.board)
        key_hex = keys.load_key(key).hex() if key.is_file() else None
        return control.laptop_config_sha(args.config, info.profile, key_hex)

    def laptop_fw(info: Any) -> tuple[Any, str]:
        return control.laptop_firmware(info.profile)

    report = await _with_board(args, lambda link: control.read_status(
        link, _key_chooser(args), laptop_sha, laptop_fw if args.firmware else None))
    info, st = report.info, report.status
    if args.json:
        _out(console, json.dumps({
            "address": report.address, "name": info.name, "board": info.board, "fw": info.fw,
            "profile": info.profile, "battery_v": st["battery_mv"] / 1000,
            "temp_c": st["temp_cdeg"] / 100, "free_ram_b": st["free_ram"],
            "config_sha": info.config_sha, "config_match": report.config_match,
            "config_note": report.config_note or _config_state(info),
            **_firmware_json(report),
            "key_check": report.key_check, "running": info.has(wire.INFO_RUNNING),
            "run": info.run, "coil_on": info.has(wire.INFO_COIL_ON), "uptime_s": info.uptime_s,
            "counter_floor": info.counter_floor, "mirror_bytes": info.mirror_bytes,
            "flags": info.flag_names, "status": st}))
        return 0
    _out(console, status_line(report, args.config))
    return 0


def _firmware_json(report: Any) -> dict[str, Any]:
    fw = report.firmware
    return {"fw_sha": fw.fw_sha if fw else None, "fw_files": fw.files if fw else None,
            "fw_bytes": fw.size if fw else None, "fw_match": report.firmware_match,
            "fw_note": report.firmware_note}


def firmware_text(report: Any) -> str:
    """The status line's firmware part: the hash and what it was compared with."""
    fw = report.firmware
    if fw is None:
        return f"firmware hash not reported ({report.firmware_note})"
    text = f"firmware {fw.fw_sha} ({fw.files} files)" if fw.files else "firmware: no code files"
    if report.firmware_match is True:
        text += " (same as this laptop's flash)"
    elif report.firmware_match is False:
        text += " (differs from this laptop's flash)"
    elif report.firmware_note:
        text += f" ({report.firmware_note})"
    return text


def _config_state(info: Any) -> str:
    if info.has(wire.INFO_NO_CONFIG_FILE):
        return "the board has no /config.json"
    if info.has(wire.INFO_CONFIG_FALLBACK):
        return "the board refused its /config.json at boot and runs its last good one"
    if info.has(wire.INFO_CONFIG_SAVED):
        return "changed on the board since boot (applies at the next boot)"
    return ""


def status_line(report: Any, config_path: Path | None) -> str:
    info, st = report.info, report.status
    config = "none" if info.has(wire.INFO_NO_CONFIG_FILE) else info.config_sha
    notes = []
    if report.config_match is True:
        notes.append(f"same as {config_path}")
    elif report.config_match is False:
        notes.append(f"differs from {config_path}")
    for note in (report.config_note, _config_state(info)):
        if note:
            notes.append(note)
    if notes:
        config += " (" + "; ".join(notes) + ")"
    coil = ", coil ON" if info.has(wire.INFO_COIL_ON) else ""
    return (f"{info.name} (board {info.board}, fw {info.fw}, {report.address}): "
            f"battery {st['battery_mv'] / 1000:.2f} V, {st['temp_cdeg'] / 100:.1f} °C, "
            f"{st['free_ram']:,} B free RAM, config {config}, {firmware_text(report)}, "
            f"key {report.key_check}, "
            f"{info.run_state}{coil}, up {_duration(info.uptime_s)}")


def _duration(s: float) -> str:
    if s < 120:
        return f"{s:.0f} s"
    if s < 7200:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:.1f} h"


# ---- stop -----------------------------------------------------------------------------
async def _stop(args: argparse.Namespace, console: Console) -> int:
    from slipless.record import control

    if args.insecure:
        console.print("warning: --insecure: STOP goes without a key; a board flashed with a key "
                      "refuses it", style="bold yellow")
    report = await _with_board(args, lambda link: control.stop_board(link, _key_chooser(args)))
    b = report.before
    ran = (f"run {b.run} ended" if b.has(wire.INFO_RUNNING) else "no run was going")
    how = "sealed" if report.sealed else "unsealed"
    _out(console, f"board {b.board} ({b.name}): stop acknowledged ({how}); {ran}; the board "
                  "says its coil is off")
    console.print(STOP_CAUTION, style="bold")
    return 0


# ---- ping -----------------------------------------------------------------------------
async def _ping(args: argparse.Namespace, console: Console) -> int:
    from slipless.record import control

    report = await _with_board(args, lambda link: control.ping_board(link, args.count,
                                                                     args.every))
    offset, delay = report.offsets_delays_s()
    best_offset, best_delay = report.best()
    info = report.info
    if args.json:
        _out(console, json.dumps({
            "address": report.address, "name": info.name, "board": info.board,
            "pings": [{"round_trip_s": float(d), "offset_s": float(o)}
                      for o, d in zip(offset, delay)],
            "offset_s": best_offset, "offset_bound_s": best_delay / 2,
            "offset_is": "board clock - laptop monotonic clock"}))
        return 0
    _out(console, f"{info.name} (board {info.board}, {report.address}): {len(delay)} pings")
    for k, (o, d) in enumerate(zip(offset, delay), start=1):
        _out(console, f"  {k:>3}  round trip {d * 1e3:8.3f} ms  offset {o:+.6f} s")
    _out(console, f"offset {best_offset:+.6f} s ± {best_delay / 2 * 1e3:.3f} ms (board clock - "
                  "laptop monotonic clock; the smallest round trip, whose half bounds the error, "
                  "RFC 5905)")
    return 0
