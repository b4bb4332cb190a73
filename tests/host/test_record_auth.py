"""`slipless record` against a keyed board over bumble's virtual link: the
board's own firmware (SimHW) refuses the recorder's unsealed START and STOP,
takes sealed ones, and after a reboot past its counter reserve the recorder
jumps past the floor the board names and is taken on the second try. In
simulated time (sim.virtual_time): the same every run, whatever the load."""

from __future__ import annotations

import asyncio
from pathlib import Path

from slipless.io import capture
from slipless.record import keys
from slipless.record.recorder import Recorder, RecordOptions
from slipless.record.transports.bumble_central import BumbleCentral
from slipless.sim import ble_board, virtual_time

KEY = bytes(range(32))
CONFIG = {
    "board_id": 12, "name": "rotor-auth",
    "streams": [{"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 500,
                 "type": "h", "scale": 0.001, "offset": 0.0}],
    "link": {"status_every_ms": 500, "descriptor_every_ms": 2000, "key_hex": KEY.hex()},
}


async def session(tmp: Path, signer: keys.Signer | None, floor: int = 0) -> tuple:
    laptop_dev, board_dev = ble_board.virtual_pair()
    await laptop_dev.power_on()
    await board_dev.power_on()
    vb = ble_board.VirtualBoard(board_dev, CONFIG)
    vb.board.auth.last = vb.board.auth.reserve = floor  # as after a reboot past a reserve
    stop = asyncio.Event()
    writer = capture.CaptureWriter(tmp / "run.slcap", {}, clock=virtual_time.LoopClock(0))
    rec = Recorder(BumbleCentral(laptop_dev, None, scan_s=5), writer,
                   RecordOptions(duration_s=1.5, ping_every_s=0.5, drain_s=0.5, signer=signer))
    task = asyncio.create_task(vb.run(stop, 1000))
    progress = await rec.run()
    stop.set()
    await task
    writer.close()
    vb.close()
    return rec, progress, vb


def test_unsealed_commands_refused(tmp_path: Path) -> None:
    rec, progress, vb = virtual_time.run(session(tmp_path, None))
    assert rec.auth_error == "start: missing"
    assert vb.hw.runs == 1  # the boot run only: START changed nothing
    assert not vb.board.running


def test_sealed_commands_taken_and_counter_jumps_after_reboot(tmp_path: Path) -> None:
    signer = keys.Signer(KEY, tmp_path / "board-12.counter")
    rec, progress, vb = virtual_time.run(session(tmp_path, signer, floor=1000))
    assert rec.auth_error == ""
    assert vb.hw.runs == 2 and not vb.board.running  # started, then stopped by the sealed STOP
    assert vb.board.auth.last > 1000 and signer.counter == vb.board.auth.last
    assert progress.samples > 0
