"""Streaming decoder: bytes in, typed records out, constant memory.

Sans-IO like the deframer under it: `feed(chunk)` hands records to a sink,
`finish()` flushes what was held and closes the accounting. Damaged input is
counted, never raised (see Counters). What it keeps per run is bounded:
the descriptor, a tick reference, the list of sequence gaps and at most
MAX_HELD frames that wait for a descriptor or a tick anchor; and, so frames
that come late (resent, from a mirror) unwrap against a reference near them,
kept references at least half the tick rule's bound apart, whichever order
their frames come in (a few thousand in a day's run; SPEC 5). Replies after
END stay outside the run's sequence (SPEC 3.8); a RESEND the laptop wrote
is what makes a late radio frame a "resend".

Speed: a chunk of at least BULK_BYTES (a file read) goes through
FastDeframer.feed_block and _feed_block: the headers of all its frames are
read with one numpy view, and each stretch of in-order SAMPLES frames of one
run is accounted and unwrapped together (the tick rule applied as a running
sum of 32-bit differences), its values cut out of the decoded bytes per
stream by numpy. Every other frame, and every frame of a small chunk (a
notification), takes the per-frame path (_frame). The bulk path calls the
sink exactly as _frame would, skipping only the calls that a sink keeping
NullSink's no-op methods ignores; tests hold both paths equal.
"""

from __future__ import annotations

import bisect
import struct
from dataclasses import dataclass, field
from functools import cached_property
from operator import itemgetter
from typing import Any, Protocol

import numpy as np

from slipless.decode.deframe import FastDeframer, FrameBlock
from slipless.decode.frames import MalformedFrame, parse_body
from slipless.protocol import wire

MAX_HELD = 4096  # frames per run waiting for a descriptor or an anchor (~3 min at 20/s)
_HEADER = struct.Struct(wire.HEADER)
_SAMPLES_HEAD = struct.Struct(wire.HEADER + wire.SAMPLES_FIXED.lstrip("<"))
_DESC_FIXED = struct.Struct(wire.DESCRIPTOR_FIXED)
_TICK_LIMIT = 1 << 31  # the nearest-tick rule is exact within +-2**31 us
_MAX_GAP_ANY_US = 0xFFFF * 1000  # the largest max_gap a descriptor can carry (u16 ms)
_ANCHOR_KINDS = (wire.DESCRIPTOR, wire.STATUS, wire.SYNC, wire.END)  # carry 64-bit ticks
_VK_SAMPLES = (wire.VERSION << 4) | wire.SAMPLES
_FIRST = itemgetter(0)
_DTYPES = {0x62: "<i1", 0x42: "<u1", 0x68: "<i2", 0x48: "<u2", 0x69: "<i4", 0x49: "<u4",
           0x66: "<f4"}
BULK_BYTES = 16384  # chunks at least this long are decoded as a block (about 70 full frames)
# Blocks are cut to this size, and samples handed over in pieces of at most EMIT_SAMPLES,
# so no temporary passes about a megabyte: malloc then reuses its memory instead of
# giving it back and taking fresh pages (page faults cost as much as the decoding).
BLOCK_BYTES = 512 << 10
EMIT_SAMPLES = 1 << 16
_MIN_STRETCH = 4  # in-order SAMPLES frames taken together; shorter runs of them go frame by frame
# The SAMPLES header as a numpy record (packed, 14 bytes), read for every frame of a block.
_HEAD = np.dtype([("vk", "u1"), ("board", "<u2"), ("run", "<u2"), ("seq", "<u4"), ("stream", "u1"),
                  ("tick32", "<u4")])
_HEAD_COLS = np.arange(_HEAD.itemsize)
_NO_STREAM = 255  # item size of a stream a run does not describe: no SAMPLES payload divides by it
_TICK_SAFE = 1 << 61  # block ticks are int64 sums: references beyond this go frame by frame
# Board time is below 2**62 us (146,000 years; SPEC 5): a tick at or past it is damage, and
# int64 columns could not hold what a frame resolved near it would need.
TICK_MAX = 1 << 62
_MIN_SAMPLES_BODY = _SAMPLES_HEAD.size + 1  # a SAMPLES body holds at least one sample byte
# Replies a board still sends after END (SPEC 3.8): at seqs at or above END's frame count
# they answer commands and are not frames of the run.
REPLY_KINDS = (wire.STATUS, wire.SYNC, wire.ACK, wire.ERROR, wire.INFO, wire.FIRMWARE)
# Frames never received handed to the sink one row each, per run: a CRC-valid frame with a
# seq near 2**32 would otherwise open a gap of billions (the runs table still counts them all).
MAX_UNSEEN_ROWS = 1_000_000
_RESEND_CMD = struct.Struct(wire.HEADER + wire.COMMAND_FIXED.lstrip("<")
                            + wire.RESEND_ARGS.lstrip("<"))


ORIGINS = ("radio", "resend", "mirror", "stream")
# A frame's fate in frame(): "reply" is a frame at or past END's frame count (SPEC 3.8).
FATES = ("received", "duplicate", "missing", "corrupt", "reply")


