"""`record --prediction FILE` (alias --rig): the `slipless predict --json` document,
strict JSON (RFC 8259 has no NaN or Infinity), kept in the capture's header;
refused in one line, before any file is written, when it is not."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from slipless import cli
from slipless.cli.record import read_rig

DOC = {"inputs": {"inner_m": 0.01}, "results": {"slope_V_per_A_rad_s": 1e-4}, "notes": []}


@pytest.mark.parametrize("bad, says", [
    ('{"results": {"d": NaN}}', "not strict JSON: NaN"),
    ('{"results": {"d": -Infinity}}', "not strict JSON: -Infinity"),
    ("{", "not valid JSON"), ('{"inputs": {}}', "predict --json")])
def test_a_file_that_is_not_strict_json_is_refused(tmp_path: Path, bad: str, says: str,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    pred = tmp_path / "pred.json"
    pred.write_text(bad)
    out = tmp_path / "run.slcap"
    assert cli.main(["record", "--out", str(out), "--insecure", "--prediction", str(pred)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and says in err and "Traceback" not in err
    assert not out.exists()


def test_the_document_is_read_whole(tmp_path: Path) -> None:
    pred = tmp_path / "pred.json"
    pred.write_text(json.dumps(DOC, indent=2))
    assert read_rig(pred) == DOC


def test_run_metadata_gives_the_prediction_and_the_boards(tmp_path: Path) -> None:
    """A capture laid out as `record` writes one: connected, INFO and FIRMWARE sent, the
    board's facts, START. A `board` event after START is not one of record's."""
    from slipless.io.capture import EVENT, RX, TX, CaptureWriter
    from slipless.protocol import wire
    from slipless.run import open_run

    laptop = wire.Encoder(0xFFFF, 0)
    enc = wire.Encoder(2, 1)
    w = CaptureWriter(tmp_path / "run.slcap", {"slipless": "test", "rig": DOC})
    w.event(0, "connected", mtu=247)
    w.write(TX, 0, laptop.frame(laptop.command(wire.CMD_INFO, 1)), 1, 1)
    w.write(TX, 0, laptop.frame(laptop.command(wire.CMD_FIRMWARE, 2)), 1, 1)
    facts = {"board": 2, "run": 1, "fw": "0.3.0", "name": "rotor-a", "fw_sha": "ab" * 8}
    w.write(EVENT, 0, json.dumps({"event": "board", **facts}).encode(), 2, 2)
    w.write(TX, 0, laptop.frame(laptop.start(3, 0, "")), 3, 3)
    streams = [(0, 0x68, 0, 1000, 0.001, 0.0, "cap_amp", "V")]
    w.write(RX, 0, enc.frame(enc.descriptor(0, 1_000_000, (0, 3, 0), 5000, 1, streams)), 4, 4)
    w.write(RX, 0, enc.frame(enc.samples(0, 1000, 0x68, list(range(50)))), 5, 5)
    w.write(EVENT, 0, json.dumps({"event": "board", "board": 9}).encode(), 6, 6)
    w.close()
    (meta,) = open_run([tmp_path / "run.slcap"]).metadata()
    assert meta["prediction"] == DOC and meta["header"]["rig"] == DOC
    assert meta["boards"] == [dict(facts, source=0)]
