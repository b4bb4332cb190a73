"""Streaming decoder: bytes in, typed records out, constant memory.

Sans-IO like the deframer under it: `feed(chunk)` hands records to a sink,
`finish()` flushes what was held and closes the accounting. Damaged input is
counted, never raised (see Counters). What it keeps per run is bounded:
the descriptor, a tick reference, the list of sequence gaps and at most
MAX_HELD frames that wait for a descriptor or a tick anchor; and, so frames
that come late (resent, from a mirror) unwrap against a reference near them,
one earlier reference per half hot span (a few thousand in a day's run).
"""

from __future__ import annotations

import bisect
import struct
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np

from slipless.deframe import FastDeframer
from slipless.frames import MalformedFrame, parse_body
from slipless.protocol import wire

MAX_HELD = 4096  # frames per run waiting for a descriptor or an anchor (~3 min at 20/s)
_HEADER = struct.Struct(wire.HEADER)
_SAMPLES_HEAD = struct.Struct(wire.HEADER + wire.SAMPLES_FIXED.lstrip("<"))
_TICK_LIMIT = 1 << 31  # the nearest-tick rule is exact within +-2**31 us
_ANCHOR_KINDS = (wire.DESCRIPTOR, wire.STATUS, wire.SYNC, wire.END)  # carry 64-bit ticks
_VK_SAMPLES = (wire.VERSION << 4) | wire.SAMPLES
_DTYPES = {0x62: "<i1", 0x42: "<u1", 0x68: "<i2", 0x48: "<u2", 0x69: "<i4", 0x49: "<u4",
           0x66: "<f4"}


ORIGINS = ("radio", "resend", "mirror", "stream")


@dataclass(frozen=True)
class Arrival:
    """Where and when a chunk of bytes reached the laptop.

    source tells apart byte streams that must never be glued together (one per
    board connection in a capture); mono_ns and wall_ns are the laptop's clocks
    at reception (-1 when unknown, as in a raw stream or a mirror file); origin
    is how the bytes came: "radio" (live link), "mirror" (the board's file),
    "stream" (any other byte stream). A radio frame that fills an earlier gap
    is reported with origin "resend".
    """

    source: int = 0
    mono_ns: int = -1
    wall_ns: int = -1
    origin: str = "stream"


STREAM = Arrival()


@dataclass
class StreamInfo:
    stream: int
    type: int
    flags: int
    period_us: int
    scale: float
    offset: float
    name: str
    unit: str

    @property
    def dtype(self) -> np.dtype[Any]:
        return np.dtype(_DTYPES[self.type])

    @property
    def is_state(self) -> bool:
        return bool(self.flags & wire.FLAG_STATE)


