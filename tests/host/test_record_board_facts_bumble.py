"""`slipless record` asks the board who it is before START (INFO, FIRMWARE) and keeps
the answer in the capture (CAPTURE.md, `board` events): the board's own firmware
on the simulated hardware, over bumble's virtual link, in simulated time. The code
files the simulated board hashes are those `slipless flash` builds (mpy-cross), so
the firmware hash is checked against the laptop's own; a board that does not
answer is noted in one line and recorded all the same."""

from __future__ import annotations

import asyncio
import json
from pathlib import Path
from typing import Any

import pytest
from test_record_bumble import CONFIG, SIM_STEP_US

import slipless
from slipless.board.files import firmware_dir
from slipless.board.flash import build_plan, firmware_hash, resolve_config
from slipless.io import capture
from slipless.protocol import wire
from slipless.record.control import config_sha, flashed_config_bytes
from slipless.record.recorder import Recorder, RecordOptions
from slipless.record.transports.bumble_central import BumbleCentral
from slipless.sim import ble_board, virtual_time


@pytest.fixture(scope="module")
def flashed(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """A board folder laid out as `slipless flash` writes it (compiled for the
    esp32 profile), and the hashes the laptop expects of it."""
    root = tmp_path_factory.mktemp("board")
    fw = firmware_dir()
    config, profile = resolve_config(fw, None, "esp32-devkitc")
    plan = build_plan(fw, config, profile, tmp_path_factory.mktemp("build"))
    for it in plan:
        dest = root / it.dest.lstrip("/")
        dest.parent.mkdir(parents=True, exist_ok=True)
        dest.write_bytes(it.data)
    return {"root": root, "plan": plan, "fw": firmware_hash(plan)}


async def _session(tmp: Path, root: Path | None, notes: list[str],
                   patch: Any = None) -> Recorder:
    laptop_dev, board_dev = ble_board.virtual_pair()
    await laptop_dev.power_on()
    await board_dev.power_on()
    ble_board.firmware_on_path()
    from simhw import SimHW

    hw = SimHW()
    if root is not None:
        hw.code_root = str(root)
        hw.config_path = str(root / "config.json")
    vb = ble_board.VirtualBoard(board_dev, CONFIG, hw=hw)
    if patch is not None:
        patch()
    stop = asyncio.Event()
    writer = capture.CaptureWriter(tmp / "run.slcap", {"backend": "bumble", "sources": [{}]},
                                   clock=virtual_time.LoopClock(0))
    rec = Recorder(BumbleCentral(laptop_dev, None, scan_s=5), writer,
                   RecordOptions(duration_s=1.0, ping_every_s=0.5, drain_s=1.0,
                                 ask_board=True, on_note=notes.append))
    task = asyncio.create_task(vb.run(stop, SIM_STEP_US))
    await rec.run()
    stop.set()
    await task
    writer.close()
    vb.close()
    return rec


def _events(path: Path) -> list[dict[str, Any]]:
    with path.open("rb") as f:
        return [json.loads(r.payload) for r in capture.CaptureReader(f)
                if r.type == capture.EVENT]


def test_the_capture_keeps_what_the_board_said(tmp_path: Path, flashed: dict[str, Any]) -> None:
    notes: list[str] = []
    root = flashed["root"]
    # the config file the board hashes: as flash writes it, from the board's own validator
    ble_board.firmware_on_path()
    import config as fw_config

    cfg = fw_config.validate(json.loads(json.dumps(CONFIG)))
    (root / "config.json").write_bytes(flashed_config_bytes(cfg))
    rec = virtual_time.run(_session(tmp_path, root, notes))
    assert notes == [] and rec.state == "done"
    files, size, sha = flashed["fw"]
    assert files == sum(1 for it in flashed["plan"] if wire.is_code_path(it.dest)) and files > 10
    (event,) = [e for e in _events(tmp_path / "run.slcap") if e["event"] == "board"]
    import board as fw_board

    assert event["fw"] == ".".join(map(str, fw_board.FW))
    assert event["name"] == "rotor-e2e" and event["profile"] == cfg["profile"]
    assert event["board"] == 11 and event["config_sha"] == config_sha(flashed_config_bytes(cfg))
    assert (event["fw_sha"], event["fw_files"], event["fw_bytes"]) == (sha, files, size)
    assert event["fw_note"] == ""
    # the run was recorded as ever, and Run.metadata() gives the board's facts
    run = slipless.open([tmp_path / "run.slcap"])
    assert any(r.samples for r in run.runs.values())
    (meta,) = run.metadata()
    (facts,) = meta["boards"]
    assert facts["fw_sha"] == sha and facts["config_sha"] == event["config_sha"]
    assert facts["source"] == 0 and meta["prediction"] is None


def test_older_firmware_and_a_silent_board_are_noted(tmp_path: Path,
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    ble_board.firmware_on_path()
    import commands

    def older(board: Any, request: int) -> None:  # a board from before the firmware command
        board.framer.error_now(request, wire.CMD_FIRMWARE, wire.ERR_BAD_COMMAND)

    notes: list[str] = []
    rec = virtual_time.run(_session(tmp_path, None, notes,
                                    lambda: monkeypatch.setattr(commands, "firmware", older)))
    (event,) = rec.boards
    assert event["fw_sha"] is None and "older" in event["fw_note"]
    assert len(notes) == 1 and "no firmware hash" in notes[0]

    monkeypatch.setattr(commands, "info", lambda board, request: None)  # INFO unanswered
    notes.clear()
    (tmp_path / "run.slcap").unlink()
    rec = virtual_time.run(_session(tmp_path, None, notes))
    assert rec.boards == [] and len(notes) == 1 and "did not answer INFO" in notes[0]
    run = slipless.open([tmp_path / "run.slcap"])
    assert any(r.samples for r in run.runs.values())  # recorded all the same
    assert run.metadata()[0]["boards"] == []
    assert any(e["event"] == "note" for e in _events(tmp_path / "run.slcap"))
