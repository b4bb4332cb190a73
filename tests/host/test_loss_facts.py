"""The compact loss facts (loss_collect) against the same facts kept the plain
way, one Python object per frame, on a hand-built run with lost, resent,
duplicated, swapped and mirrored frames, decoded frame by frame and in bulk."""

from __future__ import annotations

import copy
import random
from typing import Any

import numpy as np
import pytest

from slipless.decode.decoder import Arrival, Decoder, NullSink, RunState, StreamInfo
from slipless.loss.collect import LossSink, RateStream, RunFacts
from slipless.protocol import wire

BOARD, RUN = 2, 5
H = ord("h")
STREAMS = [(0, H, 0, 1000, 0.01, 0.0, "gyro_z", "rad/s"), (1, H, 0, 500, 0.001, 0.0, "alpha", "V")]
N = 300
PER_FRAME = 40  # samples: frames of ~100 bytes, so one feed of them all takes the bulk path
LOST = {s for s in range(1, N - 1) if s % 23 == 4 or s % 31 == 5}
RESENT = {s for s in LOST if s % 2}
MIRRORED = (LOST - RESENT - {4}) | {2, 8, 100}  # 2, 8, 100 are held already: mirror copies
DUPLICATED = {8, 14, 150}
SWAPPED = {12, 60, 200}  # s comes after s + 1


class DictSink(NullSink):
    """The loss facts kept the plain way: a dict entry per frame, a tuple per tick."""

    def __init__(self) -> None:
        self.first: dict[int, tuple[str, int, int, int, bool]] = {}
        self.kinds: dict[int, int] = {}
        self.duplicates = self.mirror_copies = 0
        self.opened: list[tuple[int, int, int]] = []
        self.ticks: dict[int, int] = {}  # seq -> the latest tick its frame carried
        self.rows: dict[int, list[tuple[int, int, int]]] = {}
        self.rate: list[tuple[int, float]] = []
        self.link_high = self.dec_high = -1

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        if not origin:
            return
        if fate == "duplicate":
            if origin == "mirror":
                self.mirror_copies += 1
            else:
                self.duplicates += 1
            return
        late = False
        if origin != "mirror":
            if seq > self.dec_high + 1 and run.gaps and run.gaps[-1][1] == seq - 1:
                first, last, damaged = run.gaps[-1]
                self.opened.append((first, last, damaged))
            late = seq < self.link_high
            self.link_high = max(self.link_high, seq)
        self.dec_high = max(self.dec_high, seq)
        self.first[seq] = (origin, arrival.source, arrival.mono_ns, arrival.wall_ns, late)
        self.kinds[seq] = kind

    def _tick(self, seq: int, tick: int) -> None:
        self.ticks[seq] = max(self.ticks.get(seq, tick), tick)

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        for s in sorted(set(seq.tolist())):
            at = np.flatnonzero(seq == s)
            t0, n = int(tick[at[0]]), at.size
            self.rows.setdefault(info.stream, []).append((s, t0, n))
            self._tick(s, t0 + (n - 1) * info.period_us)
        if info.unit == "rad/s":
            self.rate += [(t, r * info.scale + info.offset)
                          for t, r in zip(tick.tolist(), raw.tolist())]

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        self._tick(seq, tick)

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        self._tick(seq, fields["tick"])

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        if kind == wire.END:
            self._tick(seq, fields["tick"])


def _frames() -> list[bytes]:
    enc = wire.Encoder(BOARD, RUN)
    out = [enc.frame(enc.descriptor(0, 1_000_000, (0, 9, 0), 5000, 2, STREAMS))]
    next_tick = [0, 0]
    made = [0, 0]
    for seq in range(1, N - 1):
        if seq % 9 == 0:
            n = enc.status(seq * 10_000, 3900, 2500, 50_000, 3, 0, 0, 30)
        elif seq % 13 == 0:
            n = enc.events([(seq * 10_000 - 5, wire.EV_MARKER, seq)])
        else:
            s = seq % 2
            n = enc.samples(s, next_tick[s], H, [(seq * 7 + i) % 500 - 250 for i in range(PER_FRAME)])
            next_tick[s] += PER_FRAME * STREAMS[s][3]
            made[s] += PER_FRAME
        out.append(enc.frame(n))
    out.append(enc.frame(enc.end(N * 10_000, 1, [(0, made[0]), (1, made[1])])))
    return out


def _live_order() -> list[int]:
    order = [s for s in range(N) if s not in LOST]
    for s in sorted(SWAPPED):
        i = order.index(s)
        order[i], order[i + 1] = order[i + 1], order[i]
    return [x for s in order for x in ([s, s] if s in DUPLICATED else [s])]


def _decode(sink: Any, bulk: bool, snapshot: list[Any] | None = None) -> Decoder:
    fr = _frames()
    dec = Decoder(sink)
    laptop = wire.Encoder(0xFFFF, RUN)  # the RESEND the laptop wrote: their origin is "resend"
    asked = laptop.frame(laptop.resend(1, min(RESENT), max(RESENT)))
    live = [fr[s] for s in _live_order()] + [asked] + [fr[s] for s in sorted(RESENT)]
    if bulk:
        data = b"".join(live)
        assert len(data) > 16384  # the decoder's bulk path
        dec.feed(data, Arrival(0, 5_000, 1_700_000_000_000_000_005, "radio"))
    else:
        for i, data in enumerate(live):
            dec.feed(data, Arrival(i % 2, 1_000 * i, 1_700_000_000_000_000_000 + i, "radio"))
    if snapshot is not None:  # the facts of the radio alone, as the Run keeps them
        memo: dict[int, Any] = {}
        loss = copy.deepcopy(sink, memo)
        before = copy.deepcopy(dec, memo)
        before.finish()
        snapshot.append(loss)
    dec.new_input()
    dec.feed(b"".join(fr[s] for s in sorted(MIRRORED)), Arrival(origin="mirror"))
    dec.finish()
    return dec


