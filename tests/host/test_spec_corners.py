"""The corners protocol/SPEC.md and CAPTURE.md settle, each on a tiny stream built
by hand with wire.Encoder from the spec's layouts, through the real decoder, loss
account and table writer. The expected values come from the spec's rules applied
to what was sent, never from the decoder."""

from __future__ import annotations

import csv
import re
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from collect_sink import CollectSink

from slipless.decode import decoder as decoder_mod
from slipless.decode.decoder import Arrival, Decoder, RunState
from slipless.decode.tables import TableSink
from slipless.errors import InputError
from slipless.io import capture
from slipless.io.inputs import classify
from slipless.loss.account import analyse
from slipless.loss.collect import collect
from slipless.protocol import wire

H = ord("h")
CAP = (0, H, 0, 1000, 0.001, 0.0, "cap_amp", "V")
WRAP = 1 << 32
RADIO = Arrival(0, 1, 1, "radio")


def desc(enc: wire.Encoder, tick: int = 0, streams: Any = (CAP,), n: int | None = None) -> bytes:
    return enc.frame(enc.descriptor(tick, 1_000_000, (1, 0, 0), 5000,
                                    len(streams) if n is None else n, list(streams)))


def samples(enc: wire.Encoder, tick: int, values: list[int], stream: int = 0) -> bytes:
    return enc.frame(enc.samples(stream, tick, H, values))


def status(enc: wire.Encoder, tick: int, dropped: int = 0, queue: int = 2) -> bytes:
    return enc.frame(enc.status(tick, 3900, 2500, 50_000, queue, dropped, 0, 30))


def raw(enc: wire.Encoder, kind: int, payload: bytes) -> bytes:
    off = enc.begin(kind)
    enc.body[off : off + len(payload)] = payload
    return enc.frame(enc.finish(off + len(payload)))


def at(enc: wire.Encoder, seq: int) -> wire.Encoder:
    enc.seq = seq
    return enc


class Sink(CollectSink):
    """CollectSink that also keeps descriptor() calls and each event's tick rate then."""

    def __init__(self) -> None:
        super().__init__()
        self.described: list[list[int]] = []
        self.event_hz: list[int] = []

    def descriptor(self, run: RunState) -> None:
        self.described.append(sorted(run.streams))

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        super().event(run, seq, tick, code, value)
        self.event_hz.append(run.tick_hz)


def decode(*inputs: tuple[bytes, Arrival], chunk: int | None = None) -> tuple[Decoder, Sink]:
    """Each (bytes, arrival) as its own input, fed whole or in chunks of `chunk` bytes."""
    sink = Sink()
    dec = Decoder(sink)
    for data, where in inputs:
        dec.new_input()
        step = chunk or max(1, len(data))
        for i in range(0, len(data), step):
            dec.feed(data[i : i + step], where)
    dec.finish()
    return dec, sink


def ticks(sink: CollectSink) -> dict[int, int]:
    """seq -> tick of the first sample handed over for it."""
    out: dict[int, int] = {}
    for _, _, _, seq, tick, _ in sink.samples_rows:
        out.setdefault(seq, tick)
    return out


# ---- SPEC 5: references, holding, forcing ------------------------------------------
def _run_read_end_first(seconds: int) -> tuple[bytes, bytes, dict[int, int]]:
    """A run of one SAMPLES frame a second (STATUS every 5, DESCRIPTOR every 10): the
    capture holds its last 100 frames, the mirror all of it. -> (capture, mirror, truth)."""
    enc = wire.Encoder(1, 1)
    frames = [desc(enc)]
    truth = {}
    for s in range(seconds):
        t = s * 1_000_000 + 500
        truth[enc.seq] = t
        frames.append(samples(enc, t, [s % 1000]))
        if s % 5 == 4:
            frames.append(status(enc, t + 1000))
        if s % 10 == 9:
            frames.append(desc(enc, t + 2000))
    return b"".join(frames[-100:]), b"".join(frames), truth


