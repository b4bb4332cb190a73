"""`slipless record` through bleak's real BlueZ back end.

Which side is a double: only the BlueZ daemon's D-Bus API (tests/bluez/double.py
exports what bluetoothd would on a private dbus-daemon, and bleak finds it through
DBUS_SYSTEM_BUS_ADDRESS). Real: bleak (its BlueZ back end, unmodified, over real
D-Bus sockets, unix fd passing included), the slipless command line with its
default back end, and the board's own firmware (firmware/board.py and link.py on
the simulated hardware layer, MicroPython's `bluetooth` API on a bumble Device)
over bumble's virtual link, which carries real ATT/GATT. Why a double: there is no
kernel Bluetooth (no HCI socket, no bluetoothd) and no radio here. Untested
therefore: bluetoothd's own behaviour (its timing, caching, MTU and connection
parameters), the kernel, the controller and RF.

These run in real time (D-Bus sockets), a few seconds each.
"""

from __future__ import annotations

import asyncio
import json
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the bluez package

from bluez.daemon import PrivateBus, daemon_path  # noqa: E402
from bluez.harness import DoubleThread  # noqa: E402

from slipless.cli import decode_files, main  # noqa: E402
from slipless.io import capture  # noqa: E402
from slipless.protocol import wire  # noqa: E402
from slipless.record.recorder import Recorder, RecordOptions  # noqa: E402
from slipless.record.transports import LINK_INFO_KEYS, BoardNotFound, NoBluetooth, WrongGatt  # noqa: E402
from slipless.record.transports.bleak_central import BleakCentral  # noqa: E402

pytestmark = pytest.mark.skipif(daemon_path() is None,
                                reason="no dbus-daemon here (Debian package dbus; `make dbus`)")

BOARD = "F1:F1:F1:F1:F1:F1"  # the board's address on bumble's virtual link (sim.ble_board)
CONFIG = {
    "board_id": 21, "name": "rotor-bluez",
    "streams": [
        {"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 500,
         "type": "h", "scale": 0.001, "offset": 0.0},
        {"id": 1, "name": "coil_current", "unit": "A", "source": "adc1", "rate_hz": 500,
         "type": "h", "scale": 0.001, "offset": 0.0}],
    "link": {"status_every_ms": 250, "descriptor_every_ms": 1000, "ring_frames": 64,
             "queue_frames": 16},
}


