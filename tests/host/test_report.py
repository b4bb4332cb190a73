"""`slipless report`: the page's sections, embedded images, no outside addresses,
and bad input as one line and exit 2."""

from __future__ import annotations

import base64
import re
from pathlib import Path

import pytest

from slipless.cli import main
from slipless.report.page import collect, write
from slipless.run import open_run
from slipless.sim.scenario import ScenarioConfig, build

SECTIONS = ("summary", "completeness", "clock", "traces", "conditions", "noise", "safety")


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("report")
    sc = build(folder, ScenarioConfig(seed=2, seconds=60))
    return write(collect(open_run([sc.capture], [sc.mirror])), folder / "report.html")


def test_sections_and_images(report: Path) -> None:
    page = report.read_text()
    for sid in SECTIONS:
        assert f'<section id="{sid}">' in page
    imgs = re.findall(r'<img alt="[^"]*" src="data:image/png;base64,([^"]*)"', page)
    assert len(imgs) == page.count("<img") >= 4
    for data in imgs:  # the PNG file signature: RFC 2083, section 3.1
        assert base64.b64decode(data).startswith(b"\x89PNG\r\n\x1a\n")
    assert "http://" not in page and "https://" not in page and "<script" not in page
    assert "the account closes" in page
    assert "flyback" in page and "lost link" in page
    assert re.search(r"run\.slcap: recorded \d{4}-\d\d-\d\d \d\d:\d\d:\d\d UTC", page)
    assert "Noise and sensitivity" in page and "IEEE Std 952" in page


def test_cli_writes_page(tmp_path: Path) -> None:
    sc = build(tmp_path, ScenarioConfig(seed=2, seconds=60))
    out = tmp_path / "r.html"
    assert main(["report", str(sc.capture), "--mirror", str(sc.mirror), "--out", str(out)]) == 0
    assert out.read_text().startswith("<!DOCTYPE html>")


@pytest.mark.parametrize("case", ["missing input", "not .html", "no such folder"])
def test_bad_input(tmp_path: Path, capsys: pytest.CaptureFixture[str], case: str) -> None:
    cap = tmp_path / "c.slcap"
    cap.write_bytes(b"")
    argv = {"missing input": [str(tmp_path / "missing.slcap"), "--out", str(tmp_path / "r.html")],
            "not .html": [str(cap), "--out", str(tmp_path / "r.txt")],
            "no such folder": [str(cap), "--out", str(tmp_path / "no" / "such" / "r.html")]}[case]
    assert main(["report", *argv]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("slipless: error:")
    assert not (tmp_path / "r.html").exists()
