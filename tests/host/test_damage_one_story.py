"""Damage told one way everywhere (the rule in decode/deframe.py's docstring):
a stretch of a capture file the reader stepped over is a damaged segment like
one the deframer rejects, with its bytes; frames lost in it are corrupt frames
(SPEC 6) and their gap's cause is `corruption`.

Captures come from slipless.sim.lossy (every frame's fate chosen): simulated
scenarios of our own. The damage is made by hand: bytes of one record flipped."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from slipless.cli import main
from slipless.decode.deframe import FastDeframer
from slipless.io import capture
from slipless.loss.account import analyse
from slipless.loss.collect import collect
from slipless.sim.lossy import Plan, frames, write

PLAN = Plan(30, queue=2, status_every=5)
HIT = 12  # the seq whose capture record is damaged


def _damaged_capture(tmp_path: Path) -> tuple[Path, int]:
    """The plan's capture with the record of frame HIT damaged; -> path, bytes hit."""
    cap, _ = write(PLAN, tmp_path)
    data = bytearray(cap.read_bytes())
    fr = frames(PLAN)
    with cap.open("rb") as f:
        rec = next(r for r in capture.CaptureReader(f) if r.payload == fr[HIT])
    head = capture._REC_HEAD.size  # sync, type, source, length, two clocks (protocol/CAPTURE.md)
    at = rec.offset + head + 2  # inside the payload
    for i in range(at, at + 6):
        data[i] ^= 0x20  # never makes a sync word
    out = tmp_path / "hit.slcap"
    out.write_bytes(bytes(data))
    return out, head + len(fr[HIT]) + 4  # the whole record, its CRC too


def test_the_reader_tells_where_it_skipped(tmp_path: Path) -> None:
    path, size = _damaged_capture(tmp_path)
    told: list[tuple[str, int]] = []
    with path.open("rb") as f:
        reader = capture.CaptureReader(f)
        reader.on_damage = lambda offset, n: told.append(("damage", n))
        for rec in reader:
            told.append(("record", rec.payload == frames(PLAN)[HIT + 1]))
    stretch = told.index(("damage", size))  # the whole record, once
    assert told[stretch + 1] == ("record", True)  # told before the record after it
    assert reader.stats.damaged_stretches == 1 and reader.stats.damaged_bytes == size


def _frames_of(chunks: list[bytes], cut_after: int, block: bool) -> tuple[FastDeframer, list]:
    d = FastDeframer()
    got = []
    for i, c in enumerate(chunks):
        if block:
            b = d.feed_block(c)
            got += ([b.first] if b.first else []) + [(b.body(k), int(b.offsets[k]),
                                                      int(b.damaged[k])) for k in range(len(b))]
        else:
            got += d.feed(c)
        if i == cut_after:
            d.skip_damaged(500)
    d.close()
    return d, got


@pytest.mark.parametrize("block", [False, True])
def test_a_skipped_stretch_is_one_damaged_segment(block: bool) -> None:
    fr = frames(PLAN)
    half = len(fr[3]) // 2
    # frames 0-2, the first half of 3, [500 bytes the reader skipped], the rest of 4's
    # frame (its start was in the stretch), then 5-7
    chunks = [b"".join(fr[:3]) + fr[3][:half], fr[4][7:] + b"".join(fr[5:8])]
    d, got = _frames_of(chunks, 0, block)
    assert len(got) == 6
    assert [g[2] for g in got] == [0, 0, 0, 1, 1, 1]  # frames after it see the damage (SPEC 6 D)
    assert (d.damaged, d.corrupt, d.file_damaged, d.file_damaged_bytes) == (1, 0, 1, 500)
    # the frames the stretch cut: their bytes are damaged bytes, not more segments
    assert d.corrupt_bytes == half + len(fr[4]) - 7
    assert d.skipped == 0


def test_loss_counts_the_stretch_in_the_inputs(tmp_path: Path) -> None:
    path, size = _damaged_capture(tmp_path)
    facts = collect([path])
    from slipless.loss.report import document

    doc = document(analyse(facts), facts, None)
    c = facts.decoder.counters
    assert doc["file_damaged_segments"] == 1 and doc["file_damaged_bytes"] == size
    assert doc["corrupt_segments"] == c.corrupt + c.overlong + 1
    assert doc["corrupt_bytes"] == c.corrupt_bytes + size


def test_frames_lost_in_a_damaged_stretch_are_corruption(tmp_path: Path,
                                                         capsys: pytest.CaptureFixture[str]) -> None:
    path, size = _damaged_capture(tmp_path)
    (acc,) = analyse(collect([path]))
    assert acc.closes, acc.discrepancies
    (gap,) = acc.gaps
    assert (gap.first, gap.last, gap.corrupt, gap.cause) == (HIT, HIT, 1, "corruption")
    assert acc.corrupt == 1 and acc.terms["lost"] == 1
    assert main(["decode", str(path), "--out", str(tmp_path / "tables")]) == 0
    out = capsys.readouterr().out
    assert f"damaged segments 1 ({size:,} B; 1 of them stretches of capture files skipped" in out
    assert f"{size} damaged bytes in 1 stretch(es) skipped" in out  # the note: the same story
    assert main(["loss", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["frames_corrupt"] == 1 and doc["corrupt_segments"] == 1
    assert doc["gaps"][0]["cause"] == "corruption"


def _damaged_btsnoop(tmp_path: Path) -> tuple[Path, int]:
    """The plan's notifications in a btsnoop log (one record each, after the
    link's GATT discovery), the record of frame HIT damaged: its included
    length made impossible (btsnoop record layout: references 7a). -> path,
    the record's bytes (what the reader steps over)."""
    from test_btsnoop import DISCOVERY, H4_HEADER, disconnected, le_connected, notify_rec

    cap, _ = write(PLAN, tmp_path)
    with cap.open("rb") as f:
        values = [r.payload for r in capture.CaptureReader(f) if r.type == capture.RX]
    data = bytearray(H4_HEADER + le_connected(0x0040) + DISCOVERY)
    hit = frames(PLAN)[HIT]
    at = size = 0
    for i, v in enumerate(values):
        rec = notify_rec(0x0010, v, stamp_us=0x00E2E7D727519090 + 1000 * i)
        if v == hit:
            at, size = len(data), len(rec)
        data += rec
    data += disconnected(0x0040)
    assert size
    data[at + 4 : at + 8] = b"\xff\xff\xff\xff"
    out = tmp_path / "hit.log"
    out.write_bytes(bytes(data))
    return out, size


def test_a_damaged_btsnoop_record_is_one_damaged_segment_and_corruption(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """The same story from a btsnoop log: the record the reader stepped over is
    a damaged segment of the input, its frame a corrupt frame, its gap's cause
    `corruption`, and the account closes."""
    path, size = _damaged_btsnoop(tmp_path)
    facts = collect([path])
    (acc,) = analyse(facts)
    assert acc.closes, acc.discrepancies
    (gap,) = acc.gaps
    assert (gap.first, gap.last, gap.corrupt, gap.cause) == (HIT, HIT, 1, "corruption")
    from slipless.loss.report import document

    doc = document([acc], facts, None)
    assert doc["file_damaged_segments"] == 1 and doc["file_damaged_bytes"] == size
    assert main(["decode", str(path), "--out", str(tmp_path / "tables")]) == 0
    out = capsys.readouterr().out
    assert f"damaged segments 1 ({size:,} B; 1 of them stretches of capture files skipped" in out
    assert main(["loss", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["frames_corrupt"] == 1 and doc["gaps"][0]["cause"] == "corruption"