@pytest.fixture
def system_bus(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[str]:
    """A private dbus-daemon posing as the system bus, for bleak and the double."""
    folder = tmp_path / "dbus"
    folder.mkdir()
    bus = PrivateBus(folder)
    monkeypatch.setenv("DBUS_SYSTEM_BUS_ADDRESS", bus.address)
    monkeypatch.setenv("SLIPLESS_HOME", str(tmp_path / "home"))  # no board keys from elsewhere
    try:
        yield bus.address
    finally:
        bus.close()


def capture_events(path: Path) -> list[dict[str, Any]]:
    with path.open("rb") as f:
        return [json.loads(r.payload) for r in capture.CaptureReader(f) if r.type == capture.EVENT]


def loss_doc(path: Path, capsys: pytest.CaptureFixture[str]) -> dict[str, Any]:
    capsys.readouterr()
    assert main(["loss", str(path), "--json"]) == 0
    return dict(json.loads(capsys.readouterr().out))


def test_record_default_backend_cut_reconnect_resend(system_bus: str, tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "run.slcap"
    with DoubleThread(system_bus, CONFIG) as rig:
        rig.later(1.5, rig.cut)  # mid-run the link drops (the board's side hangs up)
        code = main(["record", "--out", str(out), "--duration", "3", "--ping-every", "0.5",
                     "--insecure", "--label", "bluez"])
        assert rig.double is not None
        disconnections = list(rig.double.disconnections)
        log = list(rig.double.log)
    assert code == 0
    events = capture_events(out)
    names = [e["event"] for e in events]
    assert names.count("connected") == 2 and "disconnected" in names, names
    # The MTU recorded is the one bluetoothd would publish after its exchange: the
    # board's 247 (its link.py asks for 244-byte notifications), not bleak's 23.
    assert [e["mtu"] for e in events if e["event"] == "connected"] == [247, 247]
    # what recorded it and what the link was, beside the data
    connected = [e for e in events if e["event"] == "connected"]
    assert all(e["backend"] == "bleak" and e["write_size"] == 244 and "interval_ms" in e
               for e in connected)
    with out.open("rb") as f:
        meta = capture.CaptureReader(f).meta
    assert meta["label"] == "bluez" and meta["backend"] == "bleak"
    assert meta["recorder"]["os"] and "bleak" in meta["recorder"]["packages"]
    assert len(disconnections) >= 2  # the cut, then the recorder's own hang-up at the end
    # the default: StartNotify, notifications as Value PropertiesChanged signals
    assert any(entry[1] == "start_notify" for entry in log)
    assert not any(entry[1] == "acquire_notify" for entry in log)

    # The board's truth: every frame its firmware built, decoded like a mirror.
    (tmp_path / "truth.bin").write_bytes(b"".join(rig.produced))
    truth = decode_files([tmp_path / "truth.bin"], tmp_path / "t", "csv", None)
    main_run = max(truth.runs.values(), key=lambda r: r.received)

    doc = loss_doc(out, capsys)
    assert doc["closes"], [r["discrepancies"] for r in doc["runs"]]
    (run,) = [r for r in doc["runs"] if (r["board"], r["run"]) == (main_run.board, main_run.run)]
    assert run["end_seen"] and run["frames_expected"] == main_run.received
    assert run["frames_expected"] == (run["frames_received"] + run["frames_recovered"]
                                      + run["frames_lost"] + run["frames_dropped_board"])
    resends = [e for e in events if e["event"] == "resend"]
    assert resends and run["frames_recovered_resend"] > 0, (resends, run)


async def record_direct(tmp: Path, method: str, rig: DoubleThread) -> tuple[Recorder, BleakCentral]:
    central = BleakCentral(BOARD, scan_s=5, notify_method=method, connect_s=10)
    writer = capture.CaptureWriter(tmp / f"{method}.slcap", {"backend": "bleak"})
    rec = Recorder(central, writer, RecordOptions(duration_s=1.5, ping_every_s=0.5, drain_s=1.5))
    await rec.run()
    writer.close()
    return rec, central


def test_record_cli_takes_acquire_notify(system_bus: str, tmp_path: Path) -> None:
    out = tmp_path / "acquire.slcap"
    with DoubleThread(system_bus, CONFIG) as rig:
        code = main(["record", "--out", str(out), "--duration", "1.5", "--insecure",
                     "--notify-method", "acquire"])
        assert rig.double is not None
        log = [entry[1] for entry in rig.double.log]
    assert code == 0 and "acquire_notify" in log and "start_notify" not in log


@pytest.mark.parametrize("method", ["start", "acquire"])
def test_notify_method_start_or_acquire(method: str, system_bus: str, tmp_path: Path) -> None:
    with DoubleThread(system_bus, CONFIG) as rig:
        rec, central = asyncio.run(record_direct(tmp_path, method, rig))
        assert rig.double is not None
        log = [entry[1] for entry in rig.double.log]
    called = {"start": "start_notify", "acquire": "acquire_notify"}
    assert called[method] in log and called[{"start": "acquire", "acquire": "start"}[method]] not in log
    dec = decode_files([tmp_path / f"{method}.slcap"], tmp_path / method, "csv", None)
    run = max(dec.runs.values(), key=lambda r: r.received)
    assert run.end is not None and dec.missing(run) == 0 and run.samples > 0
    # every write went as an ATT Write Command, cut to the usable size (MTU 247 - 3)
    writes = [e for e in rig.double.log if e[1] == "write"]
    assert writes and all(kind == "command" and len(data) <= 244 for _p, _w, data, kind in writes)
    assert rec.commands_sent >= 3


def test_link_info_through_bluez(system_bus: str) -> None:
    async def go() -> dict[str, Any]:
        central = BleakCentral(BOARD, scan_s=5, connect_s=10)
        await central.connect(lambda d: None, lambda w: None)
        try:
            return central.link_info()
        finally:
            await central.disconnect()

    with DoubleThread(system_bus, CONFIG):
        info = asyncio.run(go())
    assert tuple(info) == LINK_INFO_KEYS
    assert info["backend"] == "bleak" and info["backend_version"]
    assert info["address"] == BOARD and info["address_kind"] == "random"  # sim.ble_board's
    assert info["mtu"] == 247 and info["write_size"] == 244 and info["interval_ms"] is None
    assert info["os"].startswith("Linux")


def test_scan_asks_bluez_for_our_service(system_bus: str) -> None:
    """The discovery filter carries our UUID (BlueZ Adapter1.SetDiscoveryFilter), and
    a board found by address is found through it."""
    with DoubleThread(system_bus, CONFIG) as rig:
        central = BleakCentral(BOARD, scan_s=5)
        dev = asyncio.run(central._find())
        assert rig.double is not None and rig.double.adapter is not None
        filters = list(rig.double.adapter.filters)
    assert dev.address == BOARD
    assert filters[0]["UUIDs"] == [wire.SERVICE_UUID] and filters[0]["Transport"] == "le"


def test_no_adapter_or_powered_off_is_fatal(system_bus: str) -> None:
    for kw in ({"adapter": False}, {"powered": False}):
        with DoubleThread(system_bus, CONFIG, **kw):
            rec = Recorder(BleakCentral(BOARD, scan_s=1), _null_writer(), RecordOptions())
            with pytest.raises(NoBluetooth) as err:
                asyncio.run(rec.run())
        assert not err.value.retry and rec.state == "done"
        assert "\n" not in str(err.value)


def test_board_not_found_backs_off_then_gives_up(system_bus: str) -> None:
    """Nothing advertises: the scan is tried first_tries times, with back-off between."""
    with DoubleThread(system_bus, None):
        rec = Recorder(BleakCentral(BOARD, scan_s=0.3), _null_writer(),
                       RecordOptions(first_tries=3, backoff_s=(0.05,)))
        with pytest.raises(BoardNotFound) as err:
            asyncio.run(rec.run())
    assert err.value.retry and str(err.value) == f"no board {BOARD!r} found in 0 s"
    failed = [e for e in rec.capture.events if e["event"] == "connect_failed"]
    assert len(failed) == 3 and all(e["retry"] for e in failed)


async def foreign_board(board_dev: Any) -> None:
    """A peripheral advertising our service UUID whose GATT lacks it (other firmware,
    or what a stale cache would show): our advertising data, a battery service."""
    from bumble import gatt

    from slipless.sim.ble_board import firmware_on_path

    firmware_on_path()
    import link

    board_dev.add_service(gatt.Service(gatt.GATT_BATTERY_SERVICE, [gatt.Characteristic(
        gatt.GATT_BATTERY_LEVEL_CHARACTERISTIC, gatt.Characteristic.Properties.READ,
        gatt.Characteristic.READABLE, bytes([99]))]))
    adv, resp = link.adv_payload("not-ours", link.uuid_le(wire.SERVICE_UUID))
    await board_dev.start_advertising(advertising_data=adv, scan_response_data=resp)


def test_board_without_our_service_is_fatal_with_cache_hint(system_bus: str) -> None:
    with DoubleThread(system_bus, board=foreign_board):
        rec = Recorder(BleakCentral(BOARD, scan_s=5, connect_s=10), _null_writer(), RecordOptions())
        with pytest.raises(WrongGatt) as err:
            asyncio.run(rec.run())
    text = str(err.value)
    assert not err.value.retry and "does not offer the slipless service" in text
    assert f"bluetoothctl remove {BOARD}" in text and "\n" not in text


class _NullWriter:
    """Collects capture events; the recorder writes nothing else before a connection."""

    def __init__(self) -> None:
        self.events: list[dict[str, Any]] = []
        self.clock = capture.SystemClock()

    def event(self, source: int, name: str, **fields: Any) -> None:
        self.events.append({"event": name, **fields})

    def write(self, *a: Any) -> None:
        pass


def _null_writer() -> Any:
    return _NullWriter()


def test_acquire_write_gives_the_mtu(system_bus: str) -> None:
    """bleak's way to learn the MTU on BlueZ (its private _acquire_mtu, which its own
    examples use): AcquireWrite returns a socket and the MTU; closing the socket
    releases the characteristic (WriteAcquired back to false)."""
    import bleak

    async def go(rig: DoubleThread) -> tuple[int, bool]:
        dev = await bleak.BleakScanner.find_device_by_address(BOARD, timeout=5)
        async with bleak.BleakClient(dev, timeout=10) as client:
            await client._backend._acquire_mtu()
            assert rig.double is not None
            char = next(i for i in rig.double.device(BOARD).gatt
                        if getattr(i, "flags", None) and "write-without-response" in i.flags)
            for _ in range(40):  # until the hang-up reaches the double
                if char.write_sock is None:
                    break
                await asyncio.sleep(0.05)
            return client.mtu_size, char.write_sock is None

    with DoubleThread(system_bus, CONFIG) as rig:
        mtu, released = asyncio.run(go(rig))
    assert mtu == 247 and released
