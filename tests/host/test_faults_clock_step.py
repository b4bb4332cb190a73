"""Faults in a whole run: the laptop's wall clock steps (+2 s, then -1 s) in
the middle of a capture while its monotonic clock runs on. Capture records
carry both clocks; the board's times come from its own ticks and `slipless
align` fits on monotonic time, so neither may move. Truth: the simulation's
own board clock and the capture's creation anchor (slipless.sim.clock_capture,
slipless.sim.clocks), never the decoder."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest

from slipless.cli import main
from slipless.io import capture
from slipless.sim.clock_capture import SimBoard, SimCapture, write_clock_capture
from slipless.sim.clocks import ClockSim

STEPS = ((0.35, 2_000_000_000), (0.7, -1_000_000_000))  # (fraction of records, wall step ns)


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="") as f:
        return list(csv.DictReader(f))


def _step_wall_clock(src: Path, dst: Path) -> int:
    """Copy a capture, stepping the wall time of the later records; returns how
    many records carry a stepped wall time."""
    f, reader = capture.open_capture(src)
    with f:
        meta = reader.meta
        recs = list(reader)
    w = capture.CaptureWriter(dst, meta)
    stepped = 0
    for i, r in enumerate(recs):
        step = sum(ns for frac, ns in STEPS if i >= frac * len(recs))
        stepped += step != 0
        w.write(r.type, r.source, r.payload, r.mono_ns, r.wall_ns + step)
    w.close()
    return stepped


@pytest.fixture(scope="module")
def sim(tmp_path_factory: pytest.TempPathFactory) -> SimCapture:
    path = tmp_path_factory.mktemp("step") / "plain.slcap"
    return write_clock_capture(path, [
        SimBoard(1, ClockSim(seconds=60, skew_ppm=55.0, offset_s=500.0, seed=11)),
    ], seed=4)


def test_wall_clock_steps_move_no_board_time(sim: SimCapture, tmp_path: Path) -> None:
    stepped = tmp_path / "stepped.slcap"
    assert _step_wall_clock(sim.path, stepped) > 100
    outs = {}
    for name, path in (("plain", sim.path), ("stepped", stepped)):
        out = tmp_path / f"dec-{name}"
        assert main(["decode", str(path), "--out", str(out), "--quiet"]) == 0
        outs[name] = out
    # the decoded board times are the same to the microsecond
    for table in ("samples", "events", "status"):
        keep = ("board", "run", "seq", "tick_us", *(("board_time_s",) if table != "samples" else ()))
        a = [tuple(r[k] for k in keep) for r in _rows(outs["plain"] / f"{table}.csv")]
        b = [tuple(r[k] for k in keep) for r in _rows(outs["stepped"] / f"{table}.csv")]
        assert a == b and a, table
    # and the receive times record the step as it happened (monotonic untouched)
    ta, tb = _rows(outs["plain"] / "timing.csv"), _rows(outs["stepped"] / "timing.csv")
    assert [r["rx_mono_ns"] for r in ta] == [r["rx_mono_ns"] for r in tb]
    jumps = {int(y["rx_wall_ns"]) - int(x["rx_wall_ns"]) for x, y in zip(ta, tb, strict=True)}
    assert jumps == {0, 2_000_000_000, 1_000_000_000}


def test_align_still_fits_within_its_stated_bound(sim: SimCapture, tmp_path: Path) -> None:
    stepped = tmp_path / "stepped.slcap"
    _step_wall_clock(sim.path, stepped)
    results = {}
    for name, path in (("plain", sim.path), ("stepped", stepped)):
        out = tmp_path / f"al-{name}"
        assert main(["align", str(path), "--grid", "100ms", "--out", str(out), "--quiet"]) == 0
        (model,) = json.loads((out / "clock.json").read_text())["runs"]
        samples = _rows(out / "samples.csv")
        ticks = np.array([int(r["tick_us"]) for r in samples])
        utc = np.array([int(r["laptop_utc_ns"]) for r in samples])
        results[name] = (model, ticks, utc)
    (board,) = sim.boards
    for model, ticks, utc in results.values():
        # UTC comes from the anchor taken when the capture was created (before any step)
        assert model["utc_minus_mono_ns"] == sim.anchor_ns
        # the mapping error against the simulation's true clock stays in the stated bound
        err_ms = np.abs(utc - sim.utc_ns(board, ticks)) / 1e6
        assert err_ms.max() <= model["uncertainty_ms"]
    (ma, ta, ua), (mb, tb, ub) = results["plain"], results["stepped"]
    assert np.array_equal(ta, tb) and np.array_equal(ua, ub)
    assert ma["uncertainty_ms"] == mb["uncertainty_ms"]
