"""What `slipless loss` needs from the inputs, gathered in one decoding pass.

The decoder's sink calls give, per frame, its fate and origin and when it
reached the laptop, and per decoded record its board tick; the inputs also
hold what the laptop asked the board for (RESEND commands among the bytes it
wrote) and when the link went down (capture events). This module only
collects those facts per run; loss.py turns them into the accounting.
"""

from __future__ import annotations

import json
import math
import struct
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from slipless import capture
from slipless.decoder import Arrival, Decoder, NullSink, RunState, StreamInfo
from slipless.deframe import FastDeframer
from slipless.errors import InputError
from slipless.inputs import TX_SOURCE_BASE, Source, check_decoded, classify_all, feed_all
from slipless.protocol import wire

# Rotation-rate units a stream may carry, as factors to rad/s.
RATE_UNITS = {"rad/s": 1.0, "deg/s": math.pi / 180, "°/s": math.pi / 180, "dps": math.pi / 180,
              "rpm": 2 * math.pi / 60, "rev/s": 2 * math.pi, "rps": 2 * math.pi}
_RESEND = struct.Struct("<" + wire.HEADER.lstrip("<") + wire.COMMAND_FIXED.lstrip("<")
                        + wire.RESEND_ARGS.lstrip("<"))


@dataclass
class FirstCopy:
    """The copy of a frame that counts: the first good one to arrive."""

    origin: str  # radio, resend, mirror, stream (decoder.ORIGINS)
    source: int  # which link of the input (a capture's board connection)
    mono_ns: int
    wall_ns: int
    late: bool  # a higher seq of its run had already come over the link


@dataclass
class RateStream:
    info: StreamInfo
    ticks: list[np.ndarray] = field(default_factory=list)
    values: list[np.ndarray] = field(default_factory=list)


@dataclass
class RunFacts:
    state: RunState
    first: dict[int, FirstCopy] = field(default_factory=dict)
    kinds: dict[int, int] = field(default_factory=dict)  # seq -> frame kind of the first copy
    duplicates: int = 0  # extra copies over the link (radio, resend, stream)
    mirror_copies: int = 0  # mirror copies of frames already held
    opened: list[tuple[int, int, int]] = field(default_factory=list)  # gaps as they opened, + damage
    status: list[tuple[int, int, int]] = field(default_factory=list)  # seq, dropped, queue_high
    not_held: list[tuple[int, int]] = field(default_factory=list)
    end: dict[str, Any] | None = None
    tick_seqs: list[np.ndarray] = field(default_factory=list)  # board tick near each frame's sending
    tick_vals: list[np.ndarray] = field(default_factory=list)
    blocks: dict[int, list[np.ndarray]] = field(default_factory=dict)  # stream -> [seq, tick0, n] rows
    rates: dict[int, RateStream] = field(default_factory=dict)
    markers: list[tuple[int, int]] = field(default_factory=list)  # (tick, value) of marker events
    _link_high: int = -1
    _dec_high: int = -1

    def known_ticks(self) -> tuple[np.ndarray, np.ndarray]:
        """(seq, tick) pairs, one per seq (the latest tick a frame carried), sorted by seq."""
        if not self.tick_seqs:
            return np.zeros(0, np.int64), np.zeros(0, np.int64)
        s = np.concatenate(self.tick_seqs)
        t = np.concatenate(self.tick_vals)
        order = np.lexsort((t, s))
        s, t = s[order], t[order]
        last = np.flatnonzero(np.diff(s, append=s[-1] + 1))
        return s[last], t[last]


@dataclass
class Resend:
    board: int
    run: int  # 0: the board's current run
    first: int
    last: int
    mono_ns: int


@dataclass
class LinkDown:
    source: int
    start_mono_ns: int
    end_mono_ns: int  # the next `connected`, or the end of the capture


@dataclass
class Facts:
    runs: dict[tuple[int, int], RunFacts]
    decoder: Decoder
    resends: list[Resend]
    link_down: list[LinkDown]
    sources: list[Source]


def rate_factor(info: StreamInfo) -> float | None:
    return RATE_UNITS.get(info.unit.strip().lower().replace(" ", ""))


