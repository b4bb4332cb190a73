"""End to end over a real BLE stack: the board's own firmware (board.py and
link.py on the simulated hardware layer, with MicroPython's `bluetooth` API
provided by a bumble Device) talks over bumble's virtual link to `slipless
record` using the bumble back end. Real GATT/ATT, MTU exchange and
notifications carry the data; the link is cut mid-run. Both run in simulated
time (sim.virtual_time): the same every run, whatever the machine's load."""

from __future__ import annotations

import asyncio
import json
from pathlib import Path
from typing import Any

from slipless.cli import decode_files
from slipless.io import capture
from slipless.record.recorder import Recorder, RecordOptions
from slipless.record.transports.bumble_central import BumbleCentral
from slipless.sim import ble_board, virtual_time

CONFIG = {
    "board_id": 11, "name": "rotor-e2e",
    "streams": [
        {"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 1000,
         "type": "h", "scale": 0.001, "offset": 0.0},
        {"id": 1, "name": "coil_current", "unit": "A", "source": "adc1", "rate_hz": 1000,
         "type": "h", "scale": 0.001, "offset": 0.0}],
    "link": {"status_every_ms": 500, "descriptor_every_ms": 2000, "ring_frames": 40,
             "queue_frames": 8},
}
SIM_STEP_US = 1000  # simulated time per board loop turn: the board runs faster than real time


make_devices = ble_board.virtual_pair


async def session(tmp: Path, cut_after_s: float, outage_s: float, watch: Any = None) -> dict:
    laptop_dev, board_dev = make_devices()
    await laptop_dev.power_on()
    await board_dev.power_on()
    produced: list[bytes] = []  # every frame the board built: its truth, and its "mirror"
    vb = ble_board.VirtualBoard(board_dev, CONFIG,
                                on_frame=lambda slot, n: produced.append(bytes(slot[:n])))
    stop = asyncio.Event()

    writer = capture.CaptureWriter(tmp / "run.slcap", {"backend": "bumble", "sources": [{}]},
                                   clock=virtual_time.LoopClock(0))
    central = BumbleCentral(laptop_dev, None, scan_s=5)
    states: list[str] = []

    def on_progress(p: Any) -> None:  # as `record --watch` tells the live view of the link
        states.append(p.state)
        if watch is not None:
            watch.link(p.state == "live", p.state, writer.clock.mono_ns(), p.link_error)
            watch.update(writer.clock.mono_ns())

    rec = Recorder(central, writer, RecordOptions(duration_s=4.0, ping_every_s=0.5,
                                                  backoff_s=(outage_s,), drain_s=2.0),
                   on_progress, watch=watch)

    async def cut() -> None:
        await asyncio.sleep(cut_after_s)
        for conn in list(board_dev.connections.values()):
            await conn.disconnect()
        # While the link is down the board goes on sampling: 3 s of board time at
        # once, so the outage outlasts the ring by a known margin.
        for _ in range(3000):
            vb.step(SIM_STEP_US)

    board_task = asyncio.create_task(vb.run(stop, SIM_STEP_US))
    cut_task = asyncio.create_task(cut())
    progress = await rec.run()
    stop.set()
    await board_task
    cut_task.cancel()
    writer.close()
    vb.close()
    (tmp / "mirror.bin").write_bytes(b"".join(produced))
    return {"progress": progress, "produced": produced, "refused": vb.bt.BLE().refused,
            "commands": rec.commands_sent, "states": states}


