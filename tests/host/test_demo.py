"""`slipless demo`: deterministic with its seed; its printed numbers are checked
against the simulation's own truth (sim/scenario.py)."""

from __future__ import annotations

import re
from pathlib import Path

from rich.console import Console

from slipless.cli import build_parser
from slipless.demo import run_demo


def test_demo_numbers(tmp_path: Path) -> None:
    console = Console(record=True, width=400)
    args = build_parser().parse_args(["demo", "--out", str(tmp_path), "--seconds", "60",
                                      "--seed", "1"])
    assert run_demo(args, console) == 0
    text = console.export_text()
    assert ("simulated: 1,280 frames built; 14 dropped by the board's queue; 78 lost at the dead "
            "angle (200-236 deg) or at random; link down 37.2-40.2 s (59 frames, 48 resent after "
            "reconnecting); 56 pings") in text
    assert ("loss (radio only): 1,280 expected = 1,129 received + 48 resent + 0 from the mirror + "
            "89 lost + 14 dropped on the board: closes") in text
    assert "against the simulation: lost 89, dropped 14, resent 48: every term matches" in text
    assert "gap causes found: board_overflow, disconnection, unknown" in text
    assert ("loss (with the mirror): 1,280 expected = 1,129 received + 48 resent + 103 from the "
            "mirror + 0 lost + 0 dropped on the board: closes") in text
    m = re.search(r"worst angle \(integrated gyro\) (\d+) deg \(dead sector 200-236\)", text)
    assert m and 180 <= int(m.group(1)) <= 270  # the gyro's integrated angle drifts a little
    assert re.search(r"clock: skew \+\d+\.\d\d ppm \(simulated \+23\.00\); .* inside the bound", text)
    assert "pulses: 12 found, 12 used" in text
    # the induction term and the artifact each land inside their interval
    assert re.search(r"d \(field x rotation \(induction\)\): .* inside the 95% interval", text)
    assert re.search(r"b \(field only \(artifact\)\): .* inside the 95% interval", text)
    for name in ("samples", "events", "status", "frames", "streams", "runs", "replies"):
        assert (tmp_path / "tables" / f"{name}.csv").stat().st_size > 0
    for name in ("fit.csv", "conditions.csv", "conditions.png", "summary.json"):
        assert (tmp_path / "pulses" / name).stat().st_size > 0
    for name in ("loss.json", "loss.png", "loss-radio.json", "aligned/clock.json", "report.html"):
        assert (tmp_path / name).stat().st_size > 0


def test_demo_is_deterministic(tmp_path: Path) -> None:
    from slipless.sim.scenario import ScenarioConfig, build

    a = build(tmp_path, ScenarioConfig(seed=3, seconds=60)).capture.read_bytes()
    (tmp_path / "b").mkdir()
    b = build(tmp_path / "b", ScenarioConfig(seed=3, seconds=60)).capture.read_bytes()
    assert a == b
