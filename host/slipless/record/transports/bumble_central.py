"""The bumble back end: a bumble Device as the laptop's central.

Used with a USB HCI dongle (`--transport usb:0`) or, in tests and the demo,
with a Device on bumble's virtual link.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable
from typing import Any

from bumble.core import UUID
from bumble.device import Connection, Device, Peer

from slipless.protocol import wire
from slipless.record.transports import (
    BoardNotFound,
    ConnectFailed,
    LinkError,
    WrongGatt,
    address_kind,
    link_facts,
)

REQUESTED_MTU = 247  # 244-byte notifications (ATT MTU - 3)


class BumbleCentral:
    def __init__(self, device: Device, target: str | None = None, scan_s: float = 10.0) -> None:
        self.device = device
        self.target = target  # an address, a name, or None: the first board advertising our UUID
        self.scan_s = scan_s
        self.mtu = 23
        self.address = ""
        self.name = ""
        self._conn: Connection | None = None
        self._cmd: Any = None
        self._kind: str | None = None  # public / random, of the last connection
        self._interval_ms: float | None = None

    async def _find(self) -> str:
        kind = address_kind(self.target) if self.target else None
        if kind == "uuid":
            raise WrongGatt(f"{self.target}: a UUID names a board only on macOS (CoreBluetooth); "
                            "give the board's address or name")
        if kind == "mac":
            assert self.target is not None
            return self.target
        found: asyncio.Future[str] = asyncio.get_running_loop().create_future()
        want = UUID(wire.SERVICE_UUID)

        def on_adv(adv) -> None:  # type: ignore[no-untyped-def]
            name = adv.data.get(adv.data.COMPLETE_LOCAL_NAME) or ""
            uuids = adv.data.get(adv.data.COMPLETE_LIST_OF_128_BIT_SERVICE_CLASS_UUIDS) or []
            hit = name == self.target if self.target else want in uuids
            if hit and not found.done():
                self.name = str(name)
                found.set_result(str(adv.address))

        self.device.on(self.device.EVENT_ADVERTISEMENT, on_adv)
        await self.device.start_scanning(filter_duplicates=True)
        try:
            return await asyncio.wait_for(found, self.scan_s)
        except TimeoutError as exc:
            what = f"named {self.target!r}" if self.target else "advertising the slipless service"
            raise BoardNotFound(f"no board {what} found in {self.scan_s:.0f} s") from exc
        finally:
            self.device.remove_listener(self.device.EVENT_ADVERTISEMENT, on_adv)
            await self.device.stop_scanning()

    async def connect(self, on_data: Callable[[bytes], None],
                      on_disconnect: Callable[[str], None]) -> None:
        address = await self._find()
        try:
            conn = await self.device.connect(address)
        except Exception as exc:
            raise ConnectFailed(f"cannot connect to {address}: {exc}") from exc
        self._conn = conn
        self.address = address
        conn.on(conn.EVENT_DISCONNECTION, lambda reason: on_disconnect(f"reason {reason}"))
        try:
            await self._subscribe(conn, on_data)
        except LinkError:
            await self.disconnect()
            raise
        except Exception as exc:  # the link went during discovery or the subscription
            await self.disconnect()
            raise ConnectFailed(f"{address}: {type(exc).__name__} {exc}") from exc

    async def _subscribe(self, conn: Connection, on_data: Callable[[bytes], None]) -> None:
        address = self.address
        peer = Peer(conn)
        self.mtu = await peer.request_mtu(REQUESTED_MTU)
        services = await peer.discover_service(UUID(wire.SERVICE_UUID))
        if not services:
            raise WrongGatt(f"{address} does not offer the slipless service")
        chars = await services[0].discover_characteristics()
        by_uuid = {str(c.uuid).lower(): c for c in chars}
        data = by_uuid.get(str(UUID(wire.DATA_UUID)).lower())
        self._cmd = by_uuid.get(str(UUID(wire.COMMAND_UUID)).lower())
        if data is None or self._cmd is None:
            raise WrongGatt(f"{address}: slipless characteristics missing")
        await data.subscribe(lambda value: on_data(bytes(value)))

    async def write(self, data: bytes) -> None:
        if self._cmd is None:
            raise ConnectFailed("not connected")
        step = self.mtu - 3  # one write carries at most MTU - 3 bytes
        try:
            for i in range(0, len(data), step):
                await self._cmd.write_value(data[i : i + step], with_response=False)
        except Exception as exc:  # the link went while writing: the recorder reconnects
            raise ConnectFailed(f"{self.address}: write failed ({exc})") from exc

    async def disconnect(self) -> None:
        conn, self._conn = self._conn, None
        self._cmd = None
        if conn is not None:
            try:
                await conn.disconnect()
            except Exception:  # already gone
                pass

    def link_info(self) -> dict[str, Any]:
        """What this link is (the last one, once it ended), for the capture (keys:
        transports.LINK_INFO_KEYS)."""
        conn = self._conn
        if conn is not None:
            self._kind = "public" if conn.peer_address.is_public else "random"
            # bumble keeps the interval in milliseconds (HCI's 1.25 ms units already applied)
            self._interval_ms = float(conn.parameters.connection_interval) or None
        return link_facts("bumble", self.address, self._kind, self.mtu, self.mtu - 3,
                          self._interval_ms)