@dataclass(frozen=True)
class Arrival:
    """Where and when a chunk of bytes reached the laptop.

    source tells apart byte streams that must never be glued together (one per
    board connection in a capture); mono_ns and wall_ns are the laptop's clocks
    at reception (-1 when unknown, as in a raw stream or a mirror file); origin
    is how the bytes came: "radio" (live link), "mirror" (the board's file),
    "stream" (any other byte stream). A radio frame that fills an earlier gap
    after the laptop asked for it (a RESEND among the bytes it wrote, which
    reach the decoder too) is reported with origin "resend"; one that merely
    came out of order stays "radio".
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

    @cached_property
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
    # Until a descriptor says otherwise, the largest max_gap_ms a descriptor can carry (u16),
    # so the tick rule stays safe: an EVENTS frame of a run never described is exact within
    # 31 frames of a reference (SPEC 5).
    max_gap_us: int = _MAX_GAP_ANY_US
    hot_span: int = _TICK_LIMIT // _MAX_GAP_ANY_US - 1  # see set_max_gap
    n_streams: int = 0
    streams: dict[int, StreamInfo] = field(default_factory=dict)
    described: bool = False
    ref_seq: int = -1  # latest frame whose 64-bit tick is known
    ref_tick: int = 0
    kept_refs: list[tuple[int, int]] = field(default_factory=list)  # (seq, tick): one per half
    # hot span, so a frame that comes late (resent, from a mirror) still finds a reference
    held: list[tuple[int, int, bytes, int, Arrival]] = field(default_factory=list)
    announced: bool = False  # the sink was told of the descriptor (once it is complete)
    replies: set[int] = field(default_factory=set)  # seqs of replies after END (SPEC 3.8)
    unlisted: int = 0  # frames never received not handed over one by one (MAX_UNSEEN_ROWS)
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
        rule: the latest one, else the nearer of the kept ones either side of it
        (of two equally near, the later); None if none is (SPEC 5)."""
        if self.ref_seq < 0:
            return None
        gap_us = self.max_gap_us
        if (abs(seq - self.ref_seq) + 1) * gap_us < _TICK_LIMIT:
            return self.ref_tick
        kept = self.kept_refs
        i = bisect.bisect_left(kept, (seq,))
        best = kept[i] if i < len(kept) else None
        if i and (best is None or seq - kept[i - 1][0] < best[0] - seq):
            best = kept[i - 1]
        if best is not None and (abs(seq - best[0]) + 1) * gap_us < _TICK_LIMIT:
            return best[1]
        return None

    def nearest_ref(self, seq: int) -> int:
        """The tick of the reference nearest `seq` in seq (latest or kept; of two
        equally near, the later): what a forced frame is unwrapped against."""
        i = bisect.bisect_left(self.kept_refs, (seq,))
        best = (abs(seq - self.ref_seq), -self.ref_seq, self.ref_tick)
        for ref_seq, ref_tick in self.kept_refs[max(0, i - 1) : i + 1]:
            best = min(best, (abs(seq - ref_seq), -ref_seq, ref_tick))
        return best[2]

    def set_ref(self, seq: int, tick: int) -> None:
        """A newer frame whose 64-bit tick is known becomes the reference."""
        self.ref_seq, self.ref_tick = seq, tick
        kept = self.kept_refs
        if not kept or (seq - kept[-1][0]) * 2 >= self.hot_span:
            kept.append((seq, tick))

    def known_tick(self, seq: int, tick: int) -> None:
        """A frame whose 64-bit tick is known: the latest reference if it is the
        newest, else kept when no kept reference is within half the bound of it
        (SPEC 5): a late anchor (a mirror read after the capture) is one."""
        if seq > self.ref_seq:
            self.set_ref(seq, tick)
            return
        kept, span = self.kept_refs, self.hot_span
        i = bisect.bisect_left(kept, (seq,))
        if ((not i or (seq - kept[i - 1][0]) * 2 >= span)
                and (i == len(kept) or (kept[i][0] - seq) * 2 >= span)):
            kept.insert(i, (seq, tick))


class _Asked:
    """The seq ranges the laptop asked boards to resend, per (board, run) field of
    the RESEND (0xFFFF: any board, 0: the board's current run), merged."""

    def __init__(self) -> None:
        self._ranges: dict[tuple[int, int], tuple[list[int], list[int]]] = {}

    def add(self, board: int, run: int, first: int, last: int) -> None:
        starts, ends = self._ranges.setdefault((board, run), ([], []))
        i = bisect.bisect_left(ends, first - 1)  # the first range that reaches first - 1
        j = bisect.bisect_right(starts, last + 1)  # past the last range that starts by last + 1
        if i < j:
            first, last = min(first, starts[i]), max(last, ends[j - 1])
        starts[i:j], ends[i:j] = [first], [last]

    def covers(self, board: int, run: int, seq: int) -> bool:
        for key in ((board, run), (board, 0), (0xFFFF, run), (0xFFFF, 0)):
            got = self._ranges.get(key)
            if got is not None:
                i = bisect.bisect_right(got[0], seq) - 1
                if i >= 0 and seq <= got[1][i]:
                    return True
        return False


class Sink(Protocol):
    # descriptor(): once per run, when its streams are known (every part of a split
    # descriptor come, or at the end of input with the parts that came); run.streams.
    def descriptor(self, run: RunState) -> None: ...
    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None: ...
    # Optional: a sink that defines sample_frames(run, info, seqs, ticks, counts, raw)
    # takes the samples in their frames' form instead (see expand_frames).
    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None: ...
    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None: ...
    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None: ...
    # frame(): every frame's fate (FATES), as it arrives; at finish() one row per frame
    # never received ("missing"/"corrupt", kind -1, origin ""), at most MAX_UNSEEN_ROWS.
    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None: ...
    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None: ...
    # A sink may also define received_frames(run, seq0, offsets, origin, arrival):
    # SAMPLES frames seq0, seq0 + 1, ... arrived in order, each "received", at these
    # offsets; the decoder then makes that one call in place of their frame() calls.


def received_one_by_one(sink: Any, run: RunState, seq0: int, offsets: np.ndarray, origin: str,
                        arrival: Arrival) -> None:
    """received_frames for a sink that only has frame()."""
    frame = sink.frame
    for q, offset in enumerate(offsets.tolist()):
        frame(run, seq0 + q, wire.SAMPLES, "received", offset, origin, arrival)


