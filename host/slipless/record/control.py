"""Talking to one board outside a run: connect, send commands, wait for their
answers, hang up. Nothing here prints: cli/board.py formats what it returns.

Every wait has a timeout and every failure is a BoardError whose message is
one line saying what happened (cli.py prints it and exits 2).

Answers are matched to commands by request number (a random start on each
connection, so replies still queued on the board from an earlier session do
not pass for ours) and, for ACK and ERROR, by opcode. The STATUS frame that
answers a status command is the one the board sent just before its ACK
(seq - 1): the board builds them back to back (firmware/commands.py).
"""

from __future__ import annotations

import asyncio
import hashlib
import json
import secrets
import struct
from collections import OrderedDict
from collections.abc import AsyncIterator, Callable
from contextlib import asynccontextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from slipless.align.clockfit import onwire
from slipless.decode.deframe import FastDeframer
from slipless.decode.frames import MalformedFrame, parse_body
from slipless.errors import (
    BoardError,  # noqa: F401
    )
from slipless.protocol import wire
from slipless.record.transports import Central, LinkError

ANSWER_TIMEOUT_S = 10.0  # one command's answer (a BLE round trip is tens of ms: common practice)
KEPT_STATUS = 16  # STATUS frames remembered to pair with a status command's ACK
TICK_NS = 1000  # board ticks are microseconds (SPEC section 3: tick_hz 1 000 000)
_REPLY_KIND = {wire.CMD_PING: wire.SYNC, wire.CMD_INFO: wire.INFO,
               wire.CMD_FIRMWARE: wire.FIRMWARE}  # the rest: ACK
_ANSWERS = (wire.SYNC, wire.ACK, wire.ERROR, wire.INFO, wire.FIRMWARE)




class Clock(Protocol):
    def mono_ns(self) -> int: ...


class LoopClock:
    """The laptop's monotonic clock as the running event loop keeps it (time.monotonic
    on a real loop; simulated time on sim.virtual_time's, so tests measure exactly)."""

    @staticmethod
    def mono_ns() -> int:
        return round(asyncio.get_running_loop().time() * 1e9)


def command_name(opcode: int) -> str:
    return wire.COMMAND_NAMES.get(opcode & 0x7F, f"opcode {opcode}")


@dataclass
class Answer:
    """The frame that answered one command."""

    kind: int  # wire.ACK, ERROR, SYNC, INFO or FIRMWARE
    board: int
    run: int
    seq: int
    fields: dict[str, Any]
    rx_mono_ns: int  # laptop monotonic time when the notification carrying it arrived
    status: dict[str, Any] | None = None  # status command: the STATUS frame before the ACK

    @property
    def error(self) -> str:
        """'' for an ACK, SYNC, INFO or FIRMWARE; else the error's name (auth: 'auth bad_tag')."""
        if self.kind != wire.ERROR:
            return ""
        code = self.fields["code"]
        name = wire.ERROR_NAMES.get(code, f"code {code}")
        if code == wire.ERR_AUTH:
            why = self.fields["detail_b"]
            name += " " + wire.AUTH_WHY_NAMES.get(why, f"why {why}")
        return name

    @property
    def auth_why(self) -> str:
        """Why the board refused the seal ('' unless ERROR auth)."""
        if self.kind != wire.ERROR or self.fields["code"] != wire.ERR_AUTH:
            return ""
        return wire.AUTH_WHY_NAMES.get(self.fields["detail_b"], str(self.fields["detail_b"]))


