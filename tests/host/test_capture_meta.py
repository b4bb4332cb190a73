"""A run's metadata travels in its capture: label, operator, amplifier and the
rig's prediction (record --label/--operator/--amplifier/--rig); decode writes it
to inputs.json, the report names it, Run.metadata() gives it; a bad --rig fails
before any file is written."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from slipless.cli import main
from slipless.io.capture import RX, CaptureWriter
from slipless.protocol import wire
from slipless.run import open_run

META = {"slipless": "test", "label": "cw 2 rps", "operator": "A. Experimenter",
        "amplifier": "gain 100, 10 pF feedback", "rig": {"results": {"slope_V_per_A_rad_s": 1e-4}},
        "created_wall_ns": 1_700_000_000_000_000_000}


def _capture(path: Path) -> Path:
    enc = wire.Encoder(2, 1)
    w = CaptureWriter(path, META)
    streams = [(0, 0x68, 0, 1000, 0.001, 0.0, "cap_amp", "V")]
    w.write(RX, 0, enc.frame(enc.descriptor(0, 1_000_000, (0, 4, 0), 5000, 1, streams)), 1, 1)
    for k in range(5):
        w.write(RX, 0, enc.frame(enc.samples(0, k * 50_000, 0x68, list(range(50)))), 2 + k, 2 + k)
    w.close()
    return path


def test_metadata_reaches_decode_and_the_run(tmp_path: Path) -> None:
    cap = _capture(tmp_path / "run.slcap")
    assert main(["decode", str(cap), "--out", str(tmp_path / "t"), "--quiet"]) == 0
    doc = json.loads((tmp_path / "t" / "inputs.json").read_text())
    header = doc["inputs"][0]["header"]
    assert doc["inputs"][0]["kind"] == "capture"
    assert {k: header[k] for k in ("label", "operator", "amplifier")} == {
        "label": "cw 2 rps", "operator": "A. Experimenter", "amplifier": "gain 100, 10 pF feedback"}
    assert header["rig"]["results"]["slope_V_per_A_rad_s"] == 1e-4
    assert open_run([cap]).metadata()[0]["header"]["label"] == "cw 2 rps"


def test_the_report_names_them(tmp_path: Path) -> None:
    from slipless.report.page import _recorded

    text = _recorded(_capture(tmp_path / "run.slcap"))
    assert "recorded 2023-11-14 22:13:20 UTC" in text and 'label "cw 2 rps"' in text
    assert 'by "A. Experimenter"' in text and "rig prediction kept" in text


@pytest.mark.parametrize("content, says", [("{", "not valid JSON"), ("[1]", "predict --json")])
def test_a_bad_rig_file_stops_record_before_any_file(tmp_path: Path, content: str, says: str,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    rig = tmp_path / "rig.json"
    rig.write_text(content)
    out = tmp_path / "run.slcap"
    assert main(["record", "--out", str(out), "--insecure", "--rig", str(rig)]) == 2
    assert says in capsys.readouterr().err and not out.exists()