@pytest.mark.parametrize("chunk", [None, 244])  # the block path and frame by frame
def test_late_anchors_are_kept_references_so_nothing_is_held_or_guessed(chunk: int | None) -> None:
    """SPEC 5: a late anchor (the mirror's start read after a capture of the run's
    end) is kept; the frames beside it resolve exactly, none forced. The run spans
    over two 2**32 us wraps, so a wrong reference would be off by multiples of it."""
    cap, mirror, truth = _run_read_end_first(3 * 3600)
    dec, sink = decode((cap, RADIO), (mirror, Arrival(origin="mirror")), chunk=chunk)
    run = dec.runs[(1, 1)]
    assert ticks(sink) == truth
    assert (run.ticks_uncertain, run.undecodable, run.held) == (0, 0, [])


def test_kept_references_are_half_the_bound_apart() -> None:
    """SPEC 5: a frame is kept when at least ceil(B/2) seqs from every one kept
    before it (B = 428 for 5 s), in whatever order the frames come: here in order,
    then the run's end first and the rest down to its start, each frame late."""
    enc = wire.Encoder(1, 1)
    body = [desc(enc)] + [samples(enc, 1000 * k, [k]) for k in range(1, 999)]
    body.append(status(enc, 999_000))
    dec, sink = decode((b"".join(body), RADIO))
    assert [s for s, _ in dec.runs[(1, 1)].kept_refs] == [0, 214, 428, 642, 856]
    dec, sink = decode((body[0] + body[999] + b"".join(body[998:0:-1]), RADIO))
    kept = [s for s, _ in dec.runs[(1, 1)].kept_refs]
    assert kept[:2] == [0, 999] or kept[0] == 0
    assert all(b - a >= 214 for a, b in zip(sorted(kept), sorted(kept)[1:]))
    assert ticks(sink) == {k: 1000 * k for k in range(1, 999)}  # none held, none guessed
    assert dec.runs[(1, 1)].ticks_uncertain == 0


def test_a_forced_frame_is_unwrapped_against_the_reference_nearest_it() -> None:
    """SPEC 5: a frame too far from every reference is forced at the end, against the
    nearest (here the DESCRIPTOR at seq 0, not the latest reference at seq 5000),
    and counted ticks_uncertain because it gave samples."""
    enc = wire.Encoder(1, 1)
    data = (desc(enc) + status(at(enc, 5000), 5 * WRAP) + samples(at(enc, 600), 600_000, [1]))
    dec, sink = decode((data, RADIO))
    assert ticks(sink) == {600: 600_000}
    assert dec.runs[(1, 1)].ticks_uncertain == 1


def test_forced_frames_that_give_nothing_are_not_uncertain() -> None:
    """SPEC 4/5: a forced SAMPLES frame of a stream the descriptor does not define is
    undecodable only; an EVENTS frame with no entry gives nothing and is not held."""
    enc = wire.Encoder(1, 1)
    data = (desc(enc) + status(at(enc, 5000), 5 * WRAP) + samples(at(enc, 600), 600_000, [1], 9)
            + raw(at(enc, 601), wire.EVENTS, b""))
    dec, _ = decode((data, RADIO))
    run = dec.runs[(1, 1)]
    assert (run.ticks_uncertain, run.undecodable, dec.counters.malformed) == (0, 1, 0)


def test_events_wait_for_the_descriptor_and_get_its_tick_rate() -> None:
    """SPEC 5: EVENTS are held until a descriptor has come: decoded then, with its
    tick rate (an event before it is never handed over with tick_hz 0)."""
    enc = wire.Encoder(1, 1)
    data = (status(enc, 10_000) + enc.frame(enc.events([(10_500, wire.EV_MARKER, 3)]))
            + desc(enc, 11_000))
    dec, sink = decode((data, RADIO))
    assert sink.events == [(1, 1, 1, 10_500, wire.EV_MARKER, 3)] and sink.event_hz == [1_000_000]


def test_events_of_a_run_never_described_are_exact_near_a_reference(tmp_path: Path) -> None:
    """SPEC 5: without a descriptor the bound is the one for the largest max_gap_ms
    (65 535 ms: 31 frames); such events decode at the end, exactly, and the events
    table gives no board time in seconds (the tick rate is unknown)."""
    enc = wire.Encoder(1, 1)
    data = (status(enc, 10_000) + enc.frame(enc.events([(10_500, wire.EV_LINK, 1)]))
            + at(enc, 31).frame(enc.events([(2_000_000_000, wire.EV_LINK, 0)]))
            + at(enc, 40).frame(enc.events([(2_100_000_000, wire.EV_LINK, 1)])))
    dec, sink = decode((data, RADIO))
    assert [e[3] for e in sink.events] == [10_500, 2_000_000_000, 2_100_000_000]
    assert dec.runs[(1, 1)].ticks_uncertain == 1  # seq 40: past 31 frames, forced (guessed right)
    tables = TableSink(tmp_path / "t")
    dec = Decoder(tables)
    dec.feed(data, RADIO)
    dec.finish()
    tables.close(list(dec.runs.values()), dec.missing, dec.corrupt_guess)
    rows = _rows(tmp_path / "t" / "events.csv")
    assert [r["tick_us"] for r in rows] == ["10500", "2000000000", "2100000000"]
    assert {r["board_time_s"] for r in rows} == {""}