@dataclass
class RunState:
    """What the decoder knows about one (board, run)."""

    board: int
    run: int
    tick_hz: int = 0
    fw: str = ""
    max_gap_us: int = wire.DEFAULT_MAX_GAP_MS * 1000
    hot_span: int = _TICK_LIMIT // (wire.DEFAULT_MAX_GAP_MS * 1000) - 1  # see set_max_gap
    n_streams: int = 0
    streams: dict[int, StreamInfo] = field(default_factory=dict)
    described: bool = False
    ref_seq: int = -1  # latest frame whose 64-bit tick is known
    ref_tick: int = 0
    kept_refs: list[tuple[int, int]] = field(default_factory=list)  # (seq, tick): one per half
    # hot span, so a frame that comes late (resent, from a mirror) still finds a reference
    held: list[tuple[int, int, bytes, int, Arrival]] = field(default_factory=list)
    first_seq: int = -1
    high_seq: int = -1
    gaps: list[list[int]] = field(default_factory=list)  # [first, last, n_corrupt_guess]
    damage_mark: int = 0  # deframer damage count when the last frame of this run arrived
    received: int = 0
    duplicates: int = 0
    samples: int = 0
    events: int = 0
    end: dict[str, Any] | None = None
    ticks_uncertain: int = 0
    undecodable: int = 0
    bad_streams: int = 0  # descriptor entries with a sample type this release does not know
    bad_stream_ids: set[int] = field(default_factory=set)

    @property
    def key(self) -> tuple[int, int]:
        return (self.board, self.run)

    def set_max_gap(self, max_gap_ms: int) -> None:
        self.max_gap_us = max(1, max_gap_ms) * 1000
        # frames after the reference within which the nearest-tick rule holds
        self.hot_span = _TICK_LIMIT // self.max_gap_us - 1

    def tick_ok(self, seq: int) -> bool:
        """Can a 32-bit tick of frame `seq` be unwrapped against a reference?"""
        return self.ref_for(seq) is not None

    def ref_for(self, seq: int) -> int | None:
        """The 64-bit tick of a reference near enough `seq` for the nearest-tick
        rule: the latest one, else the nearest of those kept; None if none is."""
        if self.ref_seq < 0:
            return None
        if (abs(seq - self.ref_seq) + 1) * self.max_gap_us < _TICK_LIMIT:
            return self.ref_tick
        i = bisect.bisect_left(self.kept_refs, (seq,))
        for ref_seq, ref_tick in self.kept_refs[max(0, i - 1) : i + 1]:
            if (abs(seq - ref_seq) + 1) * self.max_gap_us < _TICK_LIMIT:
                return ref_tick
        return None

    def set_ref(self, seq: int, tick: int) -> None:
        """A newer frame whose 64-bit tick is known becomes the reference."""
        self.ref_seq, self.ref_tick = seq, tick
        kept = self.kept_refs
        if not kept or (seq - kept[-1][0]) * 2 >= self.hot_span:
            kept.append((seq, tick))


class Sink(Protocol):
    def descriptor(self, run: RunState) -> None: ...
    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None: ...
    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None: ...
    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None: ...
    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None: ...
    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None: ...
    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None: ...


class NullSink:
    """Accepts everything; for benchmarks and counting."""

    def descriptor(self, run: RunState) -> None:
        pass

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        pass

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        pass

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        pass

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        pass

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        pass

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        pass


@dataclass
class Counters:
    """Stream-level tallies (per-run ones live on RunState)."""

    bytes: int = 0
    frames: int = 0
    corrupt: int = 0
    corrupt_bytes: int = 0
    overlong: int = 0
    skipped_bytes: int = 0
    unknown_kind: int = 0
    bad_version: int = 0
    versions_seen: set[int] = field(default_factory=set)
    malformed: int = 0
    commands: int = 0


class _Batch:
    """SAMPLES frames of one run and stream collected between flushes."""

    __slots__ = ("run", "info", "itemsize", "seqs", "ticks", "payloads")

    def __init__(self, run: RunState, info: StreamInfo) -> None:
        self.run = run
        self.info = info
        self.itemsize = info.dtype.itemsize
        self.seqs: list[int] = []
        self.ticks: list[int] = []
        self.payloads: list[bytes] = []


