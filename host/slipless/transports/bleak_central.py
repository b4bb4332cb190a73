"""The bleak back end: the laptop's own Bluetooth through bleak.

The thinnest adapter we can make: bleak finds, connects, negotiates the MTU
(the operating system does the exchange) and delivers notifications; the
recorder does the rest. Only the mapping from bleak's calls to the Central
interface lives here.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from slipless.protocol import wire
from slipless.transports import LinkError


class BleakCentral:
    def __init__(self, target: str | None = None, scan_s: float = 10.0,
                 bleak: Any = None) -> None:
        if bleak is None:
            try:
                import bleak as bleak_mod
            except ImportError as exc:
                raise LinkError("the bleak back end needs bleak: pip install 'slipless[ble]'") from exc
            bleak = bleak_mod
        self._bleak = bleak
        self.target = target
        self.scan_s = scan_s
        self.mtu = 23
        self.address = ""
        self.name = ""
        self._client: Any = None

    async def _find(self) -> Any:
        try:
            return await self._scan()
        except LinkError:
            raise
        except Exception as exc:  # no adapter, no BlueZ, permissions: bleak raises many kinds
            raise LinkError(f"Bluetooth is not available to bleak here ({type(exc).__name__}: "
                            f"{exc or 'no detail'}); try --backend bumble with a USB dongle") from exc

    async def _scan(self) -> Any:
        scanner = self._bleak.BleakScanner
        if self.target and ":" in self.target:
            dev = await scanner.find_device_by_address(self.target, timeout=self.scan_s)
        elif self.target:
            dev = await scanner.find_device_by_name(self.target, timeout=self.scan_s)
        else:
            dev = await scanner.find_device_by_filter(
                lambda d, adv: wire.SERVICE_UUID in [u.lower() for u in adv.service_uuids],
                timeout=self.scan_s)
        if dev is None:
            what = f"{self.target!r}" if self.target else "advertising the slipless service"
            raise LinkError(f"no board {what} found in {self.scan_s:.0f} s")
        return dev

    async def connect(self, on_data: Callable[[bytes], None],
                      on_disconnect: Callable[[str], None]) -> None:
        dev = await self._find()
        self.address = dev.address
        self.name = dev.name or ""
        client = self._bleak.BleakClient(dev, disconnected_callback=lambda _c: on_disconnect("lost"))
        try:
            await client.connect()
        except Exception as exc:
            raise LinkError(f"cannot connect to {self.address}: {exc}") from exc
        self._client = client
        self.mtu = int(getattr(client, "mtu_size", 23) or 23)
        await client.start_notify(wire.DATA_UUID, lambda _char, data: on_data(bytes(data)))

    async def write(self, data: bytes) -> None:
        if self._client is None:
            raise LinkError("not connected")
        for i in range(0, len(data), self.mtu - 3):
            await self._client.write_gatt_char(wire.COMMAND_UUID, data[i : i + self.mtu - 3],
                                               response=False)

    async def disconnect(self) -> None:
        if self._client is not None:
            try:
                await self._client.disconnect()
            except Exception:  # already gone
                pass
            self._client = None