def test_a_tick_past_board_time_is_malformed_never_a_crash() -> None:
    """SPEC 5: an anchor at 2**62 us or later is malformed, on both decoding paths
    (once a tick like 2**63 ended in an OverflowError); the frames after decode."""
    enc = wire.Encoder(1, 1)
    data = desc(enc) + enc.frame(enc.status((1 << 64) - 1, 1, 1, 1, 1, 0, 0, 0))
    data += b"".join(samples(enc, 1000 * k, [k] * 100) for k in range(200))
    for chunk in (None, 20):
        dec, sink = decode((data, RADIO), chunk=chunk)
        assert dec.counters.malformed == 1 and len(ticks(sink)) == 200 and not sink.status_rows
    sync = wire.Encoder(1, 2)
    data = desc(sync, 1 << 61) + sync.frame(sync.sync(1, 2, 1 << 62, 1 << 61))
    data += samples(sync, (1 << 61) + 5, [1])
    dec, sink = decode((data, RADIO))
    assert dec.counters.malformed == 1 and ticks(sink) == {2: (1 << 61) + 5}


def test_a_seq_near_2_to_the_32_opens_a_gap_listed_only_so_far() -> None:
    """SPEC 6: every missing frame is counted; at most MAX_UNSEEN_ROWS a run are
    listed one by one (a CRC-valid frame with seq 2**31 once meant 2**31 rows)."""
    enc = wire.Encoder(1, 1)
    data = desc(enc) + samples(enc, 1000, [1]) + status(at(enc, 1 << 31), 3000)

    class Count(decoder_mod.NullSink):
        rows = 0

        def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int,
                  origin: str, arrival: Arrival) -> None:
            self.rows += 1

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(decoder_mod, "MAX_UNSEEN_ROWS", 1000)
        dec = Decoder(Count())
        dec.feed(data)
        dec.finish()
    run = dec.runs[(1, 1)]
    assert dec.missing(run) == (1 << 31) - 2 and run.unlisted == (1 << 31) - 2 - 1000
    assert isinstance(dec.sink, Count) and dec.sink.rows == 3 + 1000
    assert any("not listed one by one" in n for n in dec.notes)


def test_the_loss_account_leaves_out_a_seq_past_what_it_holds(tmp_path: Path) -> None:
    (tmp_path / "odd.bin").write_bytes(b"".join(_plain_run(10)[:-1])
                                       + status(at(wire.Encoder(1, 1), 1 << 31), 99_000))
    (acc,) = analyse(collect([tmp_path / "odd.bin"]))
    assert acc.expected == 9 and "lie past the 16,777,216 frames" in acc.discrepancies[0]


# ---- SPEC 4: the checks on a SAMPLES body --------------------------------------------
def test_samples_checks_run_in_order_length_stream_whole_samples() -> None:
    wide = (1, ord("q"), 0, 1000, 1.0, 0.0, "wide", "V")  # a type this release does not read
    enc = wire.Encoder(1, 1)
    head = (lambda sid: bytes([sid]) + (1000).to_bytes(4, "little"))
    data = (desc(enc, streams=(CAP, wide)) + raw(enc, wire.SAMPLES, head(9) + b"\x01\x02\x03")
            + raw(enc, wire.SAMPLES, head(1) + b"\x01\x02\x03\x04")
            + raw(enc, wire.SAMPLES, head(0) + b"\x01\x02\x03") + raw(enc, wire.SAMPLES, head(9)))
    dec, _ = decode((data, RADIO))
    assert (dec.counters.malformed, dec.runs[(1, 1)].undecodable) == (2, 2)