class Decoder:
    def __init__(self, sink: Sink | None = None, flush_bytes: int = 0) -> None:
        """flush_bytes: hand samples to the sink once this many bytes were fed
        (0: after every feed). A live reader fed one notification at a time
        sets it higher so the per-batch numpy work is shared by many frames."""
        self.flush_bytes = flush_bytes
        self._unflushed = 0
        self.sink: Sink = sink if sink is not None else NullSink()
        # A sink that keeps the NullSink's samples()/timing() wants neither: skip their work.
        self._wants_samples = getattr(type(self.sink), "samples", None) is not NullSink.samples
        self._wants_timing = getattr(type(self.sink), "timing", None) is not NullSink.timing
        self.deframer = FastDeframer()
        self._deframers: dict[int, FastDeframer] = {0: self.deframer}
        self.arrival = STREAM
        self.counters = Counters()
        self.runs: dict[tuple[int, int], RunState] = {}
        self._batches: dict[tuple[int, int, int], _Batch] = {}
        self._done: list[FastDeframer] = []  # deframers of inputs already read
        self._damage_now = 0  # damaged segments seen before the frame being handled
        self.notes: list[str] = []  # what the readers of the inputs had to skip

    def new_input(self) -> None:
        """The next bytes come from another file or link: never glue it to the last."""
        for d in self._deframers.values():
            d.close()
            self._done.append(d)
        self.deframer = FastDeframer()
        self._deframers = {0: self.deframer}

    # ---- input ------------------------------------------------------------
    def reset_source(self, source: int) -> None:
        """A link restarted: bytes before and after must not be glued together."""
        d = self._deframers.pop(source, None)
        if d is not None:
            d.close()
            self._done.append(d)

    def feed(self, data: bytes, arrival: Arrival = STREAM) -> None:
        self.counters.bytes += len(data)
        deframer = self._deframers.get(arrival.source)
        if deframer is None:
            deframer = self._deframers[arrival.source] = FastDeframer()
        self.deframer = deframer
        self.arrival = arrival
        base = sum(d.damaged for d in self._done) + sum(
            d.damaged for d in self._deframers.values() if d is not deframer)
        runs = self.runs
        unpack = _SAMPLES_HEAD.unpack_from
        frame_sink = self.sink.frame
        timed = arrival.mono_ns >= 0 and self._wants_timing
        origin = arrival.origin
        batches = self._batches
        for body, offset, damaged in deframer.feed(data):
            damage = base + damaged
            # Hot path: the next in-order SAMPLES frame of a described run, no
            # damage since the last frame. Everything else takes _frame().
            if body[0] == _VK_SAMPLES and len(body) > _SAMPLES_HEAD.size:
                _, board, run_id, seq, stream, tick32 = unpack(body)
                run = runs.get((board, run_id))
                if (run is not None and seq == run.high_seq + 1 and run.damage_mark == damage
                        and run.described and seq - run.ref_seq < run.hot_span):
                    batch = batches.get((board, run_id, stream))
                    if batch is not None and not (len(body) - _SAMPLES_HEAD.size) % batch.itemsize:
                        run.high_seq = seq
                        run.received += 1
                        frame_sink(run, seq, wire.SAMPLES, "received", offset, origin, arrival)
                        d = (tick32 - run.ref_tick) & 0xFFFFFFFF
                        tick = run.ref_tick + (d - 0x100000000 if d >= 0x80000000 else d)
                        run.set_ref(seq, tick)
                        if timed:
                            self._time_samples(run, seq, tick, len(body), batch.info)
                        batch.seqs.append(seq)
                        batch.ticks.append(tick)
                        batch.payloads.append(body[_SAMPLES_HEAD.size :])
                        continue
            self._damage_now = damage
            self._frame(body, offset)
        self._unflushed += len(data)
        if self._unflushed >= self.flush_bytes:
            self._unflushed = 0
            self._flush()

    def _time_samples(self, run: RunState, seq: int, tick: int, size: int,
                      info: StreamInfo) -> None:
        """The last sample's tick: the one nearest the moment the board sent the frame."""
        n = (size - _SAMPLES_HEAD.size) // info.dtype.itemsize
        self.sink.timing(run, seq, wire.SAMPLES, tick + (n - 1) * info.period_us, self.arrival)

    def finish(self) -> None:
        for d in self._deframers.values():
            d.close()
            self._done.append(d)
        self._deframers = {}
        for run in self.runs.values():
            self._release_held(run, final=True)
        self._flush()
        for run in self.runs.values():
            self._close_accounting(run)
        c = self.counters
        for d in self._done:
            c.frames += d.frames
            c.corrupt += d.corrupt
            c.corrupt_bytes += d.corrupt_bytes
            c.overlong += d.overlong
            c.skipped_bytes += d.skipped

    # ---- per frame ----------------------------------------------------------
    def _frame(self, body: bytes, offset: int) -> None:
        vk, board, run_id, seq = _HEADER.unpack_from(body)
        version, kind = vk >> 4, vk & 0x0F
        if version != wire.VERSION:
            self.counters.bad_version += 1
            self.counters.versions_seen.add(version)
            return
        if kind == wire.COMMAND:  # laptop -> board; not in the board's sequence space
            self.counters.commands += 1
            return
        run = self.runs.get((board, run_id))
        if run is None:
            run = self.runs[(board, run_id)] = RunState(board, run_id)
        fate, late = self._account(run, seq)
        origin = self.arrival.origin
        if late and origin == "radio":
            origin = "resend"
        self.sink.frame(run, seq, kind, fate, offset, origin, self.arrival)
        if fate == "duplicate":
            return
        if kind not in wire.KIND_NAMES:
            self.counters.unknown_kind += 1  # a newer sender's kind: skip, but it held a seq
            return
        if kind == wire.SAMPLES:
            if self._ready(run, kind, seq, body):
                self._samples(run, seq, body)
            else:
                self._hold(run, kind, seq, body, offset)
            return
        if kind == wire.EVENTS and not self._ready(run, kind, seq, body):
            self._hold(run, kind, seq, body, offset)
            return
        self._typed(run, kind, seq, body, offset)
        if kind in _ANCHOR_KINDS and run.held:
            self._release_held(run)

    @staticmethod
    def _ready(run: RunState, kind: int, seq: int, body: bytes) -> bool:
        """SAMPLES and EVENTS need the descriptor (for max_gap_ms) and an
        unambiguous tick; SAMPLES also their stream's entry, unless the
        descriptor is complete (then an unknown stream is undecodable)."""
        if not run.described:
            return False
        if (kind == wire.SAMPLES and len(body) > wire.HEADER_SIZE
                and body[wire.HEADER_SIZE] not in run.streams
                and len(run.streams) + run.bad_streams < run.n_streams):
            return False  # a later part of a split descriptor will name it
        return run.tick_ok(seq)

    def _account(self, run: RunState, seq: int) -> tuple[str, bool]:
        """Sequence bookkeeping: (fate, whether the frame filled an earlier gap)."""
        damage = self._damage_now
        if run.high_seq < 0:
            run.first_seq = run.high_seq = seq
            if seq > 0:
                run.gaps.append([0, seq - 1, 0])
        elif seq > run.high_seq:
            if seq > run.high_seq + 1:
                run.gaps.append([run.high_seq + 1, seq - 1, damage - run.damage_mark])
            run.high_seq = seq
        elif not self._fill_gap(run, seq):
            run.duplicates += 1
            run.damage_mark = damage
            return "duplicate", False
        else:
            run.damage_mark = damage
            run.received += 1
            return "received", True
        run.damage_mark = damage
        run.received += 1
        return "received", False

    @staticmethod
    def _fill_gap(run: RunState, seq: int) -> bool:
        for i, (first, last, corrupt) in enumerate(run.gaps):
            if first <= seq <= last:
                # The damaged segments stay with the first frames of the gap (SPEC).
                head = min(corrupt, seq - first)
                tail = min(corrupt - head, last - seq)
                parts = [[first, seq - 1, head], [seq + 1, last, tail]]
                run.gaps[i : i + 1] = [p for p in parts if p[0] <= p[1]]
                return True
        return False

    def _samples(self, run: RunState, seq: int, body: bytes, forced: bool = False) -> None:
        if len(body) <= _SAMPLES_HEAD.size:
            self.counters.malformed += 1
            return
        _, _, _, _, stream, tick32 = _SAMPLES_HEAD.unpack_from(body)
        info = run.streams.get(stream)
        if info is None:
            run.undecodable += 1
            return
        if (len(body) - _SAMPLES_HEAD.size) % info.dtype.itemsize:
            self.counters.malformed += 1
            return
        ref = run.ref_for(seq)
        tick = wire.unwrap_tick(tick32, run.ref_tick if ref is None else ref)
        if seq > run.ref_seq and not forced:  # a sample frame is as good a reference as an anchor
            run.set_ref(seq, tick)
        if self.arrival.mono_ns >= 0 and not forced:
            self._time_samples(run, seq, tick, len(body), info)
        key = (run.board, run.run, stream)
        batch = self._batches.get(key)
        if batch is None:
            batch = self._batches[key] = _Batch(run, info)
        batch.seqs.append(seq)
        batch.ticks.append(tick)
        batch.payloads.append(body[_SAMPLES_HEAD.size :])

    def _typed(self, run: RunState, kind: int, seq: int, body: bytes, offset: int,
               forced: bool = False) -> None:
        if kind == wire.SAMPLES:
            self._samples(run, seq, body, forced)
            return
        try:
            f = parse_body(kind, body[wire.HEADER_SIZE :])
        except MalformedFrame:
            self.counters.malformed += 1
            return
        if kind == wire.DESCRIPTOR:
            self._descriptor(run, seq, f)
        elif kind == wire.EVENTS:
            ref = run.ref_for(seq)
            for ev in f["events"]:
                tick = wire.unwrap_tick(ev["tick32"], run.ref_tick if ref is None else ref)
                run.events += 1
                self.sink.event(run, seq, tick, ev["code"], ev["value"])
        elif kind == wire.STATUS:
            self._anchor(run, seq, f["tick"], kind)
            self.sink.status(run, seq, f)
        elif kind == wire.END:
            self._anchor(run, seq, f["tick"], kind)
            run.end = f
            self.sink.reply(run, seq, kind, f)
        elif kind == wire.SYNC:
            self._anchor(run, seq, f["tx_tick"], kind)
            self.sink.reply(run, seq, kind, f)
        else:  # ACK, ERROR, INFO
            self.sink.reply(run, seq, kind, f)

    def _anchor(self, run: RunState, seq: int, tick: int, kind: int) -> None:
        if seq > run.ref_seq:
            run.set_ref(seq, tick)
        if self.arrival.mono_ns >= 0:
            self.sink.timing(run, seq, kind, tick, self.arrival)

    def _descriptor(self, run: RunState, seq: int, f: dict[str, Any]) -> None:
        if any(len(s["name"].encode()) > wire.MAX_TEXT or len(s["unit"].encode()) > wire.MAX_TEXT
               for s in f["streams"]):
            self.counters.malformed += 1
            return
        self._anchor(run, seq, f["tick"], wire.DESCRIPTOR)
        first = not run.described
        run.tick_hz = f["tick_hz"]
        run.fw = f"{f['fw_major']}.{f['fw_minor']}.{f['fw_patch']}"
        run.set_max_gap(f["max_gap_ms"])
        run.n_streams = f["n_streams"]
        for s in f["streams"]:
            if s["type"] not in _DTYPES:  # a sample type this release cannot unpack
                if s["stream"] not in run.bad_stream_ids:
                    run.bad_stream_ids.add(s["stream"])
                    run.bad_streams += 1
                continue
            # scale and offset travel as float32: read them as the shortest
            # decimal that rounds to that float32 (0.001, not 0.0010000000475).
            s["scale"] = float(str(np.float32(s["scale"])))
            s["offset"] = float(str(np.float32(s["offset"])))
            run.streams[s["stream"]] = StreamInfo(**s)
        run.described = True
        if first:
            self.sink.descriptor(run)

    def _hold(self, run: RunState, kind: int, seq: int, body: bytes, offset: int) -> None:
        run.held.append((kind, seq, body, offset, self.arrival))
        if len(run.held) > MAX_HELD:
            self._force(run, run.held.pop(0))

    def _release_held(self, run: RunState, final: bool = False) -> None:
        keep = []
        for item in run.held:
            if self._ready(run, item[0], item[1], item[2]):
                self._typed_as(run, item)
            elif final:
                self._force(run, item)
            else:
                keep.append(item)
        run.held = keep

    def _typed_as(self, run: RunState, item: tuple[int, int, bytes, int, Arrival],
                  forced: bool = False) -> None:
        """Decode a held frame as it arrived (its own arrival time and source)."""
        now = self.arrival
        self.arrival = item[4]
        try:
            self._typed(run, item[0], item[1], item[2], item[3], forced)
        finally:
            self.arrival = now

    def _force(self, run: RunState, item: tuple[int, int, bytes, int, Arrival]) -> None:
        """Decode a frame whose tick cannot be proven unambiguous; count it."""
        if run.ref_seq < 0 or (item[0] == wire.SAMPLES and not run.described):
            run.undecodable += 1
            return
        run.ticks_uncertain += 1
        self._typed_as(run, item, forced=True)

    # ---- batches and closing ---------------------------------------------------
    def _flush(self) -> None:
        for batch in self._batches.values():
            if not batch.seqs:
                continue
            info = batch.info
            if not self._wants_samples:  # count them, nothing more
                batch.run.samples += sum(map(len, batch.payloads)) // info.dtype.itemsize
                batch.seqs, batch.ticks, batch.payloads = [], [], []
                continue
            raw = np.frombuffer(b"".join(batch.payloads), dtype=info.dtype)
            counts = np.array(list(map(len, batch.payloads)), dtype=np.int64) // info.dtype.itemsize
            seq = np.repeat(np.asarray(batch.seqs, dtype=np.int64), counts)
            start = np.repeat(np.asarray(batch.ticks, dtype=np.int64), counts)
            first_index = np.repeat(np.cumsum(counts) - counts, counts)
            tick = start + (np.arange(raw.size, dtype=np.int64) - first_index) * info.period_us
            batch.run.samples += int(raw.size)
            self.sink.samples(batch.run, info, seq, tick, raw)
            batch.seqs, batch.ticks, batch.payloads = [], [], []

    def _close_accounting(self, run: RunState) -> None:
        for first, last, corrupt in run.gaps:
            for i, seq in enumerate(range(first, last + 1)):
                self.sink.frame(run, seq, -1, "corrupt" if i < corrupt else "missing", -1, "",
                                STREAM)

    # ---- summary -------------------------------------------------------------
    def missing(self, run: RunState) -> int:
        return sum(last - first + 1 for first, last, _ in run.gaps)

    def corrupt_guess(self, run: RunState) -> int:
        return sum(min(c, last - first + 1) for first, last, c in run.gaps)


