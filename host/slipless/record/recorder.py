"""`slipless record`: capture a run from a board over BLE.

The recorder connects (any Central from slipless.record.transports), asks the
board who it is when told to (INFO and FIRMWARE: version, config and code hashes,
kept in the capture as a `board` event; a board that does not answer is noted,
not fatal), starts the run, pings for clock alignment, writes every notification
and command to a capture file, decodes live to see gaps, asks the board to resend
them, reconnects with back-off when the link drops, and ends with STOP and a drain.
The state is a small table (STATES) so tests can walk it.
"""

from __future__ import annotations

import asyncio
import json
import struct
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from slipless.decode.decoder import Arrival, Decoder, NullSink, RunState, Tee
from slipless.io.capture import EVENT, RX, TX, CaptureWriter
from slipless.io.pieces import TX_SOURCE_BASE
from slipless.protocol import wire
from slipless.record.transports import Central, LinkError

FEED_BYTES = 16384  # the live decoder takes notifications in batches of about this size
WATCH_FLUSH_BYTES = 4096  # with a live view: samples handed over after about this many bytes

# state -> the states it may move to
STATES: dict[str, tuple[str, ...]] = {
    "idle": ("connecting", "done"),
    "connecting": ("live", "waiting", "done"),
    "live": ("waiting", "stopping", "done"),
    "waiting": ("connecting", "done"),  # back-off before reconnecting
    "stopping": ("done",),
    "done": (),
}


@dataclass
class RecordOptions:
    duration_s: float = 0.0  # 0: until the run ends or Ctrl-C
    label: str = ""
    ping_every_s: float = 1.0
    resend_every_s: float = 0.5  # how often gaps are turned into RESEND commands
    backoff_s: tuple[float, ...] = (0.2, 0.5, 1.0, 2.0, 5.0)
    max_reconnects: int = 1000
    first_tries: int = 3  # connection attempts before the run has started (retryable errors only)
    drain_s: float = 2.0  # after STOP, wait this long for END and late frames
    board: int = 0xFFFF  # command target (0xFFFF: whichever board answers)
    start: bool = True  # send START on the first connection
    pull: bool = False  # instead: ask for the board's file mirror and end when it has come
    signer: Any = None  # keys.Signer: seals start/stop/set_config/pull (None: sent unsealed)
    ask_board: bool = False  # INFO and FIRMWARE on the first connection, before START
    # (`slipless record` asks; off by default so a bare Recorder's first command is START)
    board_wait_s: float = 2.0  # how long to wait for their answers (then noted, and on)
    on_note: Callable[[str], None] | None = None  # told one line when something is noted


class _LiveSink(NullSink):
    """Keeps the few things the live status line and the resend logic need."""

    def __init__(self) -> None:
        self.battery_mv = 0
        self.ended = False
        self.not_held: set[tuple[int, int, int]] = set()  # (board, run, seq) the board lost
        self.last_error = ""
        self.pulled = False  # the ACK that follows the last byte of a pulled mirror
        self.stop_answered = False  # the board's ACK (or ERROR) for STOP
        self.refused: list[tuple[int, int, int]] = []  # ERROR auth: (opcode, floor, why)
        self.asked: set[int] = set()  # request numbers of the INFO and FIRMWARE sent
        self.board_answers: list[tuple[int, int, int, int, dict[str, Any]]] = []  # (request,
        # kind, board, run, fields) of their INFO, FIRMWARE or ERROR answers

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        self.battery_mv = fields["battery_mv"]

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        if kind in (wire.INFO, wire.FIRMWARE, wire.ERROR) and fields["request"] in self.asked:
            if kind != wire.ERROR or fields["opcode"] in (wire.CMD_INFO, wire.CMD_FIRMWARE):
                self.board_answers.append((fields["request"], kind, run.board, run.run, fields))
                return
        if kind == wire.END:
            self.ended = True
        elif kind == wire.ACK and fields["opcode"] == wire.CMD_PULL:
            self.pulled = True
        if (fields.get("opcode", 0) & 0x7F == wire.CMD_STOP
                and (kind == wire.ACK or (kind == wire.ERROR and fields["code"] != wire.ERR_AUTH))):
            self.stop_answered = True  # (a refused seal is sent again: not an answer yet)
        if kind == wire.ERROR:
            if fields["code"] == wire.ERR_AUTH:
                self.refused.append((fields["opcode"], fields["detail_a"], fields["detail_b"]))
            if fields["code"] == wire.ERR_NOT_HELD:
                for seq in range(fields["detail_a"], fields["detail_b"] + 1):
                    self.not_held.add((run.board, run.run, seq))
            else:
                self.last_error = wire.ERROR_NAMES.get(fields["code"], str(fields["code"]))