def _check(facts: RunFacts, ref: DictSink) -> None:
    c = facts.copies
    assert len(c) == len(ref.first) and c.high() == max(ref.first)
    cols = c.columns()
    assert cols.seq.tolist() == sorted(ref.first)
    for seq, (origin, source, mono, wall, late) in ref.first.items():
        got = c.get(seq)
        assert got is not None
        assert (got.origin, got.source, got.mono_ns, got.wall_ns, got.late) == (
            origin, source, mono, wall, late), seq
    assert cols.kind.tolist() == [ref.kinds[s] for s in sorted(ref.kinds)]
    assert c.get(N + 5) is None
    assert (facts.duplicates, facts.mirror_copies, facts.opened) == (
        ref.duplicates, ref.mirror_copies, ref.opened)
    s, t = facts.known_ticks()
    assert list(zip(s.tolist(), t.tolist())) == sorted(ref.ticks.items())
    for stream, rows in ref.rows.items():
        assert sorted(map(tuple, facts.block_rows(stream).tolist())) == sorted(rows)
    assert set(facts.blocks) == set(ref.rows)
    (rate,) = facts.rates.values()
    t_by, v_by = rate.by_tick()
    want = sorted(ref.rate, key=lambda p: p[0])  # a stable sort: equal ticks keep their order
    assert t_by.tolist() == [p[0] for p in want] and v_by.tolist() == [p[1] for p in want]


@pytest.mark.parametrize("bulk", [False, True])
def test_compact_facts_match_a_plain_dict_of_every_frame(bulk: bool) -> None:
    sink, ref = LossSink(), DictSink()
    _decode(sink, bulk)
    _decode(ref, bulk)
    facts = sink.runs[(BOARD, RUN)]
    _check(facts, ref)
    # what the run holds: the mix this test means to cover
    origins = {c.origin for c in map(facts.copies.get, range(N)) if c is not None}
    assert origins == {"radio", "resend", "mirror"}
    assert facts.duplicates == len(DUPLICATED) and facts.mirror_copies == 3
    assert np.count_nonzero(facts.copies.columns().late) > 0
    assert facts.copies.get(4) is None  # lost for good


def test_facts_copied_mid_decoding_go_on_apart() -> None:
    """The Run keeps the facts of the radio alone by copying the sink before the mirror."""
    snapshot: list[Any] = []
    sink, ref = LossSink(), DictSink()
    _decode(sink, False, snapshot)
    ref_before: list[Any] = []
    _decode(ref, False, ref_before)
    _check(snapshot[0].runs[(BOARD, RUN)], ref_before[0])
    _check(sink.runs[(BOARD, RUN)], ref)
    assert len(snapshot[0].runs[(BOARD, RUN)].copies) < len(sink.runs[(BOARD, RUN)].copies)


def test_a_later_copy_of_a_seq_replaces_the_earlier_as_in_a_dict() -> None:
    sink, ref = LossSink(), DictSink()
    run = RunState(BOARD, RUN)
    calls = [(5, "radio", 10), (3, "radio", 20), (5, "stream", 30), (7, "mirror", -1),
             (3, "resend", 40), (9, "other", 50)]
    for seq, origin, t in calls:
        for s in (sink, ref):
            s.frame(run, seq, wire.SAMPLES, "received", 0, origin, Arrival(1, t, t + 1, origin))
    copies = sink.runs[(BOARD, RUN)].copies
    assert len(copies) == len(ref.first)
    for seq, (origin, source, mono, wall, late) in ref.first.items():
        got = copies.get(seq)
        assert got is not None and (got.origin, got.source, got.mono_ns, got.wall_ns, got.late) == (
            origin, source, mono, wall, late)
    sink.frame(run, 11, wire.STATUS, "received", 0, "radio", Arrival(1, 60, 61, "radio"))
    assert copies.high() == 11 and len(copies) == 5  # added after a read: seqs 3, 5, 7, 9, 11


@pytest.mark.parametrize("seed", range(6))
def test_a_rate_stream_sorted_by_tick_keeps_decoding_order_on_ties(seed: int) -> None:
    rng = random.Random(seed)
    period = rng.choice([0, 1000, 1000, 250])
    info = StreamInfo(0, H, 0, period, 0.5, 0.25, "gyro_z", "rad/s")
    r = RateStream(info)
    plain: list[tuple[int, float]] = []
    for _ in range(rng.randrange(1, 40)):
        n = rng.randrange(0, 12)
        t0 = rng.randrange(0, 30) * 1000
        steps = [rng.choice([period, period, period, 0, 2 * period, -period]) for _ in range(n)]
        tick = np.array([t0 + sum(steps[:i]) for i in range(n)], np.int64)
        raw = np.array([rng.randrange(-300, 300) for _ in range(n)], np.int16)
        r.add(info, tick, raw)
        plain += [(t, v * 0.5 + 0.25) for t, v in zip(tick.tolist(), raw.tolist())]
    t, v = r.arrays()
    assert list(zip(t.tolist(), v.tolist())) == plain
    want = sorted(plain, key=lambda p: p[0])
    t, v = r.by_tick()
    assert list(zip(t.tolist(), v.tolist())) == want