class BoardLink:
    """One connection to one board: commands out, their answers back."""

    def __init__(self, central: Central, timeout_s: float = ANSWER_TIMEOUT_S,
                 connect_timeout_s: float | None = None, clock: Clock | None = None) -> None:
        self.central = central
        self.timeout_s = timeout_s
        self.connect_timeout_s = connect_timeout_s or 2 * timeout_s
        self.clock: Clock = clock or LoopClock()
        self.target = 0xFFFF  # any board, until INFO names it
        self._enc = wire.Encoder(0xFFFF, 0)
        self._request = secrets.randbelow(0x10000)
        self._deframer = FastDeframer()
        self._pending: dict[int, tuple[int, asyncio.Future[Answer]]] = {}
        self._status: OrderedDict[tuple[int, int, int], dict[str, Any]] = OrderedDict()
        self.dropped = ""  # why the link went down, once it has

    # ---- connection -------------------------------------------------------------
    async def connect(self) -> None:
        try:
            await asyncio.wait_for(self.central.connect(self._on_data, self._on_drop),
                                   self.connect_timeout_s)
        except LinkError as exc:
            raise BoardError(str(exc)) from exc
        except TimeoutError:
            raise BoardError(f"could not connect to the board within {self.connect_timeout_s:g} s"
                             ) from None
        except Exception as exc:  # the stacks raise many kinds mid-connection (GATT, HCI, OS)
            raise BoardError(f"cannot connect to the board ({type(exc).__name__}: "
                             f"{exc or 'no detail'})") from exc

    async def disconnect(self) -> None:
        try:
            await asyncio.wait_for(self.central.disconnect(), self.timeout_s)
        except Exception:  # hanging up is best effort: the board notices a lost link itself
            pass

    def _on_drop(self, why: str) -> None:
        self.dropped = why or "lost"
        for opcode, fut in self._pending.values():
            if not fut.done():
                fut.set_exception(BoardError(
                    f"the link to the board dropped ({self.dropped}) before it answered "
                    f"{command_name(opcode)}"))

    def _on_data(self, data: bytes) -> None:
        stamp = self.clock.mono_ns()
        for body, _, _ in self._deframer.feed(data):
            self._frame(body, stamp)

    def _frame(self, body: bytes, stamp: int) -> None:
        version, kind, board, run, seq = wire.parse_header(body)
        if version != wire.VERSION or (kind != wire.STATUS and kind not in _ANSWERS):
            return  # samples, events and the rest of a run: not what we wait for
        try:
            f = parse_body(kind, body[wire.HEADER_SIZE :])
        except MalformedFrame:
            return
        if kind == wire.STATUS:
            self._status[(board, run, seq)] = f
            while len(self._status) > KEPT_STATUS:
                self._status.popitem(last=False)
            return
        entry = self._pending.get(f["request"])
        if entry is None or entry[1].done():
            return
        opcode, fut = entry
        if kind in (wire.ACK, wire.ERROR):
            if f["opcode"] != opcode or (kind == wire.ACK and opcode in _REPLY_KIND):
                return  # an older command's answer that shares the request number
        elif _REPLY_KIND.get(opcode) != kind:
            return
        status = None
        if kind == wire.ACK and opcode == wire.CMD_STATUS:
            status = self._status.get((board, run, seq - 1))
        fut.set_result(Answer(kind, board, run, seq, f, stamp, status))

    # ---- commands ---------------------------------------------------------------
    def _next_request(self) -> int:
        self._request = (self._request + 1) & 0xFFFF
        return self._request

    async def ask(self, opcode: int, args: bytes = b"", signer: Any = None) -> Answer:
        """Send one command (sealed with signer, a keys.Signer, when given) and
        return its answer. A seal refused as old_counter (the board rebooted past
        its reserve) is sent once more above the floor the board named."""
        answer = await self._ask_once(opcode, args, signer)
        if signer is not None and answer.auth_why == "old_counter":
            signer.skip_to(answer.fields["detail_a"])
            answer = await self._ask_once(opcode, args, signer)
        return answer

    async def _ask_once(self, opcode: int, args: bytes, signer: Any) -> Answer:
        if self.dropped:
            raise BoardError(f"the link to the board is down ({self.dropped})")
        request = self._next_request()
        self._enc.board = self.target
        if signer is not None:
            n = signer.command(self._enc, opcode, request, args)
        else:
            n = self._enc.command(opcode, request, args)
        fut: asyncio.Future[Answer] = asyncio.get_running_loop().create_future()
        self._pending[request] = (opcode, fut)
        name = command_name(opcode)
        try:
            try:
                await asyncio.wait_for(self.central.write(self._enc.frame(n)), self.timeout_s)
            except LinkError as exc:
                raise BoardError(f"cannot send {name} to the board: {exc}") from exc
            except TimeoutError:
                raise BoardError(f"sending {name} to the board took over {self.timeout_s:g} s"
                                 ) from None
            try:
                return await asyncio.wait_for(fut, self.timeout_s)
            except TimeoutError:
                raise BoardError(f"the board did not answer {name} within {self.timeout_s:g} s"
                                 ) from None
        finally:
            self._pending.pop(request, None)

    def latest_status(self) -> dict[str, Any] | None:
        return next(reversed(self._status.values()), None) if self._status else None