@dataclass
class Progress:
    frames: int = 0
    samples: int = 0
    gaps: int = 0
    missing: int = 0
    resends_pending: int = 0
    reconnects: int = 0
    battery_mv: int = 0
    state: str = "idle"
    lost_ranges: list[tuple[int, int]] = field(default_factory=list)
    link_error: str = ""  # why the link went or the last attempt failed (empty once connected)


class Recorder:
    def __init__(self, central: Central, capture: CaptureWriter, opts: RecordOptions,
                 on_progress: Callable[[Progress], None] | None = None,
                 watch: Any = None) -> None:
        """watch: a further decoder sink that sees the run as it comes (the live view)."""
        self.central = central
        self.capture = capture
        self.opts = opts
        self.on_progress = on_progress
        self.clock = capture.clock  # the laptop's clocks (simulated ones in simulations)
        self.sink = _LiveSink()
        # a watcher gets samples every few KB, so its plots move smoothly
        self.decoder = (Decoder(self.sink, flush_bytes=1 << 16) if watch is None
                        else Decoder(Tee(self.sink, watch), flush_bytes=WATCH_FLUSH_BYTES))
        self._pending: list[bytes] = []  # notifications not yet decoded (see _feed)
        self._pending_bytes = 0
        self._pending_at = (0, 0)
        self.state = "idle"
        self.progress = Progress()
        self._enc = wire.Encoder(opts.board, 0)
        self._request = 0
        self._dropped = asyncio.Event()
        self._stop = asyncio.Event()
        self._requested: dict[tuple[int, int, int], float] = {}  # (board, run, first) -> time sent
        self._started = False
        self.commands_sent = 0
        self._sealed: dict[int, bytes] = {}  # opcode -> args of the last sealed command
        self.auth_error = ""  # why the board refused a sealed command (not retryable)
        self._not_held_seen = 0
        self.notes: list[str] = []  # one line each: what went otherwise than planned
        self.boards: list[dict[str, Any]] = []  # what each board said at connect (board_facts)

    def _now(self) -> float:
        return float(self.clock.mono_ns()) / 1e9

    # ---- state -------------------------------------------------------------------
    def _move(self, new: str) -> None:
        if new not in STATES[self.state]:
            raise RuntimeError(f"recorder cannot go from {self.state} to {new}")
        self.state = new
        self.progress.state = new
        if self.on_progress is not None:  # (the live view learns of the link at once)
            self.on_progress(self.progress)

    def stop(self) -> None:
        """Ask for a clean end (Ctrl-C, --duration): STOP, drain, close."""
        self._stop.set()

    # ---- link callbacks ------------------------------------------------------------
    def _on_data(self, data: bytes) -> None:
        mono, wall = self.clock.mono_ns(), self.clock.wall_ns()
        self.capture.write(RX, 0, data, mono, wall)  # every notification with its own time
        self._pending.append(data)
        self._pending_bytes += len(data)
        self._pending_at = (mono, wall)
        if self._pending_bytes >= FEED_BYTES:
            self._feed()

    def _feed(self) -> None:
        """Decode what came since the last call, in one piece: the live decoder only
        steers (gaps, replies, progress), so one arrival time per batch will do."""
        if self._pending:
            data = b"".join(self._pending)
            self._pending.clear()
            self._pending_bytes = 0
            self.decoder.feed(data, Arrival(0, *self._pending_at, "radio"))

    def _on_disconnect(self, why: str) -> None:
        self._feed()  # what came before the drop belongs to the old connection
        self.capture.event(0, "disconnected", reason=why)
        self.progress.link_error = f"disconnected ({why})" if why else "disconnected"
        self.decoder.reset_source(0)
        self._dropped.set()

    async def _send(self, frame_len: int) -> None:
        data = self._enc.frame(frame_len)
        self.capture.write(TX, 0, data)
        # the live decoder sees the laptop's commands as a capture's reader does: a frame
        # that fills a gap is a resend only after a RESEND asked for it
        self._feed()
        self.decoder.feed(data, Arrival(TX_SOURCE_BASE, self.clock.mono_ns(), self.clock.wall_ns(),
                                        "radio"))
        self.commands_sent += 1
        await self.central.write(data)

    def _next_request(self) -> int:
        self._request = (self._request + 1) & 0xFFFF
        return self._request

    def _guarded(self, opcode: int, args: bytes = b"") -> int:
        """A state-changing command: sealed with the board key when there is one."""
        if self.opts.signer is None:
            return self._enc.command(opcode, self._next_request(), args)
        self._sealed[opcode] = args
        return int(self.opts.signer.command(self._enc, opcode, self._next_request(), args))

    async def _after_refusals(self) -> None:
        """ERROR auth old_counter (the board rebooted past its counter reserve): jump
        past the floor it names and send once more; any other refusal ends the run."""
        while self.sink.refused:
            opcode, floor, why = self.sink.refused.pop(0)
            args = self._sealed.pop(opcode, None)
            if (wire.AUTH_WHY_NAMES.get(why) == "old_counter" and args is not None
                    and self.opts.signer is not None):
                self.opts.signer.skip_to(floor)
                await self._send(self._guarded(opcode, args))
                self._sealed.pop(opcode, None)  # once only
            else:
                self.auth_error = (f"{wire.COMMAND_NAMES.get(opcode, opcode)}: "
                                   f"{wire.AUTH_WHY_NAMES.get(why, why)}")
                self._stop.set()

    # ---- the run -----------------------------------------------------------------------
    async def run(self) -> Progress:
        deadline = self._now() + self.opts.duration_s if self.opts.duration_s else None
        attempt = 0
        while not self._stop.is_set():
            self._move("connecting")
            try:
                await self.central.connect(self._on_data, self._on_disconnect)
            except LinkError as exc:
                self.progress.link_error = str(exc)
                self.capture.event(0, "connect_failed", reason=str(exc), retry=exc.retry)
                if not self._gives_another_try(exc, attempt):
                    self._move("done")
                    raise
                await self._back_off(attempt)
                attempt += 1
                continue
            attempt = 0
            self.progress.link_error = ""
            self._dropped.clear()
            info: dict[str, Any] = dict(self.central.link_info())  # MTU, write size, interval...
            info.update(mtu=self.central.mtu, address=self.central.address)
            self.capture.event(0, "connected", **info)
            self._move("live")
            try:
                if self.opts.ask_board and not self._started and not self.opts.pull:
                    asked_at = self._now()
                    await self._ask_board()
                    if deadline is not None:  # the run's time starts with START, after asking
                        deadline += self._now() - asked_at
                await self._begin()
                await self._live(deadline)
            except LinkError as exc:  # a write failed: the link went before its callback said so
                if not exc.retry:
                    self._move("done")
                    raise
                self._dropped.set()
            if (self._stop.is_set() or self.sink.ended or self.sink.pulled
                    or (self.opts.pull and self.sink.last_error)):
                break
            self.progress.reconnects += 1
            await self._back_off(attempt)
        if self.state == "live":
            self._move("stopping")
            await self._finish()
        if self.state != "done":
            self._move("done")
        self._feed()
        self.decoder.finish()
        self._update()
        return self.progress

    def _gives_another_try(self, exc: LinkError, attempt: int) -> bool:
        """Back off and try again? Never for what waiting cannot mend (no Bluetooth,
        a board without our GATT service); before the run has started only a few
        times (a board switched on late is found, a mistyped name ends soon)."""
        if not exc.retry or attempt >= self.opts.max_reconnects:
            return False
        return self._started or attempt + 1 < self.opts.first_tries

    def _note(self, text: str) -> None:
        self.notes.append(text)
        self.capture.event(0, "note", text=text)
        if self.opts.on_note is not None:
            self.opts.on_note(text)

    async def _ask_board(self) -> None:
        """INFO and FIRMWARE (open commands: they change nothing), their answers kept
        in the capture as one `board` event per board that answered. No answer within
        board_wait_s: one note, and the recording goes on."""
        sink = self.sink
        info_req = self._next_request()
        sink.asked.add(info_req)
        await self._send(self._enc.command(wire.CMD_INFO, info_req))
        fw_req = self._next_request()
        sink.asked.add(fw_req)
        await self._send(self._enc.command(wire.CMD_FIRMWARE, fw_req))
        end = self._now() + self.opts.board_wait_s
        while not (self._dropped.is_set() or self._stop.is_set()) and self._now() < end:
            self._feed()
            got = {(a[0], a[2]) for a in sink.board_answers}
            boards = {b for r, b in got if r == info_req}
            if boards and all((fw_req, b) in got for b in boards):
                break
            await asyncio.sleep(0.05)
        self._feed()
        self.boards = board_facts(sink.board_answers, info_req, fw_req)
        for facts in self.boards:  # (written whole: a board's `name` is one of its fields)
            self.capture.write(EVENT, 0, json.dumps({"event": "board", **facts}).encode())
        if not self.boards:
            self._note(f"the board did not answer INFO within {self.opts.board_wait_s:g} s: "
                       "its version and hashes are not in the capture; recording on")
        for facts in self.boards:
            if facts.get("fw_note"):
                self._note(f"board {facts['board']}: no firmware hash ({facts['fw_note']}); "
                           "recording on")

    async def _begin(self) -> None:
        """The first connection's command: PULL or START (once they went, never again)."""
        if self.opts.pull and not self._started:
            await self._send(self._guarded(wire.CMD_PULL))
        elif self.opts.start and not self._started:
            label = self.opts.label.encode()
            await self._send(self._guarded(
                wire.CMD_START, struct.pack(wire.START_ARGS, int(self.opts.duration_s))
                + bytes([len(label)]) + label))
        self._started = True

    async def _back_off(self, attempt: int) -> None:
        self._move("waiting")
        delay = self.opts.backoff_s[min(attempt, len(self.opts.backoff_s) - 1)]
        try:
            await asyncio.wait_for(self._stop.wait(), delay)
        except TimeoutError:
            pass

    async def _live(self, deadline: float | None) -> None:
        next_ping = self._now()
        next_resend = self._now() + self.opts.resend_every_s
        while not (self._dropped.is_set() or self._stop.is_set() or self.sink.ended
                   or self.sink.pulled or (self.opts.pull and self.sink.last_error)):
            now = self._now()
            if deadline is not None and now >= deadline:
                self._stop.set()
                break
            if now >= next_ping:
                next_ping = now + self.opts.ping_every_s
                await self._send(self._enc.ping(self._next_request(), self.clock.mono_ns()))
            if now >= next_resend:
                next_resend = now + self.opts.resend_every_s
                await self._request_resends(now)
            await self._after_refusals()
            self._update()
            try:
                await asyncio.wait_for(self._dropped.wait(), 0.05)
            except TimeoutError:
                pass
            self._feed()  # so the loop's test sees an END or ACK that just came

    async def _request_resends(self, now: float) -> None:
        """Ask again for every gap seen (each at most once per second)."""
        self._feed()
        lost = self.sink.not_held
        for run in self.decoder.runs.values():
            for first, last, _ in run.gaps:
                while first <= last and (run.board, run.run, first) in lost:
                    first += 1  # the board already said it no longer holds these
                while last >= first and (run.board, run.run, last) in lost:
                    last -= 1
                if first > last:
                    continue
                key = (run.board, run.run, first)
                if now - self._requested.get(key, -1e9) < 1.0:
                    continue
                self._requested[key] = now
                self.capture.event(0, "resend", board=run.board, run=run.run, first=first,
                                   last=last)
                self._enc.run = run.run  # the header names the run the range belongs to
                await self._send(self._enc.resend(self._next_request(), first, last))
                self._enc.run = 0

    async def _finish(self) -> None:
        if self.opts.pull:  # nothing was started: nothing to stop
            await self.central.disconnect()
            return
        try:
            await self._send(self._guarded(wire.CMD_STOP))
        except LinkError:
            return
        end = self._now() + self.opts.drain_s
        while self._now() < end:
            await self._request_resends(self._now())
            if self.opts.signer is not None and self.sink.refused:
                await self._after_refusals()
            # STOP turns the coil off: hang up only once the board has answered it
            if (self.sink.ended and self.sink.stop_answered
                    and not any(r.gaps for r in self.decoder.runs.values())):
                break
            await asyncio.sleep(0.05)
        await self.central.disconnect()

    def _update(self) -> None:
        """Refresh the progress figures (and the live status line)."""
        self._feed()
        p = self.progress
        runs = list(self.decoder.runs.values())
        p.frames = sum(r.received for r in runs)
        p.samples = sum(r.samples for r in runs)
        p.gaps = sum(len(r.gaps) for r in runs)
        p.missing = sum(self.decoder.missing(r) for r in runs)
        p.resends_pending = sum(1 for r in runs for g in r.gaps
                                if (r.board, r.run, g[0]) in self._requested)
        p.battery_mv = self.sink.battery_mv
        if len(self.sink.not_held) != self._not_held_seen:  # (only grows: sort on change)
            self._not_held_seen = len(self.sink.not_held)
            p.lost_ranges = _ranges(sorted(self.sink.not_held))
        if self.on_progress is not None:
            self.on_progress(p)


