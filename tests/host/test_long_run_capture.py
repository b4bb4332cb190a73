"""The long-run generator of the benchmark (tests/bench/long_run.py), on two
minutes of it: every analysis command reads its capture, and what they find
is what the generator put in (its frames, resends and losses, its clock, its
rig's coil plan and physics). Truth: the generator's own record of what it
wrote and the rig's coefficients (sim/rig.py), never the decoder."""

from __future__ import annotations

import csv
import json
import math
import sys
from pathlib import Path

import pytest

from slipless.cli import main
from slipless.io import capture

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))

from long_run import LongRun, Written, write_long_run  # noqa: E402

# Seed chosen so one capture exercises a disconnection, a resend and a frame lost
# for good; 95 % intervals of d and b then cover their truth (as they should for
# about 19 seeds in 20).
RUN = LongRun(hours=2 / 60, seed=2, lost_p=0.01)


@pytest.fixture(scope="module")
def made(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Written]:
    path = tmp_path_factory.mktemp("long") / "run.slcap"
    return path, write_long_run(path, RUN)


def test_capture_is_whole_and_holds_the_run(made: tuple[Path, Written]) -> None:
    path, w = made
    with path.open("rb") as f:
        reader = capture.CaptureReader(f)
        kinds = [r.type for r in reader]
        stats = reader.stats
    assert stats.records == w.records == len(kinds)
    assert stats.damaged_bytes == stats.truncated_bytes == 0
    assert kinds.count(capture.TX) > 100  # a ping a second, plus the resends
    assert len(w.outages) == 1 and w.resent > 0 and w.lost > 0
    assert w.pulses == 4 * 6 * 2  # four 30 s blocks, six (+, off, -, off) cycles each


def test_decode_writes_every_sample(made: tuple[Path, Written], tmp_path: Path) -> None:
    path, w = made
    assert main(["decode", str(path), "--out", str(tmp_path), "--quiet"]) == 0
    with (tmp_path / "streams.csv").open() as f:
        names = [r["name"] for r in csv.DictReader(f)]
    assert names == ["cap_amp", "coil_current", "gyro_z", "coil_state"]
    with (tmp_path / "samples.csv").open() as f:
        rows = sum(1 for _ in f) - 1
    per_frame = 112  # int16 samples in a full frame (wire.max_samples)
    assert w.samples - w.lost * per_frame <= rows <= w.samples


def test_loss_closes_on_the_generators_fates(made: tuple[Path, Written],
                                             capsys: pytest.CaptureFixture[str]) -> None:
    path, w = made
    assert main(["loss", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["closes"] is True
    assert doc["frames_expected"] == w.frames
    assert doc["frames_recovered_resend"] == w.resent
    assert doc["frames_lost"] == w.lost
    assert doc["frames_received"] == w.frames - w.resent - w.lost
    assert "disconnection" in {g["cause"] for g in doc["gaps"]}


def test_align_finds_the_board_clock(made: tuple[Path, Written], tmp_path: Path) -> None:
    path, _ = made
    assert main(["align", str(path), "--grid", "10ms", "--out", str(tmp_path), "--quiet"]) == 0
    run = json.loads((tmp_path / "clock.json").read_text())["runs"][0]
    clock = RUN.clock()
    # the mapped laptop time of the knots against the simulated clock, inside the stated bound
    for tick, mono_ns in zip(run["knots_tick"], run["knots_mono_ns"]):
        true_ns = float(clock.laptop_ns(tick))
        assert abs(mono_ns - true_ns) <= run["uncertainty_ms"] * 1e6
    assert run["skew_ppm"] == pytest.approx(RUN.skew_ppm, abs=1.0)
    with (tmp_path / "grid.csv").open() as f:
        head = f.readline().strip().split(",")
        rows = sum(1 for _ in f)
    assert head[0] == "laptop_utc_ns" and len(head) == 5
    assert rows == pytest.approx(RUN.seconds * 100, abs=2)


def test_pulses_find_the_rigs_terms(made: tuple[Path, Written], tmp_path: Path) -> None:
    path, w = made
    assert main(["pulses", str(path), "--out", str(tmp_path), "--no-plots", "--quiet"]) == 0
    summary = json.loads((tmp_path / "summary.json").read_text())
    assert summary["pulses"] == w.pulses
    truth = RUN.truth()
    for term in ("d", "b"):  # the induction term and the artifact, each inside its 95 % interval
        lo, hi = summary["fit"][term]["ci"]
        assert lo <= truth[term] <= hi, (term, lo, truth[term], hi)
    assert not math.isclose(truth["d"], 0.0)
