"""Our bleak adapter on the platforms that cannot run here (macOS, Windows).

bleak's own front end runs (BleakScanner.find_device_by_filter, BleakClient with
its characteristic lookup and notification wrapping, bleak's GATT objects); the
platform back end under it is a stand-in (a mock: CoreBluetooth and WinRT exist
only on their own systems), which records what bleak hands the platform and plays
the board's frames as notifications. It checks what the adapter asks of each
platform: the scan filtered by our service UUID, a CoreBluetooth UUID taken as an
address, Windows told not to use its cached services, the MTU from `mtu_size`
(right on macOS and Windows; BlueZ is tested through its D-Bus API in
test_record_bluez.py), writes cut to `max_write_without_response_size`.
Untested here: CoreBluetooth and WinRT themselves, and a real adapter and stack.
"""

from __future__ import annotations

import asyncio
import functools
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import bleak
import pytest
from bleak.backends.characteristic import BleakGATTCharacteristic
from bleak.backends.client import BaseBleakClient
from bleak.backends.scanner import AdvertisementData, BaseBleakScanner
from bleak.backends.service import BleakGATTService, BleakGATTServiceCollection

from slipless.cli import decode_files
from slipless.io import capture
from slipless.protocol import wire
from slipless.record.recorder import Recorder, RecordOptions
from slipless.record.transports import LINK_INFO_KEYS, BoardNotFound, WrongGatt, address_kind
from slipless.record.transports.bleak_central import BleakCentral
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import notifications

MAC_ID = "5B1E9F0C-3D2A-4E6B-9C8D-7A6F5E4D3C2B"  # how CoreBluetooth names a peripheral
MTU = 185  # an MTU CoreBluetooth commonly settles on with such boards (from memory)
WRITE_SIZE = MTU - 3


class Platform:
    """What the stand-in platform saw, and what it plays."""

    def __init__(self, frames: list[bytes], address: str = MAC_ID, gatt: bool = True) -> None:
        self.frames = frames
        self.address = address
        self.gatt = gatt
        self.scans: list[Any] = []
        self.clients: list[dict[str, Any]] = []
        self.calls: list[tuple[Any, ...]] = []

    def module(self) -> SimpleNamespace:
        """A stand-in for `import bleak`: bleak's own classes, our platform under them."""
        platform = self

        class ScannerBackend(BaseBleakScanner):
            def __init__(self, detection_callback: Any, service_uuids: Any, scanning_mode: Any,
                         **kw: Any) -> None:
                super().__init__(detection_callback, service_uuids)
                platform.scans.append(service_uuids)

            async def start(self) -> None:
                self._task = asyncio.get_running_loop().create_task(self._advertise())

            async def _advertise(self) -> None:  # two devices, every 50 ms, as the OS reports them
                uuids = [wire.SERVICE_UUID]
                adv = AdvertisementData("rotor-mac", {}, {}, uuids, None, -60, ())
                other = AdvertisementData("kettle", {}, {}, [], None, -40, ())
                while True:
                    for key, address, ad in (("k", "0A0B0C0D-0000-4000-8000-000000000000", other),
                                             ("b", platform.address, adv)):
                        if self.is_allowed_uuid(ad.service_uuids):
                            self.call_detection_callbacks(self.create_or_update_device(
                                key, address, ad.local_name, None, ad), ad)
                    await asyncio.sleep(0.05)

            async def stop(self) -> None:
                self._task.cancel()

        class ClientBackend(FakeClient):
            def __init__(self, dev: Any, **kw: Any) -> None:
                super().__init__(dev, platform, **kw)

        class Scanner(bleak.BleakScanner):
            def __init__(self, *a: Any, **kw: Any) -> None:
                super().__init__(*a, backend=ScannerBackend, **kw)

        return SimpleNamespace(BleakScanner=Scanner,
                               BleakClient=functools.partial(bleak.BleakClient, backend=ClientBackend))


class FakeClient(BaseBleakClient):
    def __init__(self, dev: Any, platform: Platform, **kw: Any) -> None:
        super().__init__(dev, disconnected_callback=kw.pop("disconnected_callback"),
                         timeout=kw.pop("timeout"))
        platform.clients.append(kw)  # what bleak hands the platform: services, bluez, winrt
        self.platform = platform
        self._connected = False

    @property
    def name(self) -> str:
        return "rotor-mac"

    @property
    def mtu_size(self) -> int:
        return MTU

    @property
    def is_connected(self) -> bool:
        return self._connected

    async def connect(self, pair: bool, **kwargs: Any) -> None:
        self._connected = True
        self.services = BleakGATTServiceCollection()
        uuid = wire.SERVICE_UUID if self.platform.gatt else "0000180f-0000-1000-8000-00805f9b34fb"
        svc = BleakGATTService(None, 10, uuid)
        self.services.add_service(svc)
        if self.platform.gatt:
            for handle, cuuid, props in ((11, wire.DATA_UUID, ["read", "notify"]),
                                         (14, wire.COMMAND_UUID, ["write-without-response", "write"])):
                self.services.add_characteristic(BleakGATTCharacteristic(
                    None, handle, cuuid, props, lambda: WRITE_SIZE, svc))

    async def disconnect(self) -> None:
        self.platform.calls.append(("disconnect",))
        if self._connected:
            self._connected = False
            if self._disconnected_callback is not None:
                self._disconnected_callback()

    async def pair(self, *args: Any, **kwargs: Any) -> None:
        raise NotImplementedError

    async def unpair(self) -> None:
        raise NotImplementedError

    async def read_gatt_char(self, characteristic: Any, **kwargs: Any) -> bytearray:
        raise NotImplementedError

    async def read_gatt_descriptor(self, descriptor: Any, **kwargs: Any) -> bytearray:
        raise NotImplementedError

    async def write_gatt_char(self, characteristic: Any, data: Any, response: bool) -> None:
        self.platform.calls.append(("write", characteristic.uuid, bytes(data), response))

    async def write_gatt_descriptor(self, descriptor: Any, data: Any) -> None:
        raise NotImplementedError

    async def start_notify(self, characteristic: Any, callback: Any, **kwargs: Any) -> None:
        self.platform.calls.append(("notify", characteristic.uuid, kwargs.get("bluez")))

        async def feed() -> None:
            for n in notifications(self.platform.frames, MTU - 3):
                callback(bytearray(n))
                await asyncio.sleep(0.001)
        asyncio.get_running_loop().create_task(feed())

    async def stop_notify(self, characteristic: Any) -> None:
        pass


