"""What `slipless loss` needs from the inputs, gathered in one decoding pass.

The decoder's sink calls give, per frame, its fate and origin and when it
reached the laptop, and per decoded record its board tick; the inputs also
hold what the laptop asked the board for (RESEND commands among the bytes it
wrote) and when the link went down (capture events). This module only
collects those facts per run; loss.py turns them into the accounting.

Long runs (an 8-hour run has ~600k frames and tens of millions of samples)
are held as typed columns, never an object per frame: per frame its first
copy (FirstCopies, ~36 bytes), per SAMPLES frame its seq, ticks and sample
count (Blocks, 32 bytes), and of the rotation-rate stream alone the raw
samples in their own dtype with the ticks as evenly spaced runs (RateStream).
"""

from __future__ import annotations

import json
import math
import struct
from array import array
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np

from slipless.decode.decoder import ORIGINS, Arrival, Decoder, NullSink, RunState, StreamInfo, expand_frames
from slipless.decode.deframe import FastDeframer
from slipless.decode.store import gather
from slipless.errors import InputError
from slipless.io import capture
from slipless.io.inputs import Source, check_decoded, classify_all, feed_all
from slipless.io.pieces import TX_SOURCE_BASE
from slipless.protocol import wire

# Rotation-rate units a stream may carry, as factors to rad/s.
RATE_UNITS = {"rad/s": 1.0, "deg/s": math.pi / 180, "°/s": math.pi / 180, "dps": math.pi / 180,
              "rpm": 2 * math.pi / 60, "rev/s": 2 * math.pi, "rps": 2 * math.pi}
_RESEND = struct.Struct("<" + wire.HEADER.lstrip("<") + wire.COMMAND_FIXED.lstrip("<")
                        + wire.RESEND_ARGS.lstrip("<"))


def _numpy(col: array[Any], dtype: Any) -> np.ndarray:
    """A numpy copy of an array.array column (a view would stop it growing)."""
    return np.frombuffer(col, dtype).copy() if len(col) else np.zeros(0, dtype)


@dataclass
class FirstCopy:
    """The copy of a frame that counts: the first good one to arrive."""

    origin: str  # radio, resend, mirror, stream (decoder.ORIGINS)
    source: int  # which link of the input (a capture's board connection)
    mono_ns: int
    wall_ns: int
    late: bool  # a higher seq of its run had already come over the link


class CopyColumns(NamedTuple):
    """FirstCopy per seq as columns, sorted by seq (kind: the frame's kind)."""

    seq: np.ndarray
    origin: np.ndarray  # codes into FirstCopies.names
    source: np.ndarray
    mono_ns: np.ndarray
    wall_ns: np.ndarray
    late: np.ndarray
    kind: np.ndarray


# (array.array type code, numpy dtype) of each CopyColumns column
_COPY_TYPES = (("q", np.int64), ("b", np.int8), ("q", np.int64), ("q", np.int64),
               ("q", np.int64), ("b", np.bool_), ("h", np.int16))


