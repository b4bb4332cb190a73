"""`slipless align` end to end on simulated captures, and bad input.

Truth comes from slipless.sim.clock_capture: two boards with their own skew
and offset sample the same signals (functions of true time); after alignment
their columns must agree, and every row's laptop time must lie within the
uncertainty the command states.
"""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from slipless.cli import main
from slipless.sim.clock_capture import SimBoard, SimCapture, signal_sig, write_clock_capture
from slipless.sim.clocks import ClockSim

VECTORS = Path(__file__).resolve().parents[2] / "protocol" / "vectors"


def rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="") as f:
        return list(csv.DictReader(f))


@pytest.fixture(scope="module")
def two_boards(tmp_path_factory: pytest.TempPathFactory) -> SimCapture:
    path = tmp_path_factory.mktemp("cap") / "two.slcap"
    return write_clock_capture(path, [
        SimBoard(1, ClockSim(seconds=120, skew_ppm=40.0, offset_s=1000.0, seed=3)),
        SimBoard(2, ClockSim(seconds=120, skew_ppm=-35.0, offset_s=1003.7, start_tick=9_000_000,
                             seed=5), lost_s=(30.0, 32.0)),
    ], seed=8)


@pytest.fixture(scope="module")
def aligned(two_boards: SimCapture, tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("aligned")
    assert main(["align", str(two_boards.path), "--grid", "10ms", "--out", str(out), "--quiet"]) == 0
    return out


def test_every_sample_gets_laptop_time_within_the_stated_uncertainty(
        two_boards: SimCapture, aligned: Path) -> None:
    model = {r["board"]: r for r in json.loads((aligned / "clock.json").read_text())["runs"]}
    samples = rows(aligned / "samples.csv")
    for b in two_boards.boards:
        mine = [r for r in samples if int(r["board"]) == b.board]
        ticks = np.array([int(r["tick_us"]) for r in mine])
        utc = np.array([int(r["laptop_utc_ns"]) for r in mine])
        err_ms = np.abs(utc - two_boards.utc_ns(b, ticks)) / 1e6
        assert err_ms.max() <= model[b.board]["uncertainty_ms"]
        assert model[b.board]["basis"] == "two-way + one-way"
    for table in ("events", "status"):
        got = rows(aligned / f"{table}.csv")
        assert got and all(r["laptop_utc_ns"] for r in got)
    events = rows(aligned / "events.csv")  # marker events sent at each level change
    for b in two_boards.boards:
        mine = [r for r in events if int(r["board"]) == b.board]
        ticks = np.array([int(r["tick_us"]) for r in mine])
        utc = np.array([int(r["laptop_utc_ns"]) for r in mine])
        assert np.abs(utc - two_boards.utc_ns(b, ticks)).max() / 1e6 <= model[b.board]["uncertainty_ms"]


def test_two_boards_land_on_one_timeline(aligned: Path) -> None:
    grid = rows(aligned / "grid.csv")
    assert list(grid[0]) == ["laptop_utc_ns", "b1.level", "b1.sig[V]", "b2.level", "b2.sig[V]"]
    both = [r for r in grid if r["b1.sig[V]"] and r["b2.sig[V]"]]
    assert len(both) > 10_000
    a = np.array([float(r["b1.sig[V]"]) for r in both])
    b = np.array([float(r["b2.sig[V]"]) for r in both])
    # sig = sin(2 pi 0.2 t): 1.26 V/s at most, so 3 mV allows ~2 ms of misalignment;
    # without alignment the boards are 3.7 s apart.
    assert np.abs(a - b).max() < 3e-3
    t = np.array([int(r["laptop_utc_ns"]) for r in both])
    truth = signal_sig((t - 1_700_000_000_000_000_000) / 1e9)
    assert np.abs(a - truth).max() < 3e-3


def test_grid_leaves_lost_samples_empty_and_holds_state(aligned: Path) -> None:
    grid = rows(aligned / "grid.csv")
    b2 = [r for r in grid if r["b2.level"]]
    t0 = int(b2[0]["laptop_utc_ns"])
    inside = [r for r in b2 if 30.5e9 < int(r["laptop_utc_ns"]) - t0 < 31.5e9]
    assert inside and all(r["b2.sig[V]"] == "" for r in inside)  # frames lost: a gap
    assert {r["b2.level"] for r in b2} == {"0.0", "1.0"}  # held values, never interpolated


def test_json_prints_the_model(two_boards: SimCapture, tmp_path: Path,
                               capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["align", str(two_boards.path), "--grid", "1s", "--out", str(tmp_path),
                 "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    skews = {r["board"]: r["skew_ppm"] for r in doc["runs"]}
    # Two minutes only: a few ppm is all the receive times can tell (0.4 ms over the run).
    assert skews[1] == pytest.approx(40.0, abs=10) and skews[2] == pytest.approx(-35.0, abs=10)
    assert doc["grid"]["columns"] == ["b1.level", "b1.sig[V]", "b2.level", "b2.sig[V]"]


def test_parquet_tables(two_boards: SimCapture, tmp_path: Path) -> None:
    pq = pytest.importorskip("pyarrow.parquet")
    assert main(["align", str(two_boards.path), "--grid", "100ms", "--out", str(tmp_path),
                 "--format", "parquet", "--quiet"]) == 0
    grid = pq.read_table(tmp_path / "grid.parquet")
    assert grid.column_names[0] == "laptop_utc_ns"
    assert grid.column("b2.sig[V]").null_count > 0  # the lost stretch
    assert pq.read_table(tmp_path / "samples.parquet").column("laptop_utc_ns").null_count == 0


def test_raw_stream_of_one_run_uses_the_board_clock(tmp_path: Path,
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["align", str(VECTORS / "09-end.bin"), "--grid", "1ms", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "no laptop time can be given" in out
    assert list(rows(tmp_path / "grid.csv")[0])[0] == "board_time_ns"
    assert all(r["laptop_utc_ns"] == "" for r in rows(tmp_path / "samples.csv"))


def run_cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "slipless", *args], capture_output=True,
                          text=True, timeout=120)


@pytest.mark.parametrize("args,says", [
    (["missing.slcap", "--grid", "1ms"], "no such file"),
    (["{cap}", "--grid", "5 parsecs"], "is not a period"),
    (["{cap}", "--grid", "0ms"], "is not a period"),
    (["{cap}", "--grid", "1ns"], "choose a coarser grid"),
    (["{two_runs}", "--grid", "1ms"], "laptop time cannot be given"),
])
def test_bad_input_is_one_line_and_exit_2(args: list[str], says: str, two_boards: SimCapture,
                                          tmp_path: Path) -> None:
    two_runs = tmp_path / "two_runs.bin"
    two_runs.write_bytes((VECTORS / "09-end.bin").read_bytes() + (VECTORS / "03-all-types.bin").read_bytes())
    argv = [a.format(cap=two_boards.path, two_runs=two_runs) for a in args]
    r = run_cli("align", *argv, "--out", str(tmp_path / "out"))
    assert r.returncode == 2, r.stderr
    assert says in r.stderr and len(r.stderr.strip().splitlines()) == 1
    assert "Traceback" not in r.stderr
