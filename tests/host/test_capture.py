"""Capture files: write-then-read round trips, cuts at every offset, damage in
the middle, and decoding them with the laptop's receive times."""

from __future__ import annotations

import io
import random
import subprocess
import sys
from pathlib import Path

import pytest

from slipless.cli import decode_files
from slipless.io import capture
from slipless.protocol import wire
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import notifications


def write_capture(path: Path, notes: list[bytes], mtu: int = 244) -> list[bytes]:
    w = capture.CaptureWriter(path, {"device": "sim", "mtu": mtu})
    w.event(0, "connected", mtu=mtu + 3)
    t = 1_000_000_000
    for i, n in enumerate(notes):
        w.write(capture.RX, 0, n, mono_ns=t + i * 7_500_000, wall_ns=1_700_000_000_000_000_000 + i)
        if i == 3:
            enc = wire.Encoder(0xFFFF, 0)
            w.write(capture.TX, 0, enc.frame(enc.command(wire.CMD_STATUS, 1)))
    w.close()
    return notes


def sim_notes(seconds: float = 3, mtu: int = 244) -> list[bytes]:
    frames = [f for _, f in simulate(SimConfig(seconds=seconds))]
    return list(notifications(frames, mtu))


def read_all(data: bytes) -> tuple[list[capture.Record], capture.ReadStats]:
    r = capture.CaptureReader(io.BytesIO(data), chunk=97)  # small chunks: refill paths run
    return list(r), r.stats


def test_round_trip(tmp_path: Path) -> None:
    notes = write_capture(tmp_path / "a.slcap", sim_notes())
    records, stats = read_all((tmp_path / "a.slcap").read_bytes())
    rx = [r.payload for r in records if r.type == capture.RX]
    assert rx == notes
    assert [r.type for r in records].count(capture.TX) == 1
    assert records[0].type == capture.EVENT and stats.damaged_bytes == stats.truncated_bytes == 0


def test_syncing_on_every_record_keeps_every_record(tmp_path: Path) -> None:
    """sync_every_s=0: each write flushes and hands an fsync to the helper
    thread; whatever it is doing when close() comes, the file is whole."""
    w = capture.CaptureWriter(tmp_path / "s.slcap", {}, sync_every_s=0.0)
    for i in range(500):
        w.write(capture.RX, 0, bytes([i % 251]) * 200, i, i)
        assert (tmp_path / "s.slcap").stat().st_size == w.bytes  # flushed to the OS at once
    w.close()
    with (tmp_path / "s.slcap").open("rb") as f:
        got = [r.payload[0] for r in capture.CaptureReader(f)]
    assert got == [i % 251 for i in range(500)]


def test_cut_anywhere_reads_up_to_last_whole_record(tmp_path: Path) -> None:
    write_capture(tmp_path / "a.slcap", sim_notes(1))
    data = (tmp_path / "a.slcap").read_bytes()
    whole, _ = read_all(data)
    ends = sorted(r.offset for r in whole)[1:] + [len(data)]
    for cut in range(len(data) - 1, len(data) - 3000, -7):
        records, stats = read_all(data[:cut])
        assert records == [r for r, e in zip(whole, ends) if e <= cut]
        assert stats.damaged_bytes == 0


def test_damage_in_the_middle_skips_only_the_damage(tmp_path: Path) -> None:
    write_capture(tmp_path / "a.slcap", sim_notes(2))
    data = bytearray((tmp_path / "a.slcap").read_bytes())
    whole, _ = read_all(bytes(data))
    rng = random.Random(3)
    hit = whole[len(whole) // 2]
    for k in range(5):
        data[hit.offset + 20 + k] ^= rng.randrange(1, 256)
    records, stats = read_all(bytes(data))
    assert len(records) == len(whole) - 1 and stats.damaged_stretches == 1
    assert hit.payload not in [r.payload for r in records if r.offset == hit.offset]


def test_decode_capture_matches_stream_and_keeps_times(tmp_path: Path) -> None:
    notes = write_capture(tmp_path / "a.slcap", sim_notes(3, mtu=20), mtu=20)
    (tmp_path / "a.bin").write_bytes(b"".join(notes))
    a = decode_files([tmp_path / "a.slcap"], tmp_path / "ta", "csv", None)
    b = decode_files([tmp_path / "a.bin"], tmp_path / "tb", "csv", None)
    rows = [sorted((tmp_path / t / "samples.csv").read_text().splitlines()) for t in ("ta", "tb")]
    assert rows[0] == rows[1] and len(rows[0]) > 5000
    assert a.counters.commands == 1 and b.counters.commands == 0
    frames = (tmp_path / "ta" / "frames.csv").read_text().splitlines()
    assert frames[0].endswith("origin,source,offset_B,rx_wall_ns,rx_wall_utc")
    assert all(",radio,0," in line for line in frames[1:])
    timing = (tmp_path / "ta" / "timing.csv").read_text().splitlines()
    assert len(timing) > 50 and ",-1" not in timing[1]


@pytest.mark.parametrize("data,expect", [
    (capture.MAGIC + b"\x02\x00\x00\x00\x00\x00\x00\x00", "capture format version 2"),
    (capture.MAGIC + b"\x01\x00\x05\x00\x00\x00\x00\x00abc", "capture header is damaged"),
])
def test_bad_capture_header_is_one_line(tmp_path: Path, data: bytes, expect: str) -> None:
    (tmp_path / "x.slcap").write_bytes(data)
    r = subprocess.run([sys.executable, "-m", "slipless", "decode", str(tmp_path / "x.slcap"),
                        "--out", str(tmp_path / "o")], capture_output=True, text=True)
    assert r.returncode == 2 and expect in r.stderr and len(r.stderr.splitlines()) == 1