def test_record_with_cut_link_then_merge_mirror(tmp_path: Path) -> None:
    out = virtual_time.run(session(tmp_path, cut_after_s=1.2, outage_s=0.6))
    prog = out["progress"]
    assert prog.reconnects == 1 and prog.state == "done"
    # The board's own truth: every frame it built, by (run, seq).
    truth = decode_files([tmp_path / "mirror.bin"], tmp_path / "truth", "csv", None)
    radio = decode_files([tmp_path / "run.slcap"], tmp_path / "radio", "csv", None)
    merged = decode_files([tmp_path / "run.slcap"], tmp_path / "merged", "csv", None,
                          mirrors=[tmp_path / "mirror.bin"])
    main = max(truth.runs.values(), key=lambda r: r.received)  # the recorded run
    key = (main.board, main.run)
    got = radio.runs[key]
    lost = radio.missing(got)
    # What the radio missed is exactly what the board reported it no longer held.
    reported = sum(b - a + 1 for a, b in prog.lost_ranges)
    assert lost == reported, (lost, prog.lost_ranges)
    assert got.received + lost == main.received  # nothing else is missing
    assert lost > 0  # the outage outlasted the ring: some frames really were lost
    frames = (tmp_path / "radio" / "frames.csv").read_text()
    assert ",resend," in frames  # gaps were filled by resends after the reconnection
    # Radio + mirror: every frame the board produced.
    m = merged.runs[key]
    assert merged.missing(m) == 0 and m.received == main.received
    assert ",mirror," in (tmp_path / "merged" / "frames.csv").read_text()
    # Real GATT/ATT carried it: notifications at the negotiated MTU, commands written.
    meta_events = [json.loads(r.payload) for r in capture.CaptureReader(
        (tmp_path / "run.slcap").open("rb")) if r.type == capture.EVENT]
    assert [e["mtu"] for e in meta_events if e["event"] == "connected"] == [247, 247]
    assert out["commands"] >= 5


async def pull_session(tmp: Path) -> None:
    laptop_dev, board_dev = make_devices()
    await laptop_dev.power_on()
    await board_dev.power_on()
    assert Path.cwd() == tmp  # board paths are short (64 bytes at most): the mirror is relative
    vb = ble_board.VirtualBoard(board_dev, dict(CONFIG, mirror={
        "enabled": True, "path": "board.mirror", "max_bytes": 1 << 20, "flush_every_ms": 100}))
    stop = asyncio.Event()
    task = asyncio.create_task(vb.run(stop, SIM_STEP_US))
    clock = virtual_time.LoopClock(0)
    w1 = capture.CaptureWriter(tmp / "run.slcap", {}, clock=clock)
    await Recorder(BumbleCentral(laptop_dev, None), w1,
                   RecordOptions(duration_s=1.5, ping_every_s=0.5)).run()
    w1.close()
    await asyncio.sleep(0.2)
    from slipless.cli.record import pull_into

    w2 = capture.CaptureWriter(tmp / "pull.slcap", {}, clock=clock)
    await pull_into(Recorder(BumbleCentral(laptop_dev, None), w2, RecordOptions(pull=True)),
                    w2, tmp / "pulled.mirror")
    stop.set()
    await task
    vb.close()


def test_pull_mirror_over_the_link(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    virtual_time.run(pull_session(tmp_path))
    board_copy = decode_files([tmp_path / "board.mirror"], tmp_path / "a", "csv", None)
    pulled = decode_files([tmp_path / "pulled.mirror"], tmp_path / "b", "csv", None)
    for key, run in board_copy.runs.items():
        if run.samples:  # the recorded run: every frame of it up to END came over the link
            got = pulled.runs[key]
            assert got.end is not None and got.end["frames"] == run.end["frames"]
            assert got.samples == run.samples and pulled.missing(got) == 0
            # (replies sent after the pull began, like its own ACK, are not in the copy)
    assert pulled.counters.corrupt == 0


def test_live_view_rides_along_a_recording(tmp_path: Path) -> None:
    """`record --watch`: the live view is a second sink of the recorder's own
    decoder; it counts what the recorder counts and raises link_down at the cut."""
    from slipless.live.state import LiveState

    state = LiveState()
    out = virtual_time.run(session(tmp_path, cut_after_s=1.2, outage_s=0.6, watch=state))
    prog = out["progress"]
    snap = state.snapshot(state.last_arrival_ns)
    assert snap["totals"]["frames"] == prog.frames and snap["totals"]["samples"] == prog.samples
    assert "waiting" in out["states"]
    history = {a["id"] for a in snap["alarms"]}
    assert "link_down" in history  # raised at the cut, cleared on reconnecting
    assert {s["name"] for s in snap["streams"]} == {"cap_amp", "coil_current"}
    assert snap["clock"]["t_s"]  # pings answered: the clock offset is drawn
