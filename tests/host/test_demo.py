"""`slipless demo`: deterministic with its seed; its printed numbers are checked."""

from __future__ import annotations

from pathlib import Path

from rich.console import Console

from slipless.cli import build_parser
from slipless.demo import run_demo


def test_demo_numbers(tmp_path: Path) -> None:
    console = Console(record=True, width=400)
    args = build_parser().parse_args(["demo", "--out", str(tmp_path), "--seconds", "30",
                                      "--seed", "1"])
    assert run_demo(args, console) == 0
    text = console.export_text()
    assert "577 frames sent, 565 decoded, 12 lost on the link; 9 reported missing or corrupt, " \
           "3 lost after the last frame received" in text
    assert "every lost frame accounted for" in text
    for name in ("samples", "events", "status", "frames", "streams", "runs", "replies"):
        assert (tmp_path / "tables" / f"{name}.csv").stat().st_size > 0
    assert (tmp_path / "link.bin").stat().st_size == 130_211
