"""The board-control pieces that the bumble end-to-end tests cannot reach: the
bleak scanning path and the answer matching of control.BoardLink.

Doubles, and why: bleak needs a Bluetooth adapter and BlueZ, neither of which
this machine has, so `scan_bleak` and `slipless board find/status --backend
bleak` get a stand-in bleak module (a mock of BleakScanner: it returns what
BleakScanner.discover(return_adv=True) returns, as bleak's documentation
describes it). BoardLink's matching rules get a scripted Central (a mock) that
answers with frames built by wire.Encoder, so stale and out-of-order replies
can be placed exactly."""

from __future__ import annotations

import asyncio
import struct
from collections.abc import Callable
from types import SimpleNamespace
from typing import Any

import pytest

from slipless import cli
from slipless.protocol import wire
from slipless.record import control
from slipless.record.transports import LinkError, scan


# ---- bleak (stand-in module) ----------------------------------------------------------
class FakeScanner:
    """Mock of bleak.BleakScanner: discover() as bleak 3 documents it with return_adv=True,
    a dict address -> (BLEDevice, AdvertisementData)."""

    calls: list[dict[str, Any]] = []
    seen: dict[str, Any] = {}
    fail: Exception | None = None

    @classmethod
    async def discover(cls, timeout: float = 5.0, **kw: Any) -> Any:
        cls.calls.append(dict(kw, timeout=timeout))
        if cls.fail is not None:
            raise cls.fail
        return cls.seen

    @classmethod
    async def find_device_by_filter(cls, f: Callable[..., bool], timeout: float = 10.0,
                                    **kw: Any) -> Any:
        return None  # nobody in range


def adv(uuids: list[str], local_name: str | None, rssi: int) -> Any:
    return SimpleNamespace(service_uuids=uuids, local_name=local_name, rssi=rssi)


@pytest.fixture
def fake_bleak(monkeypatch: pytest.MonkeyPatch) -> type[FakeScanner]:
    FakeScanner.calls = []
    FakeScanner.fail = None
    FakeScanner.seen = {
        "AA:00:00:00:00:01": (SimpleNamespace(name="rotor-a"), adv([wire.SERVICE_UUID.upper()],
                                                                   None, -71)),
        "AA:00:00:00:00:02": (SimpleNamespace(name=None), adv([wire.SERVICE_UUID], "rotor-b",
                                                              -40)),
        "AA:00:00:00:00:03": (SimpleNamespace(name="a kettle"), adv(["0000180f-0000-1000-8000-"
                                                                     "00805f9b34fb"], None, -30)),
        "AA:00:00:00:00:04": (SimpleNamespace(name=""), adv([wire.SERVICE_UUID], None, 127)),
    }
    monkeypatch.setitem(__import__("sys").modules, "bleak",
                        SimpleNamespace(BleakScanner=FakeScanner, BleakClient=None))
    return FakeScanner


def test_scan_bleak_filters_and_orders(fake_bleak) -> None:
    found = asyncio.run(scan.scan_bleak(3.0))
    assert fake_bleak.calls == [{"return_adv": True, "service_uuids": [wire.SERVICE_UUID],
                                 "timeout": 3.0}]
    assert found == [scan.Sighting("rotor-b", "AA:00:00:00:00:02", -40),
                     scan.Sighting("rotor-a", "AA:00:00:00:00:01", -71),
                     scan.Sighting("", "AA:00:00:00:00:04", None)]  # 127: not available


def test_scan_bleak_without_an_adapter(fake_bleak) -> None:
    fake_bleak.fail = OSError("No Bluetooth adapters found.")
    with pytest.raises(LinkError, match="Bluetooth is not available to bleak here"):
        asyncio.run(scan.scan_bleak(1.0))