@asynccontextmanager
async def connected(central: Central, timeout_s: float = ANSWER_TIMEOUT_S,
                    connect_timeout_s: float | None = None,
                    clock: Clock | None = None) -> AsyncIterator[BoardLink]:
    link = BoardLink(central, timeout_s, connect_timeout_s, clock)
    await link.connect()
    try:
        yield link
    finally:
        await link.disconnect()


# ---- what the board says about itself -----------------------------------------------
@dataclass
class BoardInfo:
    """An INFO frame, read."""

    board: int
    run: int
    fw: str
    name: str
    profile: str
    flags: int
    counter_floor: int
    mirror_bytes: int
    config_sha: str  # hex, wire.CONFIG_SHA_SIZE bytes
    uptime_s: float

    @classmethod
    def from_answer(cls, a: Answer) -> BoardInfo:
        f = a.fields
        return cls(a.board, a.run, f"{f['fw_major']}.{f['fw_minor']}.{f['fw_patch']}", f["name"],
                   f["profile"], f["flags"], f["counter_floor"], f["mirror_bytes"],
                   f["config_sha"], f["tick"] * TICK_NS / 1e9)

    def has(self, flag: int) -> bool:
        return bool(self.flags & flag)

    @property
    def flag_names(self) -> list[str]:
        return [n for bit, n in sorted(wire.INFO_FLAG_NAMES.items()) if self.flags & bit]

    @property
    def run_state(self) -> str:
        if self.has(wire.INFO_RUNNING):
            return f"running run {self.run}"
        return f"idle (run id {self.run})"


async def read_info(link: BoardLink) -> BoardInfo:
    """INFO, unsealed (it changes nothing); names the board for later commands."""
    a = await link.ask(wire.CMD_INFO)
    if a.kind == wire.ERROR:
        if a.fields["code"] == wire.ERR_BAD_COMMAND:
            raise BoardError("the board does not know the info command: its firmware is older "
                             "than this laptop's (update it with slipless flash)")
        raise BoardError(f"the board refused info ({a.error})")
    info = BoardInfo.from_answer(a)
    link.target = info.board
    return info


@dataclass
class BoardFirmware:
    """A FIRMWARE frame, read (SPEC 3.11): the hash of the board's code files."""

    files: int
    size: int
    fw_sha: str  # hex, wire.FW_SHA_SIZE bytes; zeros when files is 0

    def facts(self) -> dict[str, Any]:
        return {"fw_sha": self.fw_sha, "fw_files": self.files, "fw_bytes": self.size}


def firmware_refusal(error: str) -> str:
    """Why a board gave no firmware hash, from its ERROR's name: one phrase."""
    if error == "bad_command":
        return "its firmware is older than the firmware command"
    if error == "busy":
        return "it does not read its code files during a run"
    return f"it refused the firmware command ({error})"


async def read_firmware(link: BoardLink) -> tuple[BoardFirmware | None, str]:
    """FIRMWARE, unsealed (it changes nothing) -> (the hash, or None and why not)."""
    a = await link.ask(wire.CMD_FIRMWARE)
    if a.kind == wire.ERROR:
        return None, firmware_refusal(a.error)
    f = a.fields
    return BoardFirmware(f["files"], f["size"], f["fw_sha"]), ""


def laptop_firmware(profile: str) -> tuple[BoardFirmware | None, str]:
    """SPEC 3.11's hash of the code files this laptop's `slipless flash` would copy to a
    board running `profile` (compiled with mpy-cross, as flash does)
    -> (the hash, or None and why it cannot be known)."""
    import tempfile

    from slipless.board.files import firmware_dir
    from slipless.board.flash import build_plan, firmware_hash, load_profile, resolve_config
    from slipless.errors import InputError

    try:
        fw = firmware_dir()
        config, _ = resolve_config(fw, None, None)
        prof = load_profile(fw, profile)
        with tempfile.TemporaryDirectory(prefix="slipless-fwhash-") as tmp:
            files, size, sha = firmware_hash(build_plan(fw, config, prof, Path(tmp)))
    except InputError as exc:
        return None, f"not compared: {exc}"
    return BoardFirmware(files, size, sha), ""


