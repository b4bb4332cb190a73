"""The bleak back end: the laptop's own Bluetooth through bleak.

The thinnest adapter we can make: bleak finds, connects, negotiates the MTU
(the operating system does the exchange) and delivers notifications; the
recorder does the rest. What lives here is the mapping from bleak's calls to
the Central interface and the few things each laptop's stack does its own way:

- macOS (CoreBluetooth) names a board by a UUID of its own per host, never by
  its Bluetooth address: a UUID-shaped target is an address there.
- The scan asks for our service UUID (macOS needs a filter to see services;
  BlueZ then reports only boards that advertise it).
- BlueZ reports `mtu_size` 23 unless the MTU was acquired; the characteristic's
  `max_write_without_response_size` (BlueZ's MTU property, 5.62 on) is the
  usable size, so writes are cut to it and the MTU is taken from it there.
- Windows may serve services from its cache: for a board whose firmware (and
  GATT layout) changes, ask it to read them from the board.
- BlueZ's StartNotify (notifications as D-Bus signals, bleak's default) or
  AcquireNotify (a socket per characteristic): `notify_method`.
"""

from __future__ import annotations

import asyncio
import platform
from collections.abc import Callable
from typing import Any

from slipless.protocol import wire
from slipless.record.transports import (
    BoardNotFound,
    ConnectFailed,
    LinkError,
    NoBluetooth,
    WrongGatt,
    address_kind,
    link_facts,
)

NOTIFY_METHODS = ("start", "acquire")  # BlueZ StartNotify / AcquireNotify
DEFAULT_WRITE_SIZE = 20  # ATT MTU 23 - 3: what every link carries
BLUEZ = "bluez_dbus"  # bleak's BleakBackend.BLUEZ_DBUS value
_TRANSIENT_DBUS = ("org.bluez.Error.InProgress", "org.bluez.Error.Failed")


def stale_cache_hint(address: str) -> str:
    """What to do when the board's GATT layout is not ours, per operating system."""
    system = platform.system()
    if system == "Linux":
        return (f"BlueZ caches GATT handles: if the board was flashed with a different GATT layout, "
                f"remove it from the cache (bluetoothctl remove {address}) and try again")
    if system == "Darwin":
        return ("macOS caches GATT services: if the board was flashed with a different GATT "
                "layout, switch Bluetooth off and on again and retry")
    return ("if the board was flashed with a different GATT layout, remove it from the "
            "system's Bluetooth devices and try again")


