"""--out naming a file or a place where no folder can be made: one line, exit 2,
and for align before any decoding (no traceback, nothing written)."""

from __future__ import annotations

from pathlib import Path

import pytest

from slipless.cli import main

VECTORS = Path(__file__).resolve().parents[2] / "protocol" / "vectors"


@pytest.mark.parametrize("command", [["decode"], ["align", "--grid", "10ms"]])
@pytest.mark.parametrize("where, says", [("file", "exists and is not a folder"),
                                         ("under-file", "cannot make this folder")])
def test_out_that_cannot_be_a_folder(tmp_path: Path, command: list[str], where: str, says: str,
                                     capsys: pytest.CaptureFixture[str]) -> None:
    f = tmp_path / "taken"
    f.write_text("keep me")
    out = f if where == "file" else f / "sub"
    code = main([command[0], str(VECTORS / "02-samples-i16.bin"), *command[1:], "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and says in err and err.count("\n") == 1 and "Traceback" not in err
    assert f.read_text() == "keep me"


def test_bare_command_prints_help(capsys: pytest.CaptureFixture[str]) -> None:
    assert main([]) == 0
    out = capsys.readouterr().out
    assert out.startswith("usage: slipless") and "calibrate" in out and "watch" in out