class FirstCopies:
    """The copy that counts of every frame of a run, about 36 bytes a frame.

    Frames are appended as they come; reading sorts them by seq, and of two
    copies of one seq the later one replaces the earlier, as a dict would (the
    decoder hands over one copy per seq: every other is a duplicate).
    """

    def __init__(self) -> None:
        self.names: list[str] = list(ORIGINS)
        self._codes = {name: i for i, name in enumerate(self.names)}
        self._new = self._empty()
        self._sorted = CopyColumns(*(np.zeros(0, dt) for _, dt in _COPY_TYPES))

    @staticmethod
    def _empty() -> tuple[array[Any], ...]:
        return tuple(array(code) for code, _ in _COPY_TYPES)

    def add(self, seq: int, origin: str, source: int, mono_ns: int, wall_ns: int, late: bool,
            kind: int) -> None:
        code = self._codes.get(origin)
        if code is None:
            code = self._codes[origin] = len(self.names)
            self.names.append(origin)
        s, o, src, mono, wall, lt, k = self._new
        s.append(seq)
        o.append(code)
        src.append(source)
        mono.append(mono_ns)
        wall.append(wall_ns)
        lt.append(late)
        k.append(kind)

    def columns(self) -> CopyColumns:
        if len(self._new[0]):
            new, self._new = list(self._new), self._empty()
            held = self._sorted.seq.size
            seq = _numpy(new[0], np.int64)
            if held:
                seq = np.concatenate((self._sorted.seq, seq))
            pick = None  # which rows to keep, in seq order (None: all, as they are)
            if seq.size > 1 and not bool(np.all(seq[1:] > seq[:-1])):
                pick = np.argsort(seq, kind="stable")
                s = seq[pick]
                pick = pick[np.r_[s[1:] != s[:-1], True]]  # the last copy of each seq
            cols = [seq if pick is None else seq[pick]]
            del seq
            for i in range(1, len(_COPY_TYPES)):  # one column at a time: less memory at once
                col = _numpy(new[i], _COPY_TYPES[i][1])
                new[i] = array(_COPY_TYPES[i][0])
                if held:
                    col = np.concatenate((self._sorted[i], col))
                cols.append(col if pick is None else col[pick])
            self._sorted = CopyColumns(*cols)
        return self._sorted

    def code(self, origin: str) -> int:
        """The origin's code in CopyColumns.origin (-1: none came from there)."""
        return self._codes.get(origin, -1)

    def __len__(self) -> int:
        return int(self.columns().seq.size)

    def high(self) -> int:
        """The highest seq held, -1 if none."""
        seq = self.columns().seq
        return int(seq[-1]) if seq.size else -1

    def get(self, seq: int) -> FirstCopy | None:
        c = self.columns()
        i = int(np.searchsorted(c.seq, seq))
        if i == c.seq.size or c.seq[i] != seq:
            return None
        return FirstCopy(self.names[c.origin[i]], int(c.source[i]), int(c.mono_ns[i]),
                         int(c.wall_ns[i]), bool(c.late[i]))


class Blocks:
    """The SAMPLES frames of one stream as decoded: per frame its seq, first
    tick, sample count and last sample's tick."""

    def __init__(self) -> None:
        self.seq: array[int] = array("q")
        self.tick0: array[int] = array("q")
        self.count: array[int] = array("q")
        self.last: array[int] = array("q")
        self.info: StreamInfo | None = None  # the last descriptor entry seen, and
        self.wanted = False  # whether its samples are a rate for the angle

    def add(self, seq: int, tick0: int, count: int, last: int) -> None:
        self.seq.append(seq)
        self.tick0.append(tick0)
        self.count.append(count)
        self.last.append(last)

    def extend(self, seq: np.ndarray, tick0: np.ndarray, count: np.ndarray, last: np.ndarray
               ) -> None:
        for col, values in ((self.seq, seq), (self.tick0, tick0), (self.count, count),
                            (self.last, last)):
            col.frombytes(np.ascontiguousarray(values, np.int64).tobytes())

    def __len__(self) -> int:
        return len(self.seq)

    def rows(self) -> np.ndarray:
        """[seq, first tick, samples] per frame, in decoding order."""
        return np.stack([_numpy(self.seq, np.int64), _numpy(self.tick0, np.int64),
                         _numpy(self.count, np.int64)], axis=1)


