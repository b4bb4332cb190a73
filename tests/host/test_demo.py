"""`slipless demo`: deterministic with its seed; its printed numbers are checked
against the simulation's own truth."""

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
    assert ("1224 frames sent, 1208 decoded, 16 lost on the link; 16 reported missing or corrupt: "
            "every lost frame accounted for") in text
    # the induction term and the artifact each land inside their interval
    assert re.search(r"d \(field x rotation \(induction\)\): .* inside the 95% interval", text)
    assert re.search(r"b \(field only \(artifact\)\): .* inside the 95% interval", text)
    for name in ("samples", "events", "status", "frames", "streams", "runs", "replies"):
        assert (tmp_path / "tables" / f"{name}.csv").stat().st_size > 0
    for name in ("fit.csv", "conditions.csv", "conditions.png", "summary.json"):
        assert (tmp_path / "pulses" / name).stat().st_size > 0