class LossSink(NullSink):
    def __init__(self, angle_stream: str | None = None) -> None:
        self.runs: dict[tuple[int, int], RunFacts] = {}
        self.angle_stream = angle_stream

    def facts_for(self, run: RunState) -> RunFacts:
        f = self.runs.get(run.key)
        if f is None:
            f = self.runs[run.key] = RunFacts(run)
        return f

    def _tick(self, f: RunFacts, seq: int, tick: int) -> None:
        f.tick_seqs.append(np.array([seq], np.int64))
        f.tick_vals.append(np.array([tick], np.int64))

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        if not origin:  # the decoder's closing rows for frames never seen
            return
        f = self.facts_for(run)
        if fate == "duplicate":
            if origin == "mirror":
                f.mirror_copies += 1
            else:
                f.duplicates += 1
            return
        if origin != "mirror":
            if seq > f._dec_high + 1 and run.gaps and run.gaps[-1][1] == seq - 1:
                first, last, damaged = run.gaps[-1]
                f.opened.append((first, last, damaged))
            late = seq < f._link_high
            f._link_high = max(f._link_high, seq)
        else:
            late = False
        f._dec_high = max(f._dec_high, seq)
        f.first[seq] = FirstCopy(origin, arrival.source, arrival.mono_ns, arrival.wall_ns, late)
        f.kinds[seq] = kind

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        f = self.facts_for(run)
        seqs, start, counts = np.unique(seq, return_index=True, return_counts=True)
        first_tick = tick[start]
        f.blocks.setdefault(info.stream, []).append(np.stack([seqs, first_tick, counts], axis=1))
        f.tick_seqs.append(seqs)
        f.tick_vals.append(first_tick + (counts - 1) * info.period_us)  # the last sample's tick
        wanted = (info.name == self.angle_stream if self.angle_stream
                  else rate_factor(info) is not None)
        if wanted:
            r = f.rates.setdefault(info.stream, RateStream(info))
            r.ticks.append(np.asarray(tick, np.int64))
            r.values.append(raw.astype(np.float64) * info.scale + info.offset)

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        f = self.facts_for(run)
        self._tick(f, seq, tick)
        if code == wire.EV_MARKER:
            f.markers.append((tick, value))

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        f = self.facts_for(run)
        self._tick(f, seq, fields["tick"])
        f.status.append((seq, fields["dropped"], fields["queue_high"]))

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        f = self.facts_for(run)
        if kind == wire.END:
            f.end = fields
            self._tick(f, seq, fields["tick"])
        elif kind == wire.SYNC:
            self._tick(f, seq, fields["tx_tick"])
        elif kind == wire.ERROR and fields["code"] == wire.ERR_NOT_HELD:
            f.not_held.append((fields["detail_a"], fields["detail_b"]))


class CommandLog:
    """RESEND commands among the bytes the laptop wrote (capture or btsnoop TX)."""

    def __init__(self) -> None:
        self.resends: list[Resend] = []
        self._deframers: dict[int, FastDeframer] = {}

    def feed(self, data: bytes, arrival: Arrival) -> None:
        d = self._deframers.setdefault(arrival.source, FastDeframer())
        for body, _, _ in d.feed(data):
            if body[0] != (wire.VERSION << 4) | wire.COMMAND or len(body) < _RESEND.size:
                continue
            _, board, run, _, opcode, _, first, last = _RESEND.unpack_from(body)
            if opcode == wire.CMD_RESEND:
                self.resends.append(Resend(board, run, first, last, arrival.mono_ns))

    def new_input(self) -> None:
        self._deframers = {}


def link_down(path: Path) -> list[LinkDown]:
    """Spans between a capture's `disconnected` and the next `connected`, per source."""
    out: list[LinkDown] = []
    open_at: dict[int, int] = {}
    last = 0
    try:
        f, reader = capture.open_capture(path)
    except (capture.CaptureError, OSError) as exc:
        raise InputError(f"{path}: {exc}") from exc
    with f:
        for rec in reader:
            last = max(last, rec.mono_ns)
            if rec.type != capture.EVENT:
                continue
            try:
                name = json.loads(rec.payload).get("event")
            except (ValueError, AttributeError, RecursionError):
                continue
            if name == "disconnected":
                open_at.setdefault(rec.source, rec.mono_ns)
            elif name == "connected" and rec.source in open_at:
                out.append(LinkDown(rec.source, open_at.pop(rec.source), rec.mono_ns))
    out += [LinkDown(src, t, max(last, t)) for src, t in open_at.items()]
    return out


def collect(inputs: Sequence[Path], mirrors: Sequence[Path] = (),
            angle_stream: str | None = None) -> Facts:
    """Decode every input, then every mirror file, into per-run facts."""
    sources = classify_all(inputs, mirrors)
    sink = LossSink(angle_stream)
    dec = Decoder(sink)
    commands = CommandLog()

    def tap(data: bytes, where: Arrival) -> None:
        if where.source >= TX_SOURCE_BASE:  # what the laptop wrote: its RESEND commands
            commands.feed(data, where)

    feed_all(dec, sources, tap=tap, on_source=lambda _i, _s: commands.new_input())
    check_decoded(dec, sources)
    downs = [d for src in sources if src.kind == "capture" for d in link_down(src.path)]
    for run in dec.runs.values():  # runs whose frames were all duplicates still get facts
        sink.facts_for(run)
    return Facts(sink.runs, dec, commands.resends, downs, sources)


