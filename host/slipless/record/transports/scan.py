"""Finding boards in radio range: every device advertising the slipless
service, with its name, address and signal strength, on either back end.

The board advertises the service UUID and puts its name in the scan
response (firmware/link.py), so scanning is active: a name arrives with the
answer to a scan request. Each back end is imported only when it is used.
"""

from __future__ import annotations

import asyncio
from dataclasses import dataclass
from typing import Any

from slipless.protocol import wire
from slipless.record.transports import LinkError

# HCI LE advertising reports say "RSSI not available" with 127 (Bluetooth Core
# Specification, from memory; bumble's hci module uses the same 0x7F).
RSSI_NOT_AVAILABLE = 127


@dataclass(frozen=True)
class Sighting:
    """One board heard while scanning."""

    name: str
    address: str
    rssi_dbm: int | None  # the last advertisement's signal strength; None when not reported


def _rssi(value: Any) -> int | None:
    if value is None or int(value) == RSSI_NOT_AVAILABLE:
        return None
    return int(value)


def ordered(found: dict[str, Sighting]) -> list[Sighting]:
    """Strongest first (unknown strength last), then by address, so output is stable."""
    return sorted(found.values(), key=lambda s: (s.rssi_dbm is None, -(s.rssi_dbm or 0),
                                                 s.address))


async def scan_bleak(seconds: float, bleak: Any = None) -> list[Sighting]:
    """Scan with the laptop's own Bluetooth for `seconds`. `bleak` is the module
    (tests pass a stand-in); the service filter is asked of the OS and checked
    again here, as not every platform applies it."""
    if bleak is None:
        try:
            import bleak as bleak_mod
        except ImportError as exc:
            raise LinkError("the bleak back end needs bleak: pip install 'slipless[ble]'") from exc
        bleak = bleak_mod
    try:
        seen = await bleak.BleakScanner.discover(timeout=seconds, return_adv=True,
                                                 service_uuids=[wire.SERVICE_UUID])
    except Exception as exc:  # no adapter, no BlueZ, permissions: bleak raises many kinds
        raise LinkError(f"Bluetooth is not available to bleak here ({type(exc).__name__}: "
                        f"{exc or 'no detail'}); try --backend bumble with a USB dongle") from exc
    found: dict[str, Sighting] = {}
    for address, (dev, adv) in seen.items():
        if wire.SERVICE_UUID not in [str(u).lower() for u in adv.service_uuids]:
            continue
        name = adv.local_name or getattr(dev, "name", None) or ""
        found[str(address)] = Sighting(str(name), str(address), _rssi(adv.rssi))
    return ordered(found)


async def scan_bumble(device: Any, seconds: float) -> list[Sighting]:
    """Scan with a powered-on bumble Device (a USB dongle, or bumble's virtual
    link in tests) for `seconds`."""
    from bumble.core import UUID

    want = UUID(wire.SERVICE_UUID)
    names: dict[str, str] = {}
    rssi: dict[str, int | None] = {}
    ours: set[str] = set()

    def on_adv(adv: Any) -> None:
        address = str(adv.address)
        data = adv.data
        name = (data.get(data.COMPLETE_LOCAL_NAME) or data.get(data.SHORTENED_LOCAL_NAME))
        uuids = list(data.get(data.COMPLETE_LIST_OF_128_BIT_SERVICE_CLASS_UUIDS) or [])
        uuids += list(data.get(data.INCOMPLETE_LIST_OF_128_BIT_SERVICE_CLASS_UUIDS) or [])
        if want in uuids:
            ours.add(address)
        if name:
            names[address] = str(name)
        rssi[address] = _rssi(adv.rssi)

    device.on(device.EVENT_ADVERTISEMENT, on_adv)
    try:
        await device.start_scanning(active=True, filter_duplicates=False)
    except Exception as exc:
        device.remove_listener(device.EVENT_ADVERTISEMENT, on_adv)
        raise LinkError(f"the bumble device cannot scan: {exc}") from exc
    try:
        await asyncio.sleep(seconds)
    finally:
        device.remove_listener(device.EVENT_ADVERTISEMENT, on_adv)
        await device.stop_scanning()
    return ordered({a: Sighting(names.get(a, ""), a, rssi.get(a)) for a in ours})
