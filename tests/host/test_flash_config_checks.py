"""Configs the board would take (its defaults fill every gap) but a rig must not
get by accident: no board_id, no streams, a scale of 0, a JSON slip (with its
line), and a mirror too small for the run (a warning from the data budget)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from slipless.cli import main

EXAMPLE = Path(__file__).resolve().parents[2] / "firmware" / "config.example.json"


def _config(tmp_path: Path, text: str | None = None, **change) -> Path:  # type: ignore[no-untyped-def]
    cfg = json.loads(EXAMPLE.read_text())
    for key, value in change.items():
        if value is None:
            cfg.pop(key, None)
        else:
            cfg[key] = value
    path = tmp_path / "rig.json"
    path.write_text(text if text is not None else json.dumps(cfg, indent=1))
    return path


def _scale_zero() -> list[dict]:
    streams = json.loads(EXAMPLE.read_text())["streams"]
    streams[0]["scale"] = 0
    return streams


@pytest.mark.parametrize("change, says", [
    ({"board_id": None}, "config.board_id: missing"),
    ({"streams": []}, "config.streams: none"),
    ({"streams": "scale0"}, "config.streams[0].scale: must not be 0"),
])
def test_refused_with_the_field(tmp_path: Path, capsys: pytest.CaptureFixture[str], change: dict,
                                says: str) -> None:
    if change.get("streams") == "scale0":
        change = {"streams": _scale_zero()}
    assert main(["flash", "--config", str(_config(tmp_path, **change)), "--dry-run"]) == 2
    err = capsys.readouterr().err
    assert says in err and err.count("\n") == 1


def test_json_error_names_its_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    text = json.dumps(json.loads(EXAMPLE.read_text()), indent=1).replace('"name"', '"name" "x"', 1)
    path = _config(tmp_path, text=text)
    line = next(i for i, s in enumerate(text.splitlines(), 1) if '"name" "x"' in s)
    assert main(["flash", "--config", str(path), "--dry-run"]) == 2
    err = capsys.readouterr().err
    assert f"line {line} column" in err and err.count("\n") == 1


def test_a_mirror_too_small_for_the_run_is_said(tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    cfg = json.loads(EXAMPLE.read_text())
    cfg["mirror"].update(enabled=True, max_bytes=4096)
    path = _config(tmp_path, mirror=cfg["mirror"])
    assert main(["flash", "--config", str(path), "--dry-run"]) == 0
    assert "the mirror reaches max_bytes after" in capsys.readouterr().out
