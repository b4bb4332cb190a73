"""align of a board's mirror alone: no laptop times, so the grid is on the
board's own clock, and the idle boot run (no samples) does not count as a
second run that would need a shared laptop clock."""

from __future__ import annotations

import csv
from pathlib import Path

from slipless.cli import main
from slipless.sim.scenario import ScenarioConfig, build


def test_mirror_alone_aligns_on_the_board_clock(tmp_path: Path) -> None:
    sc = build(tmp_path, ScenarioConfig(seed=5, seconds=60))
    assert main(["align", str(sc.mirror), "--grid", "10ms", "--out", str(tmp_path / "a"),
                 "--quiet"]) == 0
    with (tmp_path / "a" / "grid.csv").open() as f:
        rows = list(csv.reader(f))
    assert rows[0][0] == "board_time_ns" and len(rows) > 5000
    ticks = [int(r[0]) for r in rows[1:]]
    assert all(b - a == 10_000_000 for a, b in zip(ticks, ticks[1:]))