def expand_frames(info: StreamInfo, seqs: np.ndarray, ticks: np.ndarray,
                  counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Frames' form -> one seq and tick per sample. Frame k holds counts[k]
    samples whose first has tick ticks[k]; they are info.period_us apart."""
    each = int(counts[0]) if len(counts) else 0
    if (counts == each).all():  # frames of one length: a sample's place is its column
        seq = np.repeat(seqs, each)
        tick = (ticks[:, None] + np.arange(each, dtype=np.int64) * info.period_us).reshape(-1)
    else:
        seq = np.repeat(seqs, counts)
        start = np.repeat(ticks, counts)
        first_index = np.repeat(np.cumsum(counts) - counts, counts)
        tick = start + (np.arange(len(seq), dtype=np.int64) - first_index) * info.period_us
    return seq, tick


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


class Tee(NullSink):
    """Every call to each of several sinks; samples in the frames' form to those
    that take it, as rows (made once) to the others. (It defines every method,
    so the decoder does all the work any of them might want.)"""

    def __init__(self, *sinks: Any) -> None:
        self.sinks = sinks
        self.sample_sinks = [s for s in sinks if hasattr(s, "sample_frames")
                             or getattr(type(s), "samples", None) is not NullSink.samples]

    def descriptor(self, run: RunState) -> None:
        for s in self.sinks:
            s.descriptor(run)

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        for s in self.sample_sinks:
            s.samples(run, info, seq, tick, raw)

    def sample_frames(self, run: RunState, info: StreamInfo, seqs: np.ndarray, ticks: np.ndarray,
                      counts: np.ndarray, raw: np.ndarray) -> None:
        rows = None
        for s in self.sample_sinks:
            if hasattr(s, "sample_frames"):
                s.sample_frames(run, info, seqs, ticks, counts, raw)
                continue
            if rows is None:
                rows = expand_frames(info, seqs, ticks, counts)
            s.samples(run, info, *rows, raw)

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        for s in self.sinks:
            s.event(run, seq, tick, code, value)

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        for s in self.sinks:
            s.status(run, seq, fields)

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        for s in self.sinks:
            s.reply(run, seq, kind, fields)

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        for s in self.sinks:
            s.frame(run, seq, kind, fate, offset, origin, arrival)

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        for s in self.sinks:
            s.timing(run, seq, kind, tick, arrival)

    def received_frames(self, run: RunState, seq0: int, offsets: np.ndarray, origin: str,
                        arrival: Arrival) -> None:
        for s in self.sinks:
            bulk = getattr(s, "received_frames", None)
            if bulk is not None:
                bulk(run, seq0, offsets, origin, arrival)
            elif getattr(type(s), "frame", None) is not NullSink.frame:
                received_one_by_one(s, run, seq0, offsets, origin, arrival)


@dataclass
class Counters:
    """Stream-level tallies (per-run ones live on RunState)."""

    bytes: int = 0
    frames: int = 0
    corrupt: int = 0
    corrupt_bytes: int = 0
    overlong: int = 0
    skipped_bytes: int = 0
    file_damaged: int = 0  # stretches of capture files the reader stepped over (damaged segments)
    file_damaged_bytes: int = 0
    unknown_kind: int = 0
    bad_version: int = 0
    versions_seen: set[int] = field(default_factory=set)
    malformed: int = 0
    commands: int = 0


# A batch's frames as arrays: seq and first tick per frame, values per frame, the values
# (None when the sink does not take them).
_Piece = tuple[np.ndarray, np.ndarray, np.ndarray, "np.ndarray | None"]


class _Batch:
    """SAMPLES frames of one run and stream collected between flushes: frames
    decoded one by one in lists, stretches decoded as a block in pieces (the
    lists become a piece before the next one is added, so order is kept)."""

    __slots__ = ("run", "info", "itemsize", "seqs", "ticks", "payloads", "pieces")

    def __init__(self, run: RunState, info: StreamInfo) -> None:
        self.run = run
        self.info = info
        self.itemsize = info.dtype.itemsize
        self.seqs: list[int] = []
        self.ticks: list[int] = []
        self.payloads: list[bytes] = []
        self.pieces: list[_Piece] = []

    def add(self, piece: _Piece) -> None:
        self.close_lists(piece[3] is not None)
        self.pieces.append(piece)

    def close_lists(self, values: bool) -> None:
        if not self.seqs:
            return
        counts = np.array(list(map(len, self.payloads)), dtype=np.int64) // self.itemsize
        raw = np.frombuffer(b"".join(self.payloads), dtype=self.info.dtype) if values else None
        self.pieces.append((np.asarray(self.seqs, dtype=np.int64),
                            np.asarray(self.ticks, dtype=np.int64), counts, raw))
        self.seqs, self.ticks, self.payloads = [], [], []


class _Block:
    """The arrays of the block being decoded that its pending stretches refer to."""

    __slots__ = ("frames", "seq", "tick32", "tick_sum", "stream", "values_len", "u8", "misfits")

    def __init__(self, frames: FrameBlock, seq: np.ndarray, tick32: np.ndarray,
                 tick_sum: np.ndarray, stream: np.ndarray, values_len: np.ndarray,
                 u8: np.ndarray) -> None:
        self.frames = frames
        self.seq = seq
        self.tick32 = tick32
        self.tick_sum = tick_sum  # running sum of the wrapped tick32 differences
        self.stream = stream
        self.values_len = values_len  # SAMPLES payload bytes after the fixed fields
        self.u8 = u8  # frames.data as uint8
        # per run: its item sizes, and the frames whose values do not fit them
        self.misfits: dict[tuple[int, int], tuple[np.ndarray, list[int]]] = {}


class Decoder:
    _deframer_type = FastDeframer  # one per input and source (tests put the reference here)

    def __init__(self, sink: Sink | None = None, flush_bytes: int = 0) -> None:
        """flush_bytes: hand samples to the sink once this many bytes were fed
        (0: after every feed). A live reader fed one notification at a time
        sets it higher so the per-batch numpy work is shared by many frames."""
        self.flush_bytes = flush_bytes
        self._unflushed = 0
        self.sink: Sink = sink if sink is not None else NullSink()
        # A sink that keeps the NullSink's samples()/timing() wants neither: skip their work.
        self._frames_form = getattr(self.sink, "sample_frames", None)
        self._wants_samples = (self._frames_form is not None
                               or getattr(type(self.sink), "samples", None) is not NullSink.samples)
        self._wants_timing = getattr(type(self.sink), "timing", None) is not NullSink.timing
        self._wants_frames = getattr(type(self.sink), "frame", None) is not NullSink.frame
        self._received_frames = getattr(self.sink, "received_frames", None)
        self._pending: list[tuple[RunState, int, int, int]] = []  # stretches: run, first, end, shift
        self._block: _Block | None = None
        self._sizes: dict[tuple[int, int], np.ndarray] = {}  # per run: item size by stream id
        self._batched: dict[tuple[int, int], set[int]] = {}  # per run: streams with a batch
        self._described: dict[tuple[int, int], tuple[bytes, list[StreamInfo]]] = {}  # last entries
        self.deframer = self._deframer_type()
        self._deframers: dict[int, FastDeframer] = {0: self.deframer}
        self.arrival = STREAM
        self.counters = Counters()
        self.runs: dict[tuple[int, int], RunState] = {}
        self._batches: dict[tuple[int, int, int], _Batch] = {}
        self._done: list[FastDeframer] = []  # deframers of inputs already read
        self._damage_now = 0  # damaged segments seen before the frame being handled
        self._asked = _Asked()  # RESEND ranges the laptop wrote (origin "resend" needs one)
        self.notes: list[str] = []  # what the readers of the inputs had to skip

    def new_input(self) -> None:
        """The next bytes come from another file or link: never glue it to the last."""
        for d in self._deframers.values():
            d.close()
            self._done.append(d)
        self.deframer = self._deframer_type()
        self._deframers = {0: self.deframer}

    # ---- input ------------------------------------------------------------
    def skip_damaged(self, nbytes: int) -> None:
        """The input's reader stepped over nbytes it could not read (a damaged
        stretch of a capture file): one damaged segment (SPEC 6's D), and no frame
        is glued across it on any link of the input."""
        first, *rest = self._deframers.values()
        first.skip_damaged(nbytes)
        for d in rest:
            d.cut()

    def reset_source(self, source: int) -> None:
        """A link restarted: bytes before and after must not be glued together."""
        d = self._deframers.pop(source, None)
        if d is not None:
            d.close()
            self._done.append(d)

    def _take_input(self, data: bytes, arrival: Arrival) -> tuple[Any, int]:
        """Count the bytes; -> the source's deframer and the damage other sources saw."""
        self.counters.bytes += len(data)
        deframer = self._deframers.get(arrival.source)
        if deframer is None:
            deframer = self._deframers[arrival.source] = self._deframer_type()
        self.deframer = deframer
        self.arrival = arrival
        return deframer, sum(d.damaged for d in self._done) + sum(
            d.damaged for d in self._deframers.values() if d is not deframer)

    def feed(self, data: bytes, arrival: Arrival = STREAM) -> None:
        deframer, base = self._take_input(data, arrival)
        if len(data) >= BULK_BYTES:
            for at in range(0, len(data), BLOCK_BYTES):
                self._feed_block(deframer.feed_block(data[at : at + BLOCK_BYTES]), base)
        else:
            self._feed_frames(deframer, data, base)
        self._unflushed += len(data)
        if self._unflushed >= self.flush_bytes:
            self._unflushed = 0
            self._flush()

    def _feed_frames(self, deframer: FastDeframer, data: bytes, base: int) -> None:
        arrival = self.arrival
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
                        and run.described and seq - run.ref_seq < run.hot_span
                        and -_TICK_SAFE < run.ref_tick < _TICK_SAFE and run.end is None):
                    batch = batches.get((board, run_id, stream))
                    if (batch is not None and batch.info is run.streams.get(stream)
                            and not (len(body) - _SAMPLES_HEAD.size) % batch.itemsize):
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

    # ---- a block of frames -----------------------------------------------------
    def _feed_block(self, frames: FrameBlock, base: int) -> None:
        if frames.first is not None:
            body, offset, damaged = frames.first
            self._damage_now = base + damaged
            self._frame(body, offset)
        n = len(frames)
        if not n:
            return
        u8 = np.frombuffer(frames.data, dtype=np.uint8)
        cols = frames.starts[:, None] + _HEAD_COLS
        np.minimum(cols, len(u8) - 1, out=cols)  # a frame shorter than the record: not SAMPLES
        head = u8[cols].view(_HEAD)[:, 0]
        seq = head["seq"].astype(np.int64)
        board, run_id, stream = head["board"], head["run"], head["stream"]
        dmg = frames.damaged
        samples = (head["vk"] == _VK_SAMPLES) & (frames.lens > _SAMPLES_HEAD.size)
        # frame i continues the stretch of frame i - 1: same run, next seq, no damage between
        cont = (samples[1:] & samples[:-1] & (board[1:] == board[:-1])
                & (run_id[1:] == run_id[:-1]) & (seq[1:] == seq[:-1] + 1) & (dmg[1:] == dmg[:-1]))
        tick32 = head["tick32"].astype(np.int64)
        step = np.zeros(n, dtype=np.int64)
        np.subtract(tick32[1:], tick32[:-1], out=step[1:])
        step &= 0xFFFFFFFF
        step[step >= 0x80000000] -= 0x100000000  # the tick rule between neighbours
        self._block = _Block(frames, seq, tick32, np.cumsum(step), stream,
                             frames.lens - _SAMPLES_HEAD.size, u8)
        cuts = (np.flatnonzero(~cont) + 1).tolist()
        runs = self.runs
        for i, j in zip([0, *cuts], [*cuts, n]):
            late = i  # frames before this one go frame by frame without asking _stretch
            while i < j:
                if j - i >= _MIN_STRETCH and i >= late:
                    run = runs.get((int(board[i]), int(run_id[i])))
                    k = i if run is None else self._stretch(run, i, j, base + int(dmg[i]))
                    if k > i:
                        i = k
                        continue
                    if run is not None and int(seq[i]) <= run.high_seq:
                        # below the run's highest seq: late frames, none a stretch can take
                        # until the seq after it (they do not move it)
                        late = i + run.high_seq + 1 - int(seq[i])
                self._damage_now = base + int(dmg[i])
                self._frame(frames.body(i), int(frames.offsets[i]))
                i += 1
        if self._pending:
            self._commit()
        self._block = None

    def _stretch(self, run: RunState, i: int, j: int, damage: int) -> int:
        """Frames i..j-1 are in-order SAMPLES of `run`: account and unwrap as many
        as _frame would take its hot path for, from i; return where they end."""
        blk = self._block
        assert blk is not None
        seq0 = int(blk.seq[i])
        if not (run.described and seq0 == run.high_seq + 1 and run.damage_mark == damage
                and seq0 - run.ref_seq < run.hot_span and -_TICK_SAFE < run.ref_tick < _TICK_SAFE
                and run.end is None):
            return i
        # a stream the run does not describe, or values that do not fill whole items: stop there
        known = blk.misfits.get(run.key)
        misfits = known[1] if known is not None and known[0] is self._sizes.get(run.key) else (
            self._misfits(run))
        at = bisect.bisect_left(misfits, i)
        k = min(j, misfits[at]) if at < len(misfits) else j
        if k == i:
            return i
        shift = wire.unwrap_tick(int(blk.tick32[i]), run.ref_tick) - int(blk.tick_sum[i])
        last = seq0 + k - i - 1
        arrival = self.arrival
        timed = arrival.mono_ns >= 0 and self._wants_timing
        if timed or (self._wants_frames and self._received_frames is None):
            self._stretch_calls(run, i, k, seq0, shift, damage)
        else:
            run.high_seq = last
            run.received += k - i
            self._keep_refs(run, i, seq0, last, shift)
            run.ref_seq, run.ref_tick = last, shift + int(blk.tick_sum[k - 1])
            if self._received_frames is not None:  # after the run's state, as frame() is
                self._received_frames(run, seq0, blk.frames.offsets[i:k], arrival.origin, arrival)
        self._pending.append((run, i, k, shift))
        return k

    def _stretch_calls(self, run: RunState, i: int, k: int, seq0: int, shift: int,
                       damage: int) -> None:
        """A stretch for a sink that takes frame() or timing(): _frame's steps, in order."""
        blk = self._block
        assert blk is not None
        arrival = self.arrival
        origin = arrival.origin
        timed = arrival.mono_ns >= 0 and self._wants_timing
        frame_sink = self.sink.frame
        offsets = blk.frames.offsets[i:k].tolist()
        ticks = (blk.tick_sum[i:k] + shift).tolist()
        streams = blk.stream[i:k].tolist()
        sizes = blk.values_len[i:k].tolist()
        for q in range(k - i):
            seq, tick = seq0 + q, ticks[q]
            run.high_seq = seq
            run.damage_mark = damage
            run.received += 1
            frame_sink(run, seq, wire.SAMPLES, "received", offsets[q], origin, arrival)
            run.set_ref(seq, tick)
            if timed:
                info = run.streams[streams[q]]
                self.sink.timing(run, seq, wire.SAMPLES,
                                 tick + (sizes[q] // info.dtype.itemsize - 1) * info.period_us,
                                 arrival)

    def _keep_refs(self, run: RunState, i: int, seq0: int, last: int, shift: int) -> None:
        """RunState.set_ref's kept references for seqs seq0..last (frames i..)."""
        blk = self._block
        assert blk is not None
        kept = run.kept_refs
        half = (run.hot_span + 1) // 2  # set_ref keeps one when (seq - kept) * 2 >= hot_span
        seq = seq0 if not kept else max(seq0, kept[-1][0] + half)
        while seq <= last:
            kept.append((seq, shift + int(blk.tick_sum[i + seq - seq0])))
            seq += half

    def _misfits(self, run: RunState) -> list[int]:
        """The block's frames that, as SAMPLES of `run`, _samples would not decode."""
        blk = self._block
        assert blk is not None
        sizes = self._item_sizes(run)
        known = blk.misfits.get(run.key)
        if known is None or known[0] is not sizes:
            known = blk.misfits[run.key] = (
                sizes, np.flatnonzero(blk.values_len % sizes[blk.stream]).tolist())
        return known[1]

    def _item_sizes(self, run: RunState) -> np.ndarray:
        sizes = self._sizes.get(run.key)
        if sizes is None:
            sizes = np.full(256, _NO_STREAM, dtype=np.int64)
            for sid, info in run.streams.items():
                sizes[sid] = info.dtype.itemsize
            self._sizes[run.key] = sizes
        return sizes

    def _commit(self) -> None:
        """Hand the pending stretches' frames to their batches, in frame order."""
        blk = self._block
        assert blk is not None
        pending, self._pending = self._pending, []
        groups: dict[int, list[tuple[RunState, int, int, int]]] = {}
        for item in pending:
            groups.setdefault(id(item[0]), []).append(item)
        if any(not self._batched.get(g[0][0].key, set()) >= g[0][0].streams.keys()
               for g in groups.values()):
            for run, i, k, _ in pending:
                self._new_batches(run, i, k)
        n = len(blk.seq)
        for group in groups.values():
            run = group[0][0]
            taken = np.zeros(n, dtype=bool)
            shift = np.zeros(n, dtype=np.int64)  # the tick of a stretch's first frame, less its sum
            for _, i, k, first in group:
                taken[i:k] = True
                shift[i:k] = first
            idx = np.flatnonzero(taken)
            ticks = blk.tick_sum[idx] + shift[idx]
            streams = blk.stream[idx]
            for sid in np.flatnonzero(np.bincount(streams, minlength=256)).tolist():
                sel = streams == sid
                self._add_piece(run, sid, idx[sel], ticks[sel])

    def _new_batches(self, run: RunState, i: int, k: int) -> None:
        """Batches for the streams of frames i..k-1 that have none, in the order
        _samples would make them (their first frames' order)."""
        blk = self._block
        assert blk is not None
        if self._batched.get(run.key, set()) >= run.streams.keys():
            return
        sids, first = np.unique(blk.stream[i:k], return_index=True)
        for sid in sids[np.argsort(first)].tolist():
            self._batch_for(run, run.streams[sid])

    def _add_piece(self, run: RunState, sid: int, idx: np.ndarray, ticks: np.ndarray) -> None:
        blk = self._block
        assert blk is not None
        batch = self._batch_for(run, run.streams[sid])
        sizes = blk.values_len[idx]
        raw = None
        if self._wants_samples:
            frames = blk.frames
            first = frames.starts[idx] + _SAMPLES_HEAD.size
            size = int(sizes[0])
            if (sizes == size).all():  # rows of one length: one gather through a window view
                rows = np.ndarray((len(blk.u8) - size + 1, size), np.uint8, frames.data,
                                  strides=(1, 1))
                raw = rows[first].view(batch.info.dtype).reshape(-1)
            else:
                raw = np.frombuffer(b"".join(map(frames.data.__getitem__, map(
                    slice, first.tolist(), (first + sizes).tolist()))), dtype=batch.info.dtype)
        batch.add((blk.seq[idx], ticks, sizes // batch.itemsize, raw))

    def _batch_for(self, run: RunState, info: StreamInfo) -> _Batch:
        """The batch of info's stream; a stream described anew first hands over
        what it holds (those values keep the description they came with)."""
        key = (run.board, run.run, info.stream)
        batch = self._batches.get(key)
        if batch is None:
            batch = self._batches[key] = _Batch(run, info)
            self._batched.setdefault(run.key, set()).add(info.stream)
        elif batch.info is not info:
            if batch.info != info:
                self._emit(batch)
                batch.itemsize = info.dtype.itemsize
            batch.info = info
        return batch

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
            self._announce(run)  # a split descriptor never completed: what was named
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
            c.file_damaged += getattr(d, "file_damaged", 0)  # (tests put wire.Deframer here)
            c.file_damaged_bytes += getattr(d, "file_damaged_bytes", 0)

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
            self._command(body)
            return
        run = self.runs.get((board, run_id))
        if run is None:
            run = self.runs[(board, run_id)] = RunState(board, run_id)
        if run.end is not None and seq >= run.end["frames"]:
            self._after_end(run, kind, seq, body, offset)
            return
        fate, late = self._account(run, seq)
        origin = self.arrival.origin
        if late and origin == "radio" and self._asked.covers(board, run_id, seq):
            origin = "resend"  # it filled a gap after the laptop asked for it
        self.sink.frame(run, seq, kind, fate, offset, origin, self.arrival)
        if fate == "duplicate":
            return
        self._content(run, kind, seq, body, offset)

    def _content(self, run: RunState, kind: int, seq: int, body: bytes, offset: int) -> None:
        """A new frame's content: decoded, held or counted (SPEC 4's checks, in order)."""
        if kind not in wire.KIND_NAMES:
            self.counters.unknown_kind += 1  # a newer sender's kind: skip, but it held a seq
            return
        if kind == wire.SAMPLES:
            if len(body) < _MIN_SAMPLES_BODY:  # the bytes alone decide: no descriptor needed
                self.counters.malformed += 1
            elif (ref := self._ready_ref(run, kind, seq, body)) is not None:
                self._samples(run, seq, body, ref=ref)
            else:
                self._hold(run, kind, seq, body, offset)
            return
        if kind == wire.EVENTS:
            entries = len(body) - wire.HEADER_SIZE
            if entries % wire.EVENT_ENTRY_SIZE:
                self.counters.malformed += 1
            elif entries and not self._ready(run, kind, seq, body):
                self._hold(run, kind, seq, body, offset)
            elif entries:
                self._typed(run, kind, seq, body, offset)
            return  # (no entries: nothing to decode or to wait for)
        self._typed(run, kind, seq, body, offset)
        if kind in _ANCHOR_KINDS and run.held:
            self._release_held(run)

    def _after_end(self, run: RunState, kind: int, seq: int, body: bytes, offset: int) -> None:
        """A frame at or past END's frame count: a reply to a command, not a frame of
        the run (SPEC 3.8). Decoded as any frame, outside the sequence accounting."""
        run.damage_mark = self._damage_now
        origin = self.arrival.origin
        if seq in run.replies:
            run.duplicates += 1
            self.sink.frame(run, seq, kind, "duplicate", offset, origin, self.arrival)
            return
        run.replies.add(seq)
        self.sink.frame(run, seq, kind, "reply", offset, origin, self.arrival)
        self._content(run, kind, seq, body, offset)

    def _command(self, body: bytes) -> None:
        """A RESEND the laptop wrote (plain or sealed): the frames it asks for."""
        if len(body) < _RESEND_CMD.size:
            return
        _, board, run_id, _, opcode, _, first, last = _RESEND_CMD.unpack_from(body)
        if opcode & 0x7F == wire.CMD_RESEND and first <= last:
            self._asked.add(board, run_id, first, last)

    @staticmethod
    def _ready_ref(run: RunState, kind: int, seq: int, body: bytes) -> int | None:
        """SAMPLES and EVENTS need the descriptor (for max_gap_ms) and an
        unambiguous tick; SAMPLES also their stream's entry, unless the
        descriptor is complete (then an unknown stream is undecodable).
        -> the tick of the reference to unwrap against, None: not ready."""
        if not run.described:
            return None
        if (kind == wire.SAMPLES and body[wire.HEADER_SIZE] not in run.streams
                and len(run.streams) + run.bad_streams < run.n_streams):
            return None  # a later part of a split descriptor will name it
        return run.ref_for(seq)

    def _ready(self, run: RunState, kind: int, seq: int, body: bytes) -> bool:
        return self._ready_ref(run, kind, seq, body) is not None

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
            run.duplicates += 1  # (a duplicate is a frame of the run that arrived: SPEC 6)
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
        i = bisect.bisect_right(run.gaps, seq, key=_FIRST) - 1  # gaps stay in seq order
        if i < 0:
            return False
        gap = run.gaps[i]
        first, last, corrupt = gap
        if seq > last:
            return False
        if seq == first:  # the gap shrinks from its start (a late run read in order)
            if seq == last:
                del run.gaps[i]
            else:
                gap[0], gap[2] = seq + 1, min(corrupt, last - seq)
            return True
        # The damaged segments stay with the first frames of the gap (SPEC 6).
        head = min(corrupt, seq - first)
        tail = min(corrupt - head, last - seq)
        parts = [[first, seq - 1, head], [seq + 1, last, tail]]
        run.gaps[i : i + 1] = [p for p in parts if p[0] <= p[1]]
        return True

    def _end_seen(self, run: RunState) -> None:
        """END tells the run's length: frames already taken at seqs at or past it were
        replies (SPEC 3.8), and the seqs missing there belong to no run frame."""
        frames = run.end["frames"] if run.end is not None else 0
        if run.high_seq < frames:
            return
        beyond = run.high_seq - frames + 1
        gaps = []
        for first, last, corrupt in run.gaps:
            if last >= frames:
                beyond -= last - max(first, frames) + 1
            if first < frames:
                gaps.append([first, min(last, frames - 1), min(corrupt, frames - first)])
        if run.high_seq - frames < MAX_HELD:  # so a later copy is a duplicate (a few at most)
            run.replies.update(s for s in range(frames, run.high_seq + 1)
                               if not any(g[0] <= s <= g[1] for g in run.gaps))
        run.received -= beyond
        run.gaps = gaps
        run.high_seq = frames - 1

    @staticmethod
    def _samples_fault(run: RunState, body: bytes) -> str | None:
        """SPEC 4's checks on a SAMPLES body, in their order: too short (malformed),
        a stream the descriptor does not define or of a type this release does not
        know (undecodable), values that do not fill whole samples (malformed)."""
        if len(body) < _MIN_SAMPLES_BODY:
            return "malformed"
        info = run.streams.get(body[wire.HEADER_SIZE])
        if info is None:
            return "undecodable"
        if (len(body) - _SAMPLES_HEAD.size) % info.dtype.itemsize:
            return "malformed"
        return None

    def _fault(self, run: RunState, fault: str) -> None:
        if fault == "malformed":
            self.counters.malformed += 1
        else:
            run.undecodable += 1

    def _samples(self, run: RunState, seq: int, body: bytes, forced: bool = False,
                 ref: int | None = None) -> bool:
        """Decode a SAMPLES frame (ref: the reference's tick, if known); False if
        it gave no samples (counted why)."""
        fault = self._samples_fault(run, body)
        if fault is not None:
            self._fault(run, fault)
            return False
        _, _, _, _, stream, tick32 = _SAMPLES_HEAD.unpack_from(body)
        info = run.streams[stream]
        if ref is None:
            ref = run.ref_for(seq)
        tick = wire.unwrap_tick(tick32, run.nearest_ref(seq) if ref is None else ref)
        n = (len(body) - _SAMPLES_HEAD.size) // info.dtype.itemsize
        if not -TICK_MAX <= tick < TICK_MAX - (n - 1) * info.period_us:
            self.counters.malformed += 1  # past any board's time (SPEC 5)
            return False
        if not forced:  # a sample frame is as good a reference as an anchor
            run.known_tick(seq, tick)
            if self.arrival.mono_ns >= 0:
                self._time_samples(run, seq, tick, len(body), info)
        if self._pending:
            self._commit()
        batch = self._batch_for(run, info)
        batch.seqs.append(seq)
        batch.ticks.append(tick)
        batch.payloads.append(body[_SAMPLES_HEAD.size :])
        return True

    def _typed(self, run: RunState, kind: int, seq: int, body: bytes, offset: int,
               forced: bool = False) -> bool:
        """Decode a frame of a known kind; False if it gave nothing (counted why)."""
        if kind == wire.SAMPLES:
            return self._samples(run, seq, body, forced)
        if kind == wire.DESCRIPTOR:
            self._descriptor(run, seq, body)
            return True
        try:
            f = parse_body(kind, body[wire.HEADER_SIZE :])
        except MalformedFrame:
            self.counters.malformed += 1
            return False
        if kind == wire.EVENTS:
            ref = run.ref_for(seq)
            if ref is None:
                ref = run.nearest_ref(seq)
            ticks = [wire.unwrap_tick(ev["tick32"], ref) for ev in f["events"]]
            if ticks and not -TICK_MAX <= min(ticks) <= max(ticks) < TICK_MAX:
                self.counters.malformed += 1  # past any board's time (SPEC 5)
                return False
            for ev, tick in zip(f["events"], ticks):
                run.events += 1
                self.sink.event(run, seq, tick, ev["code"], ev["value"])
            return bool(ticks)
        if kind in _ANCHOR_KINDS and max(f.get("tick", 0), f.get("tx_tick", 0),
                                         f.get("rx_tick", 0)) >= TICK_MAX:
            self.counters.malformed += 1  # past any board's time (SPEC 5)
            return False
        if kind == wire.STATUS:
            self._anchor(run, seq, f["tick"], kind)
            self.sink.status(run, seq, f)
        elif kind == wire.END:
            self._anchor(run, seq, f["tick"], kind)
            run.end = f
            self._end_seen(run)
            self.sink.reply(run, seq, kind, f)
        elif kind == wire.SYNC:
            self._anchor(run, seq, f["tx_tick"], kind)
            self.sink.reply(run, seq, kind, f)
        else:  # ACK, ERROR, INFO
            self.sink.reply(run, seq, kind, f)
        return True

    def _anchor(self, run: RunState, seq: int, tick: int, kind: int) -> None:
        run.known_tick(seq, tick)
        if self.arrival.mono_ns >= 0:
            self.sink.timing(run, seq, kind, tick, self.arrival)

    def _descriptor(self, run: RunState, seq: int, body: bytes) -> None:
        fixed_end = wire.HEADER_SIZE + wire.DESCRIPTOR_FIXED_SIZE
        entries = body[fixed_end:]
        last = self._described.get(run.key)
        if last is not None and last[0] == entries and len(body) >= fixed_end:
            # the board repeats its descriptor: the entries were read (and checked) before
            f = dict(zip(wire.DESCRIPTOR_FIELDS, _DESC_FIXED.unpack_from(body, wire.HEADER_SIZE)))
        else:
            try:
                f = parse_body(wire.DESCRIPTOR, body[wire.HEADER_SIZE :])
            except MalformedFrame:
                self.counters.malformed += 1
                return
            if any(len(s["name"].encode()) > wire.MAX_TEXT or len(s["unit"].encode()) > wire.MAX_TEXT
                   for s in f["streams"]):
                self.counters.malformed += 1
                return
            last = None
        if f["tick"] >= TICK_MAX:
            self.counters.malformed += 1  # past any board's time (SPEC 5)
            return
        self._anchor(run, seq, f["tick"], wire.DESCRIPTOR)
        run.tick_hz = f["tick_hz"]
        run.fw = f"{f['fw_major']}.{f['fw_minor']}.{f['fw_patch']}"
        run.set_max_gap(f["max_gap_ms"])
        run.n_streams = f["n_streams"]
        if last is not None:
            infos = last[1]
        else:
            infos = []
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
                infos.append(StreamInfo(**s))
            self._described[run.key] = (entries, infos)
        if last is None:
            if any(run.streams.get(info.stream) != info for info in infos):
                if self._pending:  # stretches decoded under the old description go first
                    self._commit()
                self._sizes.pop(run.key, None)
            for info in infos:
                run.streams[info.stream] = info
        run.described = True
        if len(run.streams) + run.bad_streams >= run.n_streams:
            self._announce(run)

    def _announce(self, run: RunState) -> None:
        """Tell the sink of the run's streams once, when every part of a split
        descriptor has come (or at the end, with the parts that came)."""
        if run.described and not run.announced:
            run.announced = True
            self.sink.descriptor(run)

    def _hold(self, run: RunState, kind: int, seq: int, body: bytes, offset: int) -> None:
        run.held.append((kind, seq, body, offset, self.arrival))
        if len(run.held) > MAX_HELD:
            self._force(run, run.held.pop(0))

    def _release_held(self, run: RunState, final: bool = False) -> None:
        """Decode the held frames that became ready, in arrival order. At the end,
        again while any became ready (one decoded may be the reference of another),
        then force the rest."""
        if not run.described and not final:
            return  # nothing can be ready without a descriptor
        while True:
            keep = []
            for item in run.held:
                if self._ready(run, item[0], item[1], item[2]):
                    self._typed_as(run, item)
                else:
                    keep.append(item)
            progress = len(keep) < len(run.held)
            run.held = keep
            if not (final and progress and keep):
                break
        if final:
            held, run.held = run.held, []
            for item in held:
                self._force(run, item)

    def _typed_as(self, run: RunState, item: tuple[int, int, bytes, int, Arrival],
                  forced: bool = False) -> bool:
        """Decode a held frame as it arrived (its own arrival time and source)."""
        now = self.arrival
        self.arrival = item[4]
        try:
            return self._typed(run, item[0], item[1], item[2], item[3], forced)
        finally:
            self.arrival = now

    def _force(self, run: RunState, item: tuple[int, int, bytes, int, Arrival]) -> None:
        """Decode a frame that could not wait longer, against the reference nearest it;
        count it uncertain if that is too far and it gave samples or events. SAMPLES
        without a descriptor, or any frame without a reference, are undecodable. (An
        EVENTS frame of a run never described is exact near a reference: RunState's
        max_gap_us is then the largest a descriptor can carry.)"""
        kind, seq = item[0], item[1]
        if run.ref_seq < 0 or (kind == wire.SAMPLES and not run.described):
            run.undecodable += 1
            return
        exact = run.ref_for(seq) is not None
        if self._typed_as(run, item, forced=not exact) and not exact:
            run.ticks_uncertain += 1

    # ---- batches and closing ---------------------------------------------------
    def _flush(self) -> None:
        for batch in self._batches.values():
            self._emit(batch)

    def _emit(self, batch: _Batch) -> None:
        """Hand a batch's samples to the sink, in pieces of about EMIT_SAMPLES."""
        batch.close_lists(self._wants_samples)
        pieces, batch.pieces = batch.pieces, []
        if not self._wants_samples:  # count them, nothing more
            batch.run.samples += sum(int(p[2].sum()) for p in pieces)
            return
        group: list[_Piece] = []
        size = 0
        for piece in pieces:  # small pieces together, large ones alone
            assert piece[3] is not None
            if group and size + piece[3].size > EMIT_SAMPLES // 2:
                self._emit_group(batch, group)
                group, size = [], 0
            group.append(piece)
            size += piece[3].size
        if group:
            self._emit_group(batch, group)

    def _emit_group(self, batch: _Batch, pieces: list[_Piece]) -> None:
        """One sample_frames() call (frames' form) or samples() call (per sample)."""
        info = batch.info
        if len(pieces) == 1:
            seqs, ticks, counts, raw = pieces[0]
        else:
            seqs, ticks, counts, raw = (np.concatenate(col) for col in zip(*pieces))
        assert raw is not None
        batch.run.samples += int(raw.size)
        if self._frames_form is not None:
            self._frames_form(batch.run, info, seqs, ticks, counts, raw)
        else:
            seq, tick = expand_frames(info, seqs, ticks, counts)
            self.sink.samples(batch.run, info, seq, tick, raw)

    def _close_accounting(self, run: RunState) -> None:
        """A row for every frame never received, at most MAX_UNSEEN_ROWS a run."""
        left = MAX_UNSEEN_ROWS
        for first, last, corrupt in run.gaps:
            n = min(last - first + 1, left)
            left -= n
            if self._wants_frames:
                frame = self.sink.frame
                for i, seq in enumerate(range(first, first + n)):
                    frame(run, seq, -1, "corrupt" if i < corrupt else "missing", -1, "", STREAM)
        run.unlisted = self.missing(run) - (MAX_UNSEEN_ROWS - left)
        if run.unlisted:
            self.notes.append(f"board {run.board} run {run.run}: {run.unlisted:,} of its "
                              f"{self.missing(run):,} frames never received are counted, not "
                              f"listed one by one (a seq far past the others: damage?)")

    # ---- summary -------------------------------------------------------------
    def missing(self, run: RunState) -> int:
        return sum(last - first + 1 for first, last, _ in run.gaps)

    def corrupt_guess(self, run: RunState) -> int:
        return sum(min(c, last - first + 1) for first, last, c in run.gaps)