def test_a_too_short_samples_body_is_malformed_with_or_without_a_descriptor() -> None:
    """SPEC 4: the length check needs no descriptor, so a short body held for want
    of one is malformed, not undecodable."""
    enc = wire.Encoder(1, 1)
    dec, _ = decode((raw(enc, wire.SAMPLES, b"\x00\x01\x00\x00\x00")
                     + raw(enc, wire.SAMPLES, b"\x00\x01\x00\x00\x00\x07\x00"), RADIO))
    assert (dec.counters.malformed, dec.runs[(1, 1)].undecodable) == (1, 1)


# ---- SPEC 3.1: a split descriptor ------------------------------------------------------
def test_a_split_descriptor_lists_every_part_once(tmp_path: Path) -> None:
    """SPEC 3.1: the run's streams are listed once every part has come: the streams
    table of golden vector 03 (two parts) has all seven streams."""
    data = (Path(__file__).resolve().parents[2] / "protocol" / "vectors"
            / "03-all-types.bin").read_bytes()
    _, sink = decode((data, RADIO))
    assert sink.described == [list(range(7))]
    tables = TableSink(tmp_path / "t")
    dec = Decoder(tables)
    dec.feed(data)
    dec.finish()
    tables.close(list(dec.runs.values()), dec.missing, dec.corrupt_guess)
    assert [r["stream"] for r in _rows(tmp_path / "t" / "streams.csv")] == [str(s) for s in range(7)]


def test_a_descriptor_part_never_completed_is_listed_at_the_end() -> None:
    enc = wire.Encoder(1, 1)
    data = desc(enc, streams=(CAP,), n=2) + samples(enc, 1000, [5])
    _, sink = decode((data, RADIO))
    assert sink.described == [[0]] and len(sink.samples_rows) == 1


# ---- SPEC 3.8: replies after END ----------------------------------------------------
def _plain_run(n: int, board: int = 1, run: int = 1) -> list[bytes]:
    """DESCRIPTOR, SAMPLES of 2 samples each, END: n frames, seqs 0..n-1."""
    enc = wire.Encoder(board, run)
    out = [desc(enc)] + [samples(enc, 2000 * k, [k, k]) for k in range(n - 2)]
    out.append(enc.frame(enc.end(2000 * n, 1, [(0, 2 * (n - 2))])))
    return out


@pytest.mark.parametrize("end_late", [False, True])
def test_replies_after_end_are_not_frames_of_the_run(tmp_path: Path, end_late: bool) -> None:
    """SPEC 3.8: SYNC and ACK at seqs 10 and 12, past END's count of 10, are replies:
    no gap between them, not received, the account closes on 10 frames. Also when
    END itself came late (lost live, resent after the replies)."""
    fr = _plain_run(10)
    enc = at(wire.Encoder(1, 1), 10)
    replies = [enc.frame(enc.sync(1, 5, 30_000, 30_100)), at(enc, 12).frame(enc.ack(2, 6))]
    frames = fr[:-1] + replies + [fr[-1]] if end_late else fr + replies
    (tmp_path / "r.bin").write_bytes(b"".join(frames))
    facts = collect([tmp_path / "r.bin"])
    (acc,) = analyse(facts)
    st = facts.decoder.runs[(1, 1)]
    assert (st.received, facts.decoder.missing(st), st.high_seq) == (10, 0, 9)
    assert acc.expected == 10 and acc.closes, acc.discrepancies
    assert sorted(r[2] for r in decode((b"".join(frames), RADIO))[1].replies) == [9, 10, 12]


def test_a_frame_of_another_kind_past_end_is_named() -> None:
    fr = _plain_run(6)
    stray = samples(at(wire.Encoder(1, 1), 7), 99_000, [1])
    dec, sink = decode((b"".join(fr) + stray, RADIO))
    assert (1, 1, 7, "reply") in sink.frames and len(ticks(sink)) == 5


def test_loss_names_a_frame_of_another_kind_past_end(tmp_path: Path) -> None:
    (tmp_path / "s.bin").write_bytes(b"".join(_plain_run(6))
                                     + samples(at(wire.Encoder(1, 1), 7), 99_000, [1]))
    (acc,) = analyse(collect([tmp_path / "s.bin"]))
    assert acc.expected == 6 and any("not replies came after END" in d for d in acc.discrepancies)