def _frames_of(seq: np.ndarray, tick: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per frame of one samples() call: seq, first tick, samples (np.unique's groups)."""
    starts = np.flatnonzero(np.r_[True, seq[1:] != seq[:-1]])
    seqs = seq[starts]
    if not bool(np.all(seqs[1:] > seqs[:-1])):  # a frame's samples apart, or seqs out of order
        seqs, starts, counts = np.unique(seq, return_index=True, return_counts=True)
    else:
        counts = np.diff(np.r_[starts, seq.size])
    return seqs, tick[starts], counts


class _RatePart:
    """Samples of a rate stream under one descriptor entry: raw values in the
    stream's dtype, ticks as runs one period apart (first tick, samples)."""

    def __init__(self, info: StreamInfo, dtype: np.dtype[Any]) -> None:
        self.info = info
        self.raw = np.zeros(1024, dtype)
        self.n = 0
        self.run_tick: array[int] = array("q")
        self.run_count: array[int] = array("q")

    def add(self, tick: np.ndarray, raw: np.ndarray) -> None:
        n = raw.size
        if not n:
            return
        if self.n + n > self.raw.size:
            grown = np.zeros(max(2 * self.raw.size, self.n + n), self.raw.dtype)
            grown[: self.n] = self.raw[: self.n]
            self.raw = grown
        self.raw[self.n : self.n + n] = raw
        self.n += n
        tick = np.asarray(tick, np.int64)
        cut = np.flatnonzero(tick[1:] - tick[:-1] != self.info.period_us) + 1
        if not cut.size:
            self.run_tick.append(int(tick[0]))
            self.run_count.append(n)
            return
        starts = np.r_[0, cut]
        self.run_tick.frombytes(tick[starts].tobytes())
        self.run_count.frombytes(np.diff(np.r_[starts, n]).astype(np.int64).tobytes())

    def runs(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per run: first tick, samples, index of its first sample."""
        tick0, count = _numpy(self.run_tick, np.int64), _numpy(self.run_count, np.int64)
        return tick0, count, np.cumsum(count) - count

    def tick_order(self) -> np.ndarray | None:
        """The runs in tick order when no two samples share a tick and no runs
        interleave (then that order is the samples' only sort by tick), else None."""
        tick0, count, _ = self.runs()
        p = self.info.period_us
        if p <= 0 and bool(np.any(count > 1)):
            return None
        order = np.argsort(tick0, kind="stable")
        first = tick0[order]
        last = first + (count[order] - 1) * p
        return order if bool(np.all(first[1:] > last[:-1])) else None

    def ticks(self) -> np.ndarray:
        """Every sample's tick, in decoding order."""
        tick0, count, _ = self.runs()
        return self._ticks(tick0, count)

    def _ticks(self, tick0: np.ndarray, count: np.ndarray) -> np.ndarray:
        """The ticks of these runs, one after the other."""
        p = self.info.period_us
        out = np.arange(int(count.sum()), dtype=np.int64)
        out *= p
        out += np.repeat(tick0 - (np.cumsum(count) - count) * p, count)
        return out

    def values(self, raw: np.ndarray | None = None, factor: float = 1.0) -> np.ndarray:
        """Raw values (default: all, in decoding order) in the stream's unit x factor, float64."""
        v = (self.raw[: self.n] if raw is None else raw).astype(np.float64)
        v *= self.info.scale
        v += self.info.offset
        if factor != 1.0:
            v *= factor
        return v

    def pieces(self, order: np.ndarray, size: int, factor: float
               ) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """(ticks, values x factor) of the runs taken in `order`, whole runs of
        about `size` samples at a time."""
        tick0, count, start = (a[order] for a in self.runs())
        ends = np.cumsum(count)
        in_place = bool(np.all(order[1:] > order[:-1]))  # runs already in order: slice the values
        a = 0
        while a < count.size:
            b = max(a + 1, int(np.searchsorted(ends, ends[a] - count[a] + size, side="right")))
            c = count[a:b]
            if in_place:
                raw = self.raw[int(start[a]) : int(start[a]) + int(c.sum())]
            else:
                raw = gather(self.raw, start[a:b], c)
            yield self._ticks(tick0[a:b], c), self.values(raw, factor)
            a = b


class RateStream:
    """A rotation-rate stream's samples in decoding order, held compactly."""

    def __init__(self, info: StreamInfo) -> None:
        self.info = info  # the first descriptor entry seen
        self.parts: list[_RatePart] = []

    def add(self, info: StreamInfo, tick: np.ndarray, raw: np.ndarray) -> None:
        if not self.parts or self.parts[-1].info is not info or self.parts[-1].raw.dtype != raw.dtype:
            self.parts.append(_RatePart(info, raw.dtype))
        self.parts[-1].add(tick, raw)

    @property
    def samples(self) -> int:
        return sum(p.n for p in self.parts)

    def arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """(tick, value in the stream's unit) of every sample, in decoding order."""
        if not self.parts:
            return np.zeros(0, np.int64), np.zeros(0)
        return (np.concatenate([p.ticks() for p in self.parts]),
                np.concatenate([p.values() for p in self.parts]))

    def pieces(self, size: int, factor: float = 1.0) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """(tick, value x factor) of every sample, stably sorted by tick (samples of one
        tick in decoding order), in pieces of about `size` samples: a long run's
        stream need not be made whole at 16 bytes a sample."""
        order = self.parts[0].tick_order() if len(self.parts) == 1 else None
        if order is not None:  # whole runs in tick order: no sample-sized sort
            yield from self.parts[0].pieces(order, size, factor)
            return
        t, v = self.arrays()
        if factor != 1.0:
            v *= factor
        if t.size > 1 and not bool(np.all(t[1:] >= t[:-1])):
            order = np.argsort(t, kind="stable")
            t = t[order]
            v = v[order]
        for lo in range(0, t.size, size):
            yield t[lo : lo + size], v[lo : lo + size]

    def by_tick(self) -> tuple[np.ndarray, np.ndarray]:
        """pieces() joined."""
        got = list(self.pieces(1 << 20))
        if not got:
            return np.zeros(0, np.int64), np.zeros(0)
        return np.concatenate([t for t, _ in got]), np.concatenate([v for _, v in got])


class TickLog:
    """(seq, board tick) of the frames whose records carry a tick: events, status, replies."""

    def __init__(self) -> None:
        self.seq: array[int] = array("q")
        self.tick: array[int] = array("q")

    def add(self, seq: int, tick: int) -> None:
        self.seq.append(seq)
        self.tick.append(tick)


@dataclass
class RunFacts:
    state: RunState
    copies: FirstCopies = field(default_factory=FirstCopies)  # the first good copy per seq
    duplicates: int = 0  # extra copies over the link (radio, resend, stream)
    mirror_copies: int = 0  # mirror copies of frames already held
    opened: list[tuple[int, int, int]] = field(default_factory=list)  # gaps as they opened, + damage
    status: list[tuple[int, int, int]] = field(default_factory=list)  # seq, dropped, queue_high
    not_held: list[tuple[int, int]] = field(default_factory=list)
    end: dict[str, Any] | None = None
    ticks: TickLog = field(default_factory=TickLog)  # board ticks of non-SAMPLES frames
    blocks: dict[int, Blocks] = field(default_factory=dict)  # stream -> its SAMPLES frames
    rates: dict[int, RateStream] = field(default_factory=dict)
    markers: list[tuple[int, int]] = field(default_factory=list)  # (tick, value) of marker events
    after_end: list[tuple[int, int]] = field(default_factory=list)  # (seq, kind) past END's count
    _link_high: int = -1
    _dec_high: int = -1

    def known_ticks(self) -> tuple[np.ndarray, np.ndarray]:
        """(seq, tick) pairs, one per seq (the latest tick a frame carried), sorted by seq;
        a SAMPLES frame's tick is its last sample's."""
        s = np.concatenate([_numpy(b.seq, np.int64) for b in self.blocks.values()]
                           + [_numpy(self.ticks.seq, np.int64)])
        if not s.size:
            return np.zeros(0, np.int64), np.zeros(0, np.int64)
        t = np.concatenate([_numpy(b.last, np.int64) for b in self.blocks.values()]
                           + [_numpy(self.ticks.tick, np.int64)])
        order = np.lexsort((t, s))
        s, t = s[order], t[order]
        last = np.flatnonzero(np.diff(s, append=s[-1] + 1))
        return s[last], t[last]

    def block_rows(self, stream: int) -> np.ndarray:
        """[seq, first tick, samples] of the stream's SAMPLES frames, in decoding order."""
        b = self.blocks.get(stream)
        return b.rows() if b is not None else np.zeros((0, 3), np.int64)


@dataclass
class Resend:
    board: int
    run: int  # 0: the board's current run
    first: int
    last: int
    mono_ns: int
    pull: bool = False  # a PULL: what came after is the board's file mirror (first > last)


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
    """A decoder sink keeping what the loss account needs, compactly: per frame
    ~36 bytes (FirstCopies), per SAMPLES frame 32 (Blocks), per sample of the
    rate stream its raw value."""

    def __init__(self, angle_stream: str | None = None) -> None:
        self.runs: dict[tuple[int, int], RunFacts] = {}
        self.angle_stream = angle_stream
        self._last: RunFacts | None = None  # the facts of the run called last

    def facts_for(self, run: RunState) -> RunFacts:
        f = self._last
        if f is not None and f.state is run:
            return f
        f = self.runs.get(run.key)
        if f is None:
            f = self.runs[run.key] = RunFacts(run)
        self._last = f
        return f

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        if not origin:  # the decoder's closing rows for frames never seen
            return
        f = self.facts_for(run)
        if fate == "reply":  # past END's frame count: a reply, not a frame of the run
            f.after_end.append((seq, kind))
            return
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
            if seq > f._link_high:
                f._link_high = seq
        else:
            late = False
        if seq > f._dec_high:
            f._dec_high = seq
        f.copies.add(seq, origin, arrival.source, arrival.mono_ns, arrival.wall_ns, late, kind)

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        f = self.facts_for(run)
        b = f.blocks.get(info.stream)
        if b is None:
            b = f.blocks[info.stream] = Blocks()
        n = seq.size
        if n == 1 or (n and not (seq[1:] != seq[:-1]).any()):  # one frame: the usual call
            t0 = int(tick[0])
            b.add(int(seq[0]), t0, n, t0 + (n - 1) * info.period_us)
        elif n:
            seqs, first_tick, counts = _frames_of(seq, tick)
            b.extend(seqs, first_tick, counts, first_tick + (counts - 1) * info.period_us)
        if b.info is not info:
            b.info = info
            b.wanted = (info.name == self.angle_stream if self.angle_stream
                        else rate_factor(info) is not None)
        if b.wanted:
            r = f.rates.get(info.stream)
            if r is None:
                r = f.rates[info.stream] = RateStream(info)
            r.add(info, tick, raw)

    def sample_frames(self, run: RunState, info: StreamInfo, seqs: np.ndarray, ticks: np.ndarray,
                      counts: np.ndarray, raw: np.ndarray) -> None:
        b = self.facts_for(run).blocks.get(info.stream)
        if (b is None or b.info is not info or b.wanted or len(seqs) < 2
                or not bool(np.all(seqs[1:] > seqs[:-1]))):
            # a rate stream's ticks, a new description or frames out of order: samples()
            self.samples(run, info, *expand_frames(info, seqs, ticks, counts), raw)
            return
        b.extend(seqs, ticks, counts, ticks + (counts - 1) * info.period_us)

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        f = self.facts_for(run)
        f.ticks.add(seq, tick)
        if code == wire.EV_MARKER:
            f.markers.append((tick, value))

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        f = self.facts_for(run)
        f.ticks.add(seq, fields["tick"])
        f.status.append((seq, fields["dropped"], fields["queue_high"]))

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        f = self.facts_for(run)
        if kind == wire.END:
            f.end = fields
            f.ticks.add(seq, fields["tick"])
        elif kind == wire.SYNC:
            f.ticks.add(seq, fields["tx_tick"])
        elif kind == wire.ERROR and fields["code"] == wire.ERR_NOT_HELD:
            f.not_held.append((fields["detail_a"], fields["detail_b"]))


_COMMAND = struct.Struct("<" + wire.HEADER.lstrip("<") + wire.COMMAND_FIXED.lstrip("<"))


class CommandLog:
    """RESEND and PULL commands among the bytes the laptop wrote (capture or btsnoop TX)."""

    def __init__(self) -> None:
        self.resends: list[Resend] = []
        self._deframers: dict[int, FastDeframer] = {}

    def feed(self, data: bytes, arrival: Arrival) -> None:
        d = self._deframers.setdefault(arrival.source, FastDeframer())
        for body, _, _ in d.feed(data):
            if body[0] != (wire.VERSION << 4) | wire.COMMAND or len(body) < _COMMAND.size:
                continue
            _, board, run, _, opcode, _ = _COMMAND.unpack_from(body)
            if opcode & 0x7F == wire.CMD_PULL:  # plain or sealed (SPEC 3.9.1)
                self.resends.append(Resend(board, run, 0, -1, arrival.mono_ns, pull=True))
            elif opcode & 0x7F == wire.CMD_RESEND and len(body) >= _RESEND.size:
                _, board, run, _, opcode, _, first, last = _RESEND.unpack_from(body)
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