def test_recorder_on_macos_like_platform(tmp_path: Path) -> None:
    frames = [f for _, f in simulate(SimConfig(seconds=2))]
    plat = Platform(frames)
    central = BleakCentral(MAC_ID.lower(), scan_s=2, bleak=plat.module())
    writer = capture.CaptureWriter(tmp_path / "b.slcap", {"backend": "bleak"})
    rec = Recorder(central, writer, RecordOptions(duration_s=1.0, ping_every_s=0.2))
    prog = asyncio.run(rec.run())
    writer.close()
    assert plat.scans and all(s == [wire.SERVICE_UUID] for s in plat.scans)  # filtered scan
    (kw,) = plat.clients
    assert kw["winrt"] == {"use_cached_services": False}  # Windows: read the board, not its cache
    assert kw["services"] == {wire.SERVICE_UUID}
    assert ("notify", wire.DATA_UUID, {"use_start_notify": True}) in plat.calls
    writes = [c for c in plat.calls if c[0] == "write"]
    assert all(c[1] == wire.COMMAND_UUID and c[3] is False and len(c[2]) <= WRITE_SIZE
               for c in writes)
    opcodes = [wire.cobs_decode(c[2][:-1])[wire.HEADER_SIZE] for c in writes if c[2][-1] == 0]
    assert opcodes[0] == wire.CMD_START and opcodes[-1] == wire.CMD_STOP
    assert wire.CMD_PING in opcodes and ("disconnect",) in plat.calls
    dec = decode_files([tmp_path / "b.slcap"], tmp_path / "t", "csv", None)
    assert prog.frames == len(frames) and dec.counters.commands == len(opcodes)
    run = next(iter(dec.runs.values()))
    assert run.samples == 2 * 2000 and dec.missing(run) == 0
    info = central.link_info()
    assert tuple(info) == LINK_INFO_KEYS
    assert info["address"] == MAC_ID and info["address_kind"] == "uuid"
    assert info["mtu"] == MTU and info["write_size"] == WRITE_SIZE  # mtu_size where it is right


def test_long_command_is_cut_to_the_write_size() -> None:
    plat = Platform([])
    central = BleakCentral(None, scan_s=2, bleak=plat.module())

    async def go() -> None:
        await central.connect(lambda d: None, lambda w: None)
        await central.write(bytes(range(256)) * 2)
        await central.disconnect()
    asyncio.run(go())
    sizes = [len(c[2]) for c in plat.calls if c[0] == "write"]
    assert sizes == [WRITE_SIZE, WRITE_SIZE, 512 - 2 * WRITE_SIZE]


def test_notify_method_acquire_reaches_bluez_args() -> None:
    plat = Platform([])
    central = BleakCentral(None, scan_s=2, bleak=plat.module(), notify_method="acquire")
    asyncio.run(central.connect(lambda d: None, lambda w: None))
    assert ("notify", wire.DATA_UUID, {"use_start_notify": False}) in plat.calls
    with pytest.raises(ValueError):
        BleakCentral(None, bleak=plat.module(), notify_method="fast")


def test_bleak_board_not_found_is_one_line() -> None:
    central = BleakCentral("nobody", bleak=Platform([]).module(), scan_s=0.1)
    with pytest.raises(BoardNotFound) as err:
        asyncio.run(central.connect(lambda d: None, lambda w: None))
    assert str(err.value) == "no board 'nobody' found in 0 s" and err.value.retry


def test_by_name_and_wrong_gatt() -> None:
    plat = Platform([], gatt=False)
    central = BleakCentral("rotor-mac", scan_s=2, bleak=plat.module())
    with pytest.raises(WrongGatt) as err:
        asyncio.run(central.connect(lambda d: None, lambda w: None))
    assert not err.value.retry and "does not offer the slipless service" in str(err.value)
    assert central.address == MAC_ID and ("disconnect",) in plat.calls


def test_target_kinds() -> None:
    # RFC 9562 UUID text (8-4-4-4-12 hex); EUI-48 as six colon-separated octets
    assert address_kind(MAC_ID) == address_kind(MAC_ID.lower()) == "uuid"
    assert address_kind("AA:BB:CC:DD:EE:FF") == address_kind("aa:bb:cc:dd:ee:ff") == "mac"
    assert address_kind("rotor-b") is None and address_kind("rotor:b") is None
    assert address_kind("5B1E9F0C-3D2A-4E6B-9C8D") is None