def test_cli_on_bleak(fake_bleak, capsys) -> None:
    assert cli.main(["board", "find", "--seconds", "1"]) == 0  # bleak is the default back end
    out = capsys.readouterr().out.splitlines()
    assert out[0].split() == ["rotor-b", "AA:00:00:00:00:02", "-40", "dBm"]
    assert out[2].split() == ["(no", "name)", "AA:00:00:00:00:04", "RSSI", "not", "reported"]
    fake_bleak.fail = OSError("No Bluetooth adapters found.")
    assert cli.main(["board", "find"]) == 2
    assert "Bluetooth is not available to bleak" in capsys.readouterr().err
    assert cli.main(["board", "status", "--insecure", "--timeout", "1"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("slipless: error: no board advertising the slipless service found")
    assert len(err.splitlines()) == 1


# ---- BoardLink's answer matching (scripted Central) --------------------------------------
class ScriptedCentral:
    """Mock Central: answers each command with frames the test scripts."""

    def __init__(self, script: Callable[[int, int, wire.Encoder], list[bytes]]) -> None:
        self.script = script
        self.address = "scripted"
        self.mtu = 247
        self.enc = wire.Encoder(7, 3, seq=10)
        self.on_data: Callable[[bytes], None] = lambda b: None
        self.on_disconnect: Callable[[str], None] = lambda w: None

    async def connect(self, on_data: Callable[[bytes], None],
                      on_disconnect: Callable[[str], None]) -> None:
        self.on_data, self.on_disconnect = on_data, on_disconnect

    async def write(self, data: bytes) -> None:
        (body,) = wire.Deframer().feed(data)
        opcode, request = struct.unpack_from(wire.COMMAND_FIXED, body, wire.HEADER_SIZE)
        frames = self.script(opcode, request, self.enc)
        loop = asyncio.get_running_loop()
        loop.call_soon(self.on_data, b"".join(frames))

    async def disconnect(self) -> None:
        pass


def status_frame(enc: wire.Encoder, battery_mv: int) -> bytes:
    return enc.frame(enc.status(5_000_000, battery_mv, 2000, 1000, 1, 0, 0, 0))


def test_status_answer_pairs_the_status_sent_just_before_its_ack() -> None:
    def script(opcode: int, request: int, enc: wire.Encoder) -> list[bytes]:
        return [enc.frame(enc.ack(request, wire.CMD_STOP)),  # same request, another opcode
                enc.frame(enc.ack((request + 1) & 0xFFFF, wire.CMD_STATUS)),  # not ours
                status_frame(enc, 3000),  # a periodic one
                status_frame(enc, 3700),  # the board's answer: right before the ACK
                enc.frame(enc.ack(request, wire.CMD_STATUS))]

    async def go() -> control.Answer:
        async with control.connected(ScriptedCentral(script), timeout_s=1) as link:
            return await link.ask(wire.CMD_STATUS)

    a = asyncio.run(go())
    assert a.kind == wire.ACK and a.seq == 14 and a.status is not None  # seqs 10..14
    assert a.status["battery_mv"] == 3700


def test_no_answer_and_a_dropped_link() -> None:
    silent = ScriptedCentral(lambda opcode, request, enc: [])

    async def unanswered() -> None:
        async with control.connected(silent, timeout_s=0.05) as link:
            await link.ask(wire.CMD_INFO)

    with pytest.raises(control.BoardError, match="did not answer info within 0.05 s"):
        asyncio.run(unanswered())

    async def dropped() -> None:
        central = ScriptedCentral(lambda opcode, request, enc: [])
        async with control.connected(central, timeout_s=5) as link:
            asyncio.get_running_loop().call_later(0.01, central.on_disconnect, "reason 8")
            await link.ask(wire.CMD_PING, struct.pack(wire.PING_ARGS, 1))

    with pytest.raises(control.BoardError, match=r"dropped \(reason 8\) before it answered ping"):
        asyncio.run(dropped())


def test_old_counter_is_sent_once_more_above_the_floor() -> None:
    from slipless.record import keys

    seen: list[int] = []

    def script(opcode: int, request: int, enc: wire.Encoder) -> list[bytes]:
        seen.append(opcode)
        if len(seen) == 1:  # the board rebooted past its reserve: floor 640
            return [enc.frame(enc.error(request, wire.CMD_STOP, wire.ERR_AUTH, 640, 3))]
        return [enc.frame(enc.ack(request, wire.CMD_STOP))]

    signer = keys.Signer(bytes(32))

    async def go() -> control.Answer:
        async with control.connected(ScriptedCentral(script), timeout_s=1) as link:
            return await link.ask(wire.CMD_STOP, signer=signer)

    assert asyncio.run(go()).kind == wire.ACK
    assert seen == [wire.CMD_STOP | wire.AUTH_FLAG] * 2 and signer.counter == 641