# A board's key on this laptop, chosen once the board has said who it is:
# -> (keys.Signer or None, why there is none).
KeyChooser = Callable[[BoardInfo], tuple[Any, str]]


@dataclass
class StatusReport:
    address: str
    info: BoardInfo
    status: dict[str, Any]
    key_check: str  # ok | refused: WHY | board has no key | not checked (WHY)
    config_match: bool | None = None  # against the laptop's copy; None: not compared
    config_note: str = ""
    firmware: BoardFirmware | None = None  # None: the board gave none (firmware_note says why)
    firmware_note: str = ""
    firmware_match: bool | None = None  # against this laptop's flash; None: not compared

    @property
    def key_ok(self) -> bool:
        return self.key_check == "ok"


async def read_status(link: BoardLink, choose_key: KeyChooser,
                      laptop_sha: Callable[[BoardInfo], tuple[str | None, str]] | None = None,
                      laptop_fw: Callable[[BoardInfo], tuple[BoardFirmware | None, str]]
                      | None = None) -> StatusReport:
    """INFO, FIRMWARE, then STATUS: sealed when this laptop holds the board's key,
    which makes it a key check (SPEC 3.9.1); refused, it is asked again unsealed."""
    info = await read_info(link)
    firmware, firmware_note = await read_firmware(link)
    signer, why_none = choose_key(info)
    status = None
    if signer is None:
        key_check = f"not checked ({why_none})"
    else:
        a = await link.ask(wire.CMD_STATUS, signer=signer)
        if a.kind == wire.ACK:
            key_check, status = "ok", a.status
        elif a.auth_why == "no_key":
            key_check = "board has no key"
        elif a.auth_why:
            key_check = f"refused: {a.auth_why}"
        else:
            raise BoardError(f"the board refused status ({a.error})")
    if status is None:
        a = await link.ask(wire.CMD_STATUS)
        if a.kind != wire.ACK:
            raise BoardError(f"the board refused status ({a.error})")
        status = a.status or link.latest_status()
    if status is None:
        raise BoardError("the board acknowledged status but its STATUS frame did not arrive")
    report = StatusReport(link.central.address, info, status, key_check, firmware=firmware,
                          firmware_note=firmware_note)
    if laptop_fw is not None and firmware is not None:
        mine, note = laptop_fw(info)
        if mine is None:
            report.firmware_note = note
        else:
            report.firmware_match = mine.fw_sha == firmware.fw_sha
    if laptop_sha is not None:
        sha, note = laptop_sha(info)
        report.config_note = note
        if sha is not None and not info.has(wire.INFO_NO_CONFIG_FILE):
            report.config_match = sha == info.config_sha
    return report


@dataclass
class StopReport:
    before: BoardInfo
    after: BoardInfo
    sealed: bool


async def stop_board(link: BoardLink, choose_key: KeyChooser) -> StopReport:
    """STOP (coil off, run ended), sealed when the board has a key; then INFO
    again, so the answer is the board's own word that its coil is off."""
    before = await read_info(link)
    signer = None
    if before.has(wire.INFO_KEYED):
        signer, why_none = choose_key(before)
        if signer is None and why_none != "--insecure":
            raise BoardError(f"board {before.board} has a key and {why_none}: give --key FILE "
                             f"(written by slipless flash); {_coil(before)}")
    a = await link.ask(wire.CMD_STOP, signer=signer)
    if a.kind != wire.ACK:
        hint = " (stop must be sealed with the board's key: --key FILE)" if a.auth_why else ""
        raise BoardError(f"board {before.board} refused stop ({a.error}){hint}; {_coil(before)}")
    after = await read_info(link)
    if after.has(wire.INFO_COIL_ON):
        raise BoardError(f"board {before.board} acknowledged stop but says its coil is still on: "
                         "cut the coil's supply by hand")
    return StopReport(before, after, signer is not None)