# ---- CAPTURE.md: origins, records, text-mode copies ----------------------------------
def _capture(path: Path, records: list[tuple[int, bytes]]) -> Path:
    """A capture of (type, payload) records, 1 ms apart."""
    w = capture.CaptureWriter(path, {"sources": [{}]}, sync_every_s=1e9)
    w.event(0, "connected", mtu=247)
    for i, (type_, payload) in enumerate(records):
        t = 1_000_000_000 + i * 1_000_000
        w.write(type_, 0, payload, t, t + 10**18)
    w.close()
    return path


@pytest.mark.parametrize("asked", [False, True])
def test_a_frame_out_of_order_is_a_resend_only_when_the_laptop_asked(tmp_path: Path,
                                                                     asked: bool) -> None:
    """CAPTURE.md: frame 4 comes after 5; it is `resend` only after a RESEND for it."""
    fr = _plain_run(8)
    laptop = wire.Encoder(0xFFFF, 1)
    records = [(capture.RX, f) for f in fr[:4]] + [(capture.RX, fr[5])]
    if asked:
        records.append((capture.TX, laptop.frame(laptop.resend(1, 4, 4))))
    records += [(capture.RX, f) for f in (fr[4], fr[6], fr[7])]
    path = _capture(tmp_path / "c.slcap", records)
    facts = collect([path])
    copy = facts.runs[(1, 1)].copies.get(4)
    assert copy is not None and copy.origin == ("resend" if asked else "radio")
    (acc,) = analyse(facts)
    assert acc.terms["recovered_resend"] == int(asked) and acc.out_of_order == int(not asked)


def test_a_frame_over_several_records_takes_the_time_of_the_one_with_its_delimiter(
        tmp_path: Path) -> None:
    fr = _plain_run(4)
    split = fr[1]
    records = [(capture.RX, fr[0]), (capture.RX, split[:7]), (capture.RX, split[7:15]),
               (capture.RX, split[15:] + fr[2]), (capture.RX, fr[3])]
    path = _capture(tmp_path / "c.slcap", records)
    from slipless.io.inputs import feed_all

    sink = CollectSink()
    dec = Decoder(sink)
    feed_all(dec, [classify(path)])
    mono = {seq: m for _, _, seq, kind, _, m, _ in sink.timings if kind == wire.SAMPLES}
    assert mono[1] == 1_000_000_000 + 3 * 1_000_000  # the record of its delimiter (4th)
    assert mono[2] == mono[1]


