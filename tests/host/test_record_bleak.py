"""The bleak back end, as far as it can be tested without a radio: a stand-in
for the bleak package (a mock, since no Bluetooth adapter exists here) checks
how our adapter drives bleak's API and that the recorder runs on top of it.
Untested here: bleak's own behaviour against a real adapter and stack."""

from __future__ import annotations

import asyncio
from pathlib import Path
from types import SimpleNamespace

from slipless import capture
from slipless.cli import decode_files
from slipless.protocol import wire
from slipless.record import Recorder, RecordOptions
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import notifications
from slipless.transports.bleak_central import BleakCentral


def fake_bleak(frames: list[bytes], calls: list) -> SimpleNamespace:
    device = SimpleNamespace(address="AA:BB:CC:DD:EE:FF", name="rotor-b")

    class Scanner:
        @staticmethod
        async def find_device_by_filter(fn, timeout):
            adv = SimpleNamespace(service_uuids=[wire.SERVICE_UUID.upper()])
            calls.append(("filter", fn(device, adv)))
            return device

        @staticmethod
        async def find_device_by_name(name, timeout):
            calls.append(("name", name))
            return device if name == "rotor-b" else None

    class Client:
        def __init__(self, dev, disconnected_callback):
            self.mtu_size = 247
            self.gone = disconnected_callback

        async def connect(self):
            calls.append(("connect",))

        async def start_notify(self, uuid, cb):
            calls.append(("notify", uuid))

            async def feed():
                for n in notifications(frames, self.mtu_size - 3):
                    cb(None, bytearray(n))
                    await asyncio.sleep(0.001)
            asyncio.get_running_loop().create_task(feed())

        async def write_gatt_char(self, uuid, data, response):
            calls.append(("write", uuid, bytes(data), response))

        async def disconnect(self):
            calls.append(("disconnect",))

    return SimpleNamespace(BleakScanner=Scanner, BleakClient=Client)


def test_recorder_on_bleak_adapter(tmp_path: Path) -> None:
    frames = [f for _, f in simulate(SimConfig(seconds=2))]
    calls: list = []
    central = BleakCentral(None, bleak=fake_bleak(frames, calls))
    writer = capture.CaptureWriter(tmp_path / "b.slcap", {"backend": "bleak"})
    rec = Recorder(central, writer, RecordOptions(duration_s=1.0, ping_every_s=0.2))
    prog = asyncio.run(rec.run())
    writer.close()
    assert ("filter", True) in calls and ("notify", wire.DATA_UUID) in calls
    writes = [c for c in calls if c[0] == "write"]
    assert all(c[1] == wire.COMMAND_UUID and c[3] is False for c in writes)
    opcodes = [wire.cobs_decode(c[2][:-1])[wire.HEADER_SIZE] for c in writes]
    assert opcodes[0] == wire.CMD_START and opcodes[-1] == wire.CMD_STOP
    assert wire.CMD_PING in opcodes and ("disconnect",) in calls
    dec = decode_files([tmp_path / "b.slcap"], tmp_path / "t", "csv", None)
    assert prog.frames == len(frames) and dec.counters.commands == len(writes)
    run = next(iter(dec.runs.values()))
    assert run.samples == 2 * 2000 and dec.missing(run) == 0


def test_bleak_board_not_found_is_one_line() -> None:
    calls: list = []
    central = BleakCentral("nobody", bleak=fake_bleak([], calls), scan_s=0.1)

    async def go():
        try:
            await central.connect(lambda d: None, lambda w: None)
        except Exception as exc:  # LinkError
            return str(exc)
    assert asyncio.run(go()) == "no board 'nobody' found in 0 s"