class CollectSink(NullSink):
    """Keeps every record in lists of plain tuples; for tests and small captures."""

    def __init__(self) -> None:
        self.samples_rows: list[tuple[Any, ...]] = []
        self.events: list[tuple[Any, ...]] = []
        self.status_rows: list[tuple[Any, ...]] = []
        self.replies: list[tuple[Any, ...]] = []
        self.frames: list[tuple[Any, ...]] = []
        self.origins: list[tuple[Any, ...]] = []
        self.timings: list[tuple[Any, ...]] = []

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        for q, t, v in zip(seq.tolist(), tick.tolist(), raw.tolist()):
            self.samples_rows.append((run.board, run.run, info.stream, q, t, v))

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        self.events.append((run.board, run.run, seq, tick, code, value))

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        self.status_rows.append((run.board, run.run, seq) + tuple(
            fields[k] for k in wire.STATUS_FIELDS))

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        self.replies.append((run.board, run.run, seq, wire.KIND_NAMES[kind]))

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        self.frames.append((run.board, run.run, seq, fate))
        if origin:
            self.origins.append((run.board, run.run, seq, origin))

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        self.timings.append((run.board, run.run, seq, kind, tick, arrival.mono_ns, arrival.wall_ns))


def collect(chunks: Any) -> tuple[Decoder, CollectSink]:
    """Decode an iterable of byte chunks into a CollectSink; for tests and notebooks."""
    sink = CollectSink()
    dec = Decoder(sink)
    for chunk in chunks:
        dec.feed(chunk)
    dec.finish()
    return dec, sink