def board_facts(answers: list[tuple[int, int, int, int, dict[str, Any]]], info_req: int,
                fw_req: int) -> list[dict[str, Any]]:
    """Per board that answered INFO: what the capture keeps of it (CAPTURE.md, `board`
    event): identity, version, config hash, flags, and the firmware hash or why none."""
    from slipless.record.control import Answer, BoardInfo, firmware_refusal

    out: dict[int, dict[str, Any]] = {}
    for request, kind, board, run, f in answers:
        if request == info_req and kind == wire.INFO and board not in out:
            info = BoardInfo.from_answer(Answer(kind, board, run, 0, f, 0))
            out[board] = {"board": board, "run": run, "fw": info.fw, "name": info.name,
                          "profile": info.profile, "config_sha": info.config_sha,
                          "flags": info.flag_names, "uptime_s": info.uptime_s,
                          "fw_sha": None, "fw_files": None, "fw_bytes": None,
                          "fw_note": "it did not answer the firmware command"}
    for request, kind, board, _, f in answers:
        facts = out.get(board)
        if request != fw_req or facts is None or facts["fw_sha"] is not None:
            continue
        if kind == wire.FIRMWARE:
            facts.update(fw_sha=f["fw_sha"], fw_files=f["files"], fw_bytes=f["size"], fw_note="")
        elif kind == wire.ERROR:
            facts["fw_note"] = firmware_refusal(wire.ERROR_NAMES.get(f["code"], str(f["code"])))
    return [out[b] for b in sorted(out)]


def _ranges(seqs: list[tuple[int, int, int]]) -> list[tuple[int, int]]:
    """Sorted (board, run, seq) -> [(first, last)] runs of consecutive seqs."""
    out: list[list[int]] = []
    prev: tuple[int, int] | None = None
    for board, run, seq in seqs:
        if out and prev == (board, run) and out[-1][1] == seq - 1:
            out[-1][1] = seq
        else:
            out.append([seq, seq])
        prev = (board, run)
    return [(a, b) for a, b in out]
