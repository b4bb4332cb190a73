"""`slipless decode`: tables from a capture, and one clear line for bad input."""

from __future__ import annotations

import csv
import os
import subprocess
import sys
from pathlib import Path

import pytest

from slipless.cli import main
from slipless.decode.tables import read_decoded

VECTORS = Path(__file__).resolve().parents[2] / "protocol" / "vectors"


def run_cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "slipless", *args], capture_output=True,
                          text=True, timeout=120)


def rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="") as f:
        return list(csv.DictReader(f))


def test_decode_writes_tables(tmp_path: Path) -> None:
    assert main(["decode", str(VECTORS / "09-end.bin"), "--out", str(tmp_path), "--quiet"]) == 0
    samples = rows(tmp_path / "samples.csv")
    unit = {r["stream"]: r["unit"] for r in rows(tmp_path / "streams.csv")}  # once per stream
    assert [(r["stream"], r["raw"], unit[r["stream"]]) for r in samples] == [
        ("0", "5", "V"), ("0", "6", "V"), ("1", "7", "A"), ("1", "8", "A")]
    assert "unit" not in samples[0] and "name" not in samples[0]
    assert float(samples[1]["value"]) == pytest.approx(6 * 0.0001)
    assert samples[1]["tick_us"] == "1000" and "board_time_s" not in samples[0]
    secs = read_decoded(tmp_path, "samples", ("board_time_s",))  # tick_us / runs' tick_hz
    assert secs is not None and secs["board_time_s"].tolist() == [0.0, 0.001, 0.0, 0.001]
    runs = rows(tmp_path / "runs.csv")
    assert runs[0]["end_reason"] == "stop_command" and runs[0]["frames_received"] == "4"
    fates = [r["fate"] for r in rows(tmp_path / "frames.csv")]
    assert fates == ["received"] * 4


def test_decode_parquet(tmp_path: Path) -> None:
    pq = pytest.importorskip("pyarrow.parquet")
    assert main(["decode", str(VECTORS / "03-all-types.bin"), "--out", str(tmp_path),
                 "--format", "parquet", "--quiet"]) == 0
    t = pq.read_table(tmp_path / "samples")  # a dataset folder, partitioned by board and run
    assert t.num_rows == 17
    assert set(t.column_names) >= {"board", "run", "stream", "seq", "tick_us", "raw", "value"}


def test_damaged_capture_keeps_good_frames(tmp_path: Path) -> None:
    data = (VECTORS / "16-lost-middle.bin").read_bytes()
    cap = tmp_path / "cap.bin"
    # junk before (ended by a delimiter, as a fresh link would start), cut at the end
    cap.write_bytes(os.urandom(300) + b"\x00" + data + data[:25])
    r = run_cli("decode", str(cap), "--out", str(tmp_path / "t"))
    assert r.returncode == 0, r.stderr
    assert "Traceback" not in r.stderr
    fates = [x["fate"] for x in rows(tmp_path / "t" / "frames.csv")]
    assert fates.count("received") == 3 and "corrupt" in fates


@pytest.mark.parametrize("make,expect", [
    (lambda d: d / "nope.bin", "no such file"),
    (lambda d: d, "is a directory"),
    (lambda d: _write(d / "empty.bin", b""), "file is empty"),
    (lambda d: _write(d / "rand.bin", bytes(range(1, 256)) * 40), "no slipless frames"),
    (lambda d: _write(d / "text.csv", b"a,b,c\n1,2,3\n" * 50), "no slipless frames"),
])
def test_bad_input_one_line(tmp_path: Path, make, expect: str) -> None:
    path = make(tmp_path)
    r = run_cli("decode", str(path), "--out", str(tmp_path / "out"))
    assert r.returncode == 2
    assert expect in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert "Traceback" not in r.stderr


def test_unknown_version_is_named(tmp_path: Path) -> None:
    from slipless.protocol import wire

    enc = wire.Encoder(1, 1)
    off = enc.begin(wire.STATUS)
    enc.body[0] = (3 << 4) | wire.STATUS
    cap = _write(tmp_path / "v3.bin", enc.frame(enc.finish(off + 4)))
    r = run_cli("decode", str(cap), "--out", str(tmp_path / "out"))
    assert r.returncode == 2 and "protocol version 3" in r.stderr


def test_bad_usage_one_line() -> None:
    r = run_cli("decode")
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1
    r = run_cli("frobnicate")
    assert r.returncode == 2 and "Traceback" not in r.stderr


def _write(path: Path, data: bytes) -> Path:
    path.write_bytes(data)
    return path