class BleakCentral:
    def __init__(self, target: str | None = None, scan_s: float = 10.0,
                 bleak: Any = None, notify_method: str = "start",
                 connect_s: float = 20.0) -> None:
        if notify_method not in NOTIFY_METHODS:
            raise ValueError(f"notify_method: one of {', '.join(NOTIFY_METHODS)}")
        if bleak is None:
            try:
                import bleak as bleak_mod
            except ImportError as exc:
                raise NoBluetooth("the bleak back end needs bleak: pip install 'slipless[ble]'") from exc
            bleak = bleak_mod
        self._bleak = bleak
        self.target = target
        self.scan_s = scan_s
        self.connect_s = connect_s
        self.notify_method = notify_method
        self.mtu = 23
        self.address = ""
        self.name = ""
        self._address_kind: str | None = None
        self._client: Any = None
        self._cmd: Any = None  # bleak's BleakGATTCharacteristic for commands

    # ---- finding the board ---------------------------------------------------------
    async def _find(self) -> Any:
        try:
            return await self._scan()
        except LinkError:
            raise
        except Exception as exc:  # no adapter, no BlueZ, permissions: bleak raises many kinds
            if getattr(exc, "dbus_error", "") in _TRANSIENT_DBUS:  # another scan holds the adapter
                raise ConnectFailed(f"the Bluetooth adapter is busy ({exc})") from exc
            raise NoBluetooth(f"Bluetooth is not available to bleak here ({type(exc).__name__}: "
                              f"{exc or 'no detail'}); check the adapter is present and on, and "
                              "that you may use it, or try --backend bumble with a USB dongle") from exc

    def _wanted(self, dev: Any, adv: Any) -> bool:
        if not self.target:
            return wire.SERVICE_UUID in [u.lower() for u in adv.service_uuids]
        if address_kind(self.target):
            return bool(str(dev.address).lower() == self.target.lower())
        return self.target in (adv.local_name, dev.name)

    async def _scan(self) -> Any:
        dev = await self._bleak.BleakScanner.find_device_by_filter(
            self._wanted, timeout=self.scan_s, service_uuids=[wire.SERVICE_UUID])
        if dev is None:
            what = f"{self.target!r}" if self.target else "advertising the slipless service"
            raise BoardNotFound(f"no board {what} found in {self.scan_s:.0f} s")
        return dev

    # ---- the connection ------------------------------------------------------------
    async def connect(self, on_data: Callable[[bytes], None],
                      on_disconnect: Callable[[str], None]) -> None:
        await self.disconnect()  # a link that dropped still holds bleak's D-Bus connection
        dev = await self._find()
        self.address = str(dev.address)
        self.name = dev.name or ""
        self._address_kind = _kind_of(dev)
        client = self._bleak.BleakClient(
            dev, disconnected_callback=lambda _c: on_disconnect("lost"),
            services=[wire.SERVICE_UUID], timeout=self.connect_s,
            winrt={"use_cached_services": False})
        try:
            await client.connect()
        except Exception as exc:
            raise self._connect_error(exc) from exc
        self._client = client
        try:
            await self._subscribe(client, on_data)
        except BaseException:
            await self.disconnect()
            raise

    def _connect_error(self, exc: Exception) -> LinkError:
        if type(exc).__name__ == "BleakBluetoothNotAvailableError":
            return NoBluetooth(f"Bluetooth is not available: {exc}")
        if type(exc).__name__ == "BleakDeviceNotFoundError":
            return BoardNotFound(f"{self.address} is no longer in range ({exc})")
        why = "timed out" if isinstance(exc, TimeoutError) else f"{exc}"
        return ConnectFailed(f"cannot connect to {self.address}: {why or type(exc).__name__}")

    async def _subscribe(self, client: Any, on_data: Callable[[bytes], None]) -> None:
        services = client.services
        if services.get_service(wire.SERVICE_UUID) is None:
            raise WrongGatt(f"{self.address} does not offer the slipless service; "
                            + stale_cache_hint(self.address))
        data = services.get_characteristic(wire.DATA_UUID)
        cmd = services.get_characteristic(wire.COMMAND_UUID)
        if (data is None or cmd is None or "notify" not in data.properties
                or "write-without-response" not in cmd.properties):
            raise WrongGatt(f"{self.address}: the slipless characteristics are missing or "
                            "differ; " + stale_cache_hint(self.address))
        self._cmd = cmd
        self.mtu = self._mtu(client)
        try:
            await client.start_notify(
                data, lambda _char, value: on_data(bytes(value)),
                bluez={"use_start_notify": self.notify_method == "start"})
        except Exception as exc:
            raise ConnectFailed(f"{self.address}: cannot subscribe to the data ({exc})") from exc

    def write_size(self) -> int:
        """The most one write without response carries on this link now."""
        if self._cmd is None:
            return DEFAULT_WRITE_SIZE
        return max(DEFAULT_WRITE_SIZE, int(self._cmd.max_write_without_response_size))

    def _mtu(self, client: Any) -> int:
        if _backend(client) == BLUEZ:  # mtu_size reads 23 (and warns) there: see the module doc
            return self.write_size() + 3
        return int(getattr(client, "mtu_size", 23) or 23)

    async def write(self, data: bytes) -> None:
        if self._client is None:
            raise ConnectFailed("not connected")
        step = self.write_size()
        try:
            for i in range(0, len(data), step):
                await self._client.write_gatt_char(self._cmd, data[i : i + step], response=False)
        except Exception as exc:  # the link went while writing: the recorder reconnects
            raise ConnectFailed(f"{self.address}: write failed ({exc})") from exc

    async def disconnect(self) -> None:
        client, self._client = self._client, None  # (_cmd stays: link_info tells of the last link)
        if client is not None:
            try:
                await asyncio.wait_for(client.disconnect(), self.connect_s)
            except Exception:  # already gone
                pass

    def link_info(self) -> dict[str, Any]:
        """What this link is, for the capture (keys: transports.LINK_INFO_KEYS)."""
        # no bleak back end reports the connection interval
        return link_facts("bleak", self.address, self._address_kind, self.mtu, self.write_size(),
                          None)


def _backend(client: Any) -> str:
    backend = getattr(client, "backend_id", "")
    return str(getattr(backend, "value", backend))


def _kind_of(dev: Any) -> str | None:
    """public / random (BlueZ says which), uuid (CoreBluetooth), or None (unknown)."""
    if address_kind(str(dev.address)) == "uuid":
        return "uuid"
    details = getattr(dev, "details", None)
    props = details.get("props") if isinstance(details, dict) else None
    kind = props.get("AddressType") if isinstance(props, dict) else None
    return str(kind) if kind in ("public", "random") else None
