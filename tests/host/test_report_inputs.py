"""`slipless report` given a folder written by `slipless decode --out`: its
inputs.json leads back to the inputs (relative to the folder, or as
recorded), each checked by SHA-256 (FIPS 180-4, Python's hashlib) when the
file records one; a missing or changed input is one line and exit 2. Also:
the report takes the stream-naming options of `slipless pulses`.

The inputs are raw frame streams built with the protocol's own encoder and
decoded by the real decoder."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from pathlib import Path

import pytest

from slipless.cli import main
from slipless.protocol import wire


def _stream(path: Path) -> Path:
    enc = wire.Encoder(2, 1)
    streams = [(0, ord("h"), 0, 1000, 1.0, 0.0, "cap_amp", "V")]
    frames = [enc.frame(enc.descriptor(0, 1_000_000, (1, 0, 0), 5000, 1, streams)),
              enc.frame(enc.samples(0, 0, ord("h"), list(range(40)))),
              enc.frame(enc.status(1_000_000, 3900, 2500, 90_000, 3, 0, 0, 10)),
              enc.frame(enc.end(2_000_000, 0, [(0, 40)]))]
    path.write_bytes(b"".join(frames))
    return path


def _decoded(tmp: Path, sha: bool = True) -> Path:
    """A decode folder beside its input, inputs.json naming it relative to the folder."""
    src = _stream(tmp / "run.bin")
    out = tmp / "dec"
    out.mkdir()
    assert main(["decode", str(src), "--out", str(out), "--quiet"]) == 0
    doc = json.loads((out / "inputs.json").read_text())
    for e in doc["inputs"]:
        e["path"] = os.path.relpath(e["path"], out)
        # decode records each input's SHA-256 (FIPS 180-4, Python's hashlib)
        assert e["sha256"] == hashlib.sha256(src.read_bytes()).hexdigest()
        if not sha:  # as a folder written before decode recorded it
            del e["sha256"]
    (out / "inputs.json").write_text(json.dumps(doc))
    return out


def _one_line(capsys: pytest.CaptureFixture[str]) -> str:
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("slipless: error:"), err
    return err


def test_folder_leads_to_its_checked_input(tmp_path: Path) -> None:
    out = tmp_path / "r.html"
    assert main(["report", str(_decoded(tmp_path)), "--out", str(out)]) == 0
    page = out.read_text()
    assert "run.bin" in page and "not checked against a SHA-256" not in page


def test_folder_moved_with_its_input(tmp_path: Path) -> None:
    _decoded(tmp_path)
    moved = tmp_path / "elsewhere"
    moved.mkdir()
    shutil.move(tmp_path / "dec", moved / "dec")
    shutil.move(tmp_path / "run.bin", moved / "run.bin")
    out = tmp_path / "r.html"
    assert main(["report", str(moved / "dec"), "--out", str(out)]) == 0


def test_changed_input_is_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    folder = _decoded(tmp_path)
    with (tmp_path / "run.bin").open("ab") as f:
        f.write(b"\x00")
    assert main(["report", str(folder), "--out", str(tmp_path / "r.html")]) == 2
    assert "has changed since it was decoded" in _one_line(capsys)
    assert not (tmp_path / "r.html").exists()


def test_missing_input_is_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    folder = _decoded(tmp_path)
    (tmp_path / "run.bin").unlink()
    assert main(["report", str(folder), "--out", str(tmp_path / "r.html")]) == 2
    assert "run.bin is missing" in _one_line(capsys)


def test_no_sha_recorded_is_said_on_the_page(tmp_path: Path) -> None:
    out = tmp_path / "r.html"
    assert main(["report", str(_decoded(tmp_path, sha=False)), "--out", str(out)]) == 0
    assert "not checked against a SHA-256" in out.read_text()


@pytest.mark.parametrize("case", ["no inputs.json", "not json", "no inputs", "empty list"])
def test_bad_folder(tmp_path: Path, capsys: pytest.CaptureFixture[str], case: str) -> None:
    folder = tmp_path / "dec"
    folder.mkdir()
    text = {"no inputs.json": None, "not json": "{", "no inputs": '{"x": 1}',
            "empty list": '{"inputs": []}'}[case]
    if text is not None:
        (folder / "inputs.json").write_text(text)
    assert main(["report", str(folder), "--out", str(tmp_path / "r.html")]) == 2
    _one_line(capsys)


def test_stream_options_are_those_of_pulses(tmp_path: Path,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    def options(cmd: str) -> set[str]:
        with pytest.raises(SystemExit):
            main([cmd, "--help"])
        text = capsys.readouterr().out
        return {o for o in ("--signal", "--current", "--rotation", "--rotation-rate") if o in text}

    assert options("report") == options("pulses") == {"--signal", "--current", "--rotation",
                                                      "--rotation-rate"}
    out = tmp_path / "r.html"
    src = _stream(tmp_path / "run.bin")
    assert main(["report", str(src), "--out", str(out), "--current", "amps_here"]) == 0
    assert "amps_here" in out.read_text()  # the pulse section names the stream it looked for