@pytest.mark.parametrize("mangle,why", [
    (lambda b: b.replace(b"\r\n", b"\n"), "CR LF became LF"),
    (lambda b: b.replace(b"\n", b"\r\n"), "LF became CR LF"),
    (lambda b: b[: b.index(b"\x1a")], "stops at the ^Z"),
])
def test_a_text_mode_copy_of_a_capture_is_refused_in_one_line(tmp_path: Path, mangle: Any,
                                                              why: str) -> None:
    good = _capture(tmp_path / "c.slcap", [(capture.RX, f) for f in _plain_run(5)])
    bad = tmp_path / "copied.slcap"
    bad.write_bytes(mangle(good.read_bytes()))
    with pytest.raises(InputError, match=re.escape(why)):
        classify(bad)
    r = subprocess.run([sys.executable, "-m", "slipless", "decode", str(bad), "--out",
                        str(tmp_path / "out")], capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and why in r.stderr and len(r.stderr.strip().splitlines()) == 1
    assert classify(good).kind == "capture"


# ---- SPEC 6 and the loss account ------------------------------------------------------
def _accounted(tmp_path: Path, data: bytes) -> Any:
    (tmp_path / "run.bin").write_bytes(data)
    facts = collect([tmp_path / "run.bin"])
    (acc,) = analyse(facts)
    return acc, facts


def test_a_board_drop_where_a_damaged_segment_came_is_still_booked(tmp_path: Path) -> None:
    """drops.py / SPEC 6: the board counted frame 6 dropped (queue 2, counted by the
    STATUS at 9); a damaged segment (junk) came in its place. The count is a fact,
    where damage sat a guess: 6 is dropped on the board and the account closes."""
    enc = wire.Encoder(1, 1)
    fr = [desc(enc)] + [samples(enc, 2000 * k, [k, k]) for k in range(8)]  # seqs 0..8
    fr.append(status(enc, 20_000, dropped=1))  # seq 9: counts x <= 9 - 1 - 2
    fr.append(enc.frame(enc.end(22_000, 1, [(0, 16)])))
    data = b"".join(fr[:6]) + b"\x11\x22\x33\x00" + b"".join(fr[7:])
    acc, facts = _accounted(tmp_path, data)
    assert acc.closes, acc.discrepancies
    assert acc.terms["dropped_board"] == 1 and acc.cls[6] == 4
    assert acc.corrupt == facts.decoder.corrupt_guess(facts.decoder.runs[(1, 1)]) == 1


def test_the_corrupt_tally_is_the_frames_tables(tmp_path: Path) -> None:
    """SPEC 6, one rule: frames 5 and 6 came damaged (two damaged segments in the
    gap [5, 6]), 5 was resent. 5 filled the gap, so 6 alone is corrupt: one corrupt
    frame in the loss report, as in the frames table (the two damaged segments
    still name the gap's cause)."""
    fr = _plain_run(10)
    flipped = []
    for seq in (5, 6):
        b = bytearray(fr[seq])
        b[3] ^= 0x10
        flipped.append((capture.RX, bytes(b)))
    laptop = wire.Encoder(0xFFFF, 1)
    records = ([(capture.RX, f) for f in fr[:5]] + flipped + [(capture.RX, f) for f in fr[7:]]
               + [(capture.TX, laptop.frame(laptop.resend(1, 5, 6))), (capture.RX, fr[5])])
    path = _capture(tmp_path / "c.slcap", records)
    facts = collect([path])
    (acc,) = analyse(facts)
    sink = CollectSink()
    from slipless.io.inputs import feed_all

    feed_all(Decoder(sink), [classify(path)])
    fates = {seq: fate for _, _, seq, fate in sink.frames}
    assert fates[6] == "corrupt" and fates[5] == "received"
    assert acc.corrupt == 1 and acc.terms["recovered_resend"] == 1
    (gap,) = acc.gaps
    assert (gap.first, gap.last, gap.corrupt, gap.cause) == (5, 6, 1, "corruption")
    assert "2 damaged segment(s) came in their place" in gap.evidence


def test_a_duplicate_is_an_arrival_for_the_damage_count() -> None:
    """SPEC 6: damage before a duplicate is not charged to the gap the next frame opens."""
    fr = _plain_run(6)
    flipped = bytearray(fr[3])
    flipped[3] ^= 0x10
    dec, sink = decode((b"".join(fr[:3]) + bytes(flipped) + fr[2] + b"".join(fr[4:]), RADIO))
    assert (1, 1, 3, "missing") in sink.frames and dec.runs[(1, 1)].duplicates == 1


def test_loss_closes_with_a_stream_of_a_type_this_release_does_not_read(tmp_path: Path) -> None:
    """SPEC 4 lets a descriptor hold an entry of an unknown type: its frames are
    received (undecodable), its samples left out of the accounting, with a note."""
    wide = (1, ord("q"), 0, 1000, 1.0, 0.0, "wide", "V")
    enc = wire.Encoder(1, 1)
    data = desc(enc, streams=(CAP, wide)) + samples(enc, 0, [1, 2])
    data += raw(enc, wire.SAMPLES, b"\x01" + bytes(4) + bytes(16))  # two 8-byte samples
    data += samples(enc, 2000, [3, 4]) + enc.frame(enc.end(9000, 1, [(0, 4), (1, 2)]))
    acc, _ = _accounted(tmp_path, data)
    assert acc.closes, acc.discrepancies
    assert acc.terms["received"] == 5 and [s.stream for s in acc.streams] == [0]
    assert any("stream 1: a sample type this release does not read" in n for n in acc.notes)


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="") as f:
        return list(csv.DictReader(f))


def test_samples_ticks_are_int64_everywhere() -> None:
    """The block path and frame by frame agree at the edge of the block path's
    reference range (2**61: the frames after it go frame by frame)."""
    enc = wire.Encoder(1, 1)
    base = (1 << 61) - 50_000
    data = desc(enc, base) + b"".join(samples(enc, base + 1000 * k, [k] * 100) for k in range(300))
    got = [decode((data, RADIO), chunk=c)[1] for c in (None, 20)]
    assert ticks(got[0]) == ticks(got[1]) == {k + 1: base + 1000 * k for k in range(300)}
    assert np.int64(max(ticks(got[0]).values())) > 0