def _coil(info: BoardInfo) -> str:
    if info.has(wire.INFO_COIL_ON):
        return "it says its coil is ON: cut the coil's supply by hand"
    return "it says its coil is off"


@dataclass
class Exchange:
    """One PING and its SYNC: the four timestamps of RFC 5905 section 8."""

    t1_ns: int  # laptop monotonic, PING sent (echoed as host_ns)
    t2_ns: int  # board time, PING received
    t3_ns: int  # board time, SYNC built
    t4_ns: int  # laptop monotonic, SYNC arrived


@dataclass
class PingReport:
    address: str
    info: BoardInfo
    exchanges: list[Exchange] = field(default_factory=list)

    def offsets_delays_s(self) -> tuple[np.ndarray, np.ndarray]:
        """offset = board clock - laptop clock and round-trip delay, each in seconds
        (clockfit.onwire on nanoseconds relative to the first exchange, so the
        float64 arithmetic stays exact)."""
        e0 = self.exchanges[0]
        t1 = np.array([e.t1_ns - e0.t1_ns for e in self.exchanges], dtype=np.float64)
        t2 = np.array([e.t2_ns - e0.t2_ns for e in self.exchanges], dtype=np.float64)
        t3 = np.array([e.t3_ns - e0.t2_ns for e in self.exchanges], dtype=np.float64)
        t4 = np.array([e.t4_ns - e0.t1_ns for e in self.exchanges], dtype=np.float64)
        offset, delay = onwire(t1, t2, t3, t4)
        return (offset + (e0.t2_ns - e0.t1_ns)) / 1e9, delay / 1e9

    def best(self) -> tuple[float, float]:
        """The exchange with the smallest round trip (RFC 5905's clock filter keeps
        it): its offset and delay in seconds; the true offset is within delay / 2."""
        offset, delay = self.offsets_delays_s()
        i = int(np.argmin(delay))
        return float(offset[i]), float(delay[i])


async def ping_board(link: BoardLink, count: int, every_s: float) -> PingReport:
    report = PingReport(link.central.address, await read_info(link))
    for k in range(count):
        if k:
            await asyncio.sleep(every_s)
        t1 = link.clock.mono_ns()
        a = await link.ask(wire.CMD_PING, struct.pack(wire.PING_ARGS, t1))
        if a.kind != wire.SYNC:
            raise BoardError(f"the board refused ping ({a.error})")
        f = a.fields
        report.exchanges.append(Exchange(f["host_ns"], f["rx_tick"] * TICK_NS,
                                         f["tx_tick"] * TICK_NS, a.rx_mono_ns))
    return report


# ---- the laptop's copy of a board's config ------------------------------------------
def flashed_config_bytes(config: dict[str, Any]) -> bytes:
    """The bytes `slipless flash` writes as /config.json (SPEC 3.10: what INFO hashes)."""
    return json.dumps(config, separators=(",", ":")).encode()


def config_sha(data: bytes) -> str:
    return hashlib.sha256(data).digest()[: wire.CONFIG_SHA_SIZE].hex()


def laptop_config_sha(config_path: Path, profile: str, key_hex: str | None) -> tuple[str | None, str]:
    """SPEC 3.10's hash of the config file as `slipless flash` would have written it
    to a board running `profile` (the file's own profile wins, as in flash) whose
    key is key_hex (flash adds a key to a config without one).
    -> (hex, or None when it cannot be known; a note saying why or what differs)."""
    from slipless.board.files import firmware_dir
    from slipless.board.flash import resolve_config

    given = _given_profile(config_path)
    config, _ = resolve_config(firmware_dir(), config_path, None if given else profile)
    note = ""
    if given and given != profile:
        note = f"{config_path} is for profile {given!r}, the board runs {profile!r}"
    if not config["link"]["key_hex"]:
        if key_hex is None:
            return None, (f"not compared with {config_path}: flash gave the board a key this "
                          "laptop does not hold")
        config["link"]["key_hex"] = key_hex
    return config_sha(flashed_config_bytes(config)), note


def _given_profile(path: Path) -> str | None:
    """The profile a config file names, if it is readable and names one (resolve_config
    reports every other problem with the file)."""
    try:
        raw = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        return None
    given = raw.get("profile") if isinstance(raw, dict) else None
    return given if isinstance(given, str) and given else None
