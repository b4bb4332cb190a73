"""The board's own BLE code on a real BLE stack: MicroPython's `bluetooth` API
implemented on a bumble Device, so firmware/link.py and firmware/board.py run
unchanged (on CPython, on the simulated hardware layer) against real GATT,
ATT, MTU exchange and notifications over bumble's virtual link.

The stack's notification queue is modelled as a bounded queue drained by a
task: when it is full, gatts_notify raises OSError(ENOMEM) as a board's stack
does, and the firmware retries later. A radio model (sim.rotating_link) may
sit in the stack: it times notifications and writes to connection events,
loses some, stalls the link and ends the connection as a real radio would.

The link's connection parameters and link-layer payload come from a
sim.links.AirLink: the laptop's stack connects with its interval, latency and
supervision timeout, and the controllers cut ACL data at 251 octets (Data
Length Extension) or 27. The board's stack raises _IRQ_CONNECTION_UPDATE with
the connection's parameters once after connecting and again whenever bumble
reports an update. (A MicroPython port raises it only on an update; the
firmware has no other way to learn them, so the shim tells it at connect too.)
"""

from __future__ import annotations

import asyncio
import dataclasses
import errno
import sys
from collections import deque
from collections.abc import Callable
from typing import Any

from bumble import gatt, hci, ll
from bumble.controller import Controller
from bumble.core import UUID as BumbleUUID
from bumble.device import Connection, ConnectionParametersPreferences, Device
from bumble.hci import Address
from bumble.host import Host
from bumble.link import LocalLink
from bumble.transport.common import AsyncPipeSink

from slipless.board.files import firmware_dir, protocol_dir
from slipless.sim.links import DEFAULT_LINK, LINKS, AirLink

_IRQ_CENTRAL_CONNECT = 1
_IRQ_CENTRAL_DISCONNECT = 2
_IRQ_GATTS_WRITE = 3
_IRQ_MTU_EXCHANGED = 21
_IRQ_CONNECTION_UPDATE = 27  # data: handle, interval (1.25 ms), latency, timeout (10 ms), status
INTERVAL_UNIT_MS = 1.25  # connection interval steps (Core Vol 6 Part B 4.5.1, from memory)
TIMEOUT_UNIT_MS = 10.0  # supervision timeout steps
QUEUE = 8  # notifications the "controller" holds before refusing more
HCI_CONNECTION_TIMEOUT = 0x08  # "Connection Timeout", Core Specification error codes (from memory)

FIRMWARE = firmware_dir()
PROTOCOL = protocol_dir()


class _Laptop(Device):
    """A bumble Device that connects with its own connection parameters: on
    a laptop the operating system's stack picks them, not the application."""

    def __init__(self, link: AirLink, *args: Any, **kw: Any) -> None:
        super().__init__(*args, **kw)
        self.preferences = ConnectionParametersPreferences(
            connection_interval_min=link.interval_ms, connection_interval_max=link.interval_ms,
            max_latency=link.latency, supervision_timeout=int(link.supervision_ms))

    async def connect(self, *args: Any, **kw: Any) -> Connection:
        if len(args) < 3:  # (address, transport, preferences): the caller chose none
            kw.setdefault("connection_parameters_preferences",
                          {hci.HCI_LE_1M_PHY: self.preferences})
        return await super().connect(*args, **kw)


class _BoardController(Controller):
    """bumble's software controller, except that as the peripheral it reports
    the parameters the central sent in its CONNECT_IND (bumble's own reports
    fixed placeholders there)."""

    _ind: ll.ConnectInd | None = None

    def on_le_connect_ind(self, packet: ll.ConnectInd) -> None:
        self._ind = packet
        try:
            super().on_le_connect_ind(packet)
        finally:
            self._ind = None

    def send_hci_packet(self, packet: hci.HCI_Packet) -> None:
        ind = self._ind
        if ind is not None and isinstance(packet, hci.HCI_LE_Connection_Complete_Event):
            packet = dataclasses.replace(packet, connection_interval=ind.interval,
                                         peripheral_latency=ind.latency,
                                         supervision_timeout=ind.timeout)
        super().send_hci_packet(packet)


class _LaptopController(Controller):
    """bumble's software controller (0.0.236) answers an active scan with the
    advertising data again (its SCAN_RSP report carries data=pdu.data), so the
    name a board puts in its scan response never arrives. A real controller
    reports the advertiser's scan response data (Bluetooth Core Specification,
    SCAN_RSP PDU; from memory): this one does too, so a board is found by name."""

    def send_hci_packet(self, packet: hci.HCI_Packet) -> None:
        ext = hci.HCI_LE_Extended_Advertising_Report_Event
        if isinstance(packet, (ext, hci.HCI_LE_Advertising_Report_Event)):
            for r in packet.reports:
                scan_rsp = (r.event_type & ext.EventType.SCAN_RESPONSE if isinstance(packet, ext)
                            else r.event_type == hci.HCI_LE_Advertising_Report_Event.EventType.SCAN_RSP)
                advertiser = self.link.find_le_controller(r.address) if scan_rsp else None
                if advertiser is not None:
                    sets = [bytes(a.scan_response_data)
                            for a in getattr(advertiser, "advertising_sets", {}).values()]
                    r.data = bytes(advertiser.le_legacy_advertiser.scan_response_data) or (
                        sets[0] if sets else r.data)
        super().send_hci_packet(packet)


def virtual_pair(link: AirLink | None = None) -> tuple[Device, Device]:
    """Two bumble Devices (laptop, board) on software controllers joined by
    bumble's in-process link: real HCI, L2CAP, ATT and GATT, no radio. `link`
    (default: sim.links' "fast") sets the connection parameters the laptop
    connects with and the link-layer payload: 251 octets with LE Data Length
    Extension, as boards sending 244-byte notifications use, 27 without
    (Bluetooth Core Specification v4.2)."""
    link = link or LINKS[DEFAULT_LINK]
    air = LocalLink()
    devices: list[Device] = []
    for i, addr in enumerate(("F0:F0:F0:F0:F0:F0", "F1:F1:F1:F1:F1:F1")):
        ctrl = (_BoardController if i else _LaptopController)(f"C{i}", link=air,
                                                               public_address=addr)
        ctrl.le_acl_data_packet_length = link.ll_payload
        host = Host(ctrl, AsyncPipeSink(ctrl))
        devices.append(Device(address=Address(addr), host=host) if i
                       else _Laptop(link, address=Address(addr), host=host))
    return devices[0], devices[1]


def firmware_on_path() -> None:
    """Make the board modules importable as the board sees them (top-level names)."""
    for p in (str(FIRMWARE), str(PROTOCOL)):
        if p not in sys.path:
            sys.path.insert(0, p)


class UUID:
    def __init__(self, value: str) -> None:
        self.value = value


class BLE:
    """The subset of MicroPython's bluetooth.BLE that firmware/link.py uses."""

    def __init__(self, device: Device, radio: Any = None) -> None:
        self.device = device
        self.radio = radio  # sim.rotating_link.RotatingLink, or None: a perfect radio
        self._handler: Callable[[int, Any], None] | None = None
        self._chars: dict[int, gatt.Characteristic] = {}
        self._written: dict[int, bytearray] = {}
        # notification, its run's seqs, when the stack took it
        self._queue: deque[tuple[bytes, list[int], float]] = deque()
        self._conn: Connection | None = None
        self._wake = asyncio.Event()
        self.notified = 0
        self.refused = 0
        self.updates: list[tuple[int, int, int, int, int]] = []  # _IRQ_CONNECTION_UPDATE data raised
        self._loop = asyncio.get_running_loop()
        self._drainer = self._loop.create_task(self._drain())
        self._watcher = self._loop.create_task(radio.watch()) if radio is not None else None
        if radio is not None:
            radio.on_timeout = self._supervision_timeout
        device.on(device.EVENT_CONNECTION, self._on_connection)

    # -- configuration --
    def active(self, on: bool | None = None) -> bool:
        return True

    def config(self, **kw: Any) -> None:
        if "mtu" in kw:
            self.device.gatt_server.max_mtu = kw["mtu"]

    def irq(self, handler: Callable[[int, Any], None]) -> None:
        self._handler = handler

    def gatts_register_services(self, services: Any) -> tuple[tuple[int, ...], ...]:
        result = []
        for svc_uuid, chars in services:
            made = []
            handles = []
            for char_uuid, flags in chars:
                h = len(self._chars) + 1
                value: Any = b""
                if flags & 0x0C:  # writable: collect what the laptop writes
                    value = gatt.CharacteristicValue(write=self._writer(h))
                c = gatt.Characteristic(BumbleUUID(char_uuid.value), flags,
                                        gatt.Characteristic.READABLE | gatt.Characteristic.WRITEABLE,
                                        value)
                self._chars[h] = c
                made.append(c)
                handles.append(h)
            self.device.add_service(gatt.Service(BumbleUUID(svc_uuid.value), made))
            result.append(tuple(handles))
        return tuple(result)

    def gatts_set_buffer(self, handle: int, n: int, append: bool = False) -> None:
        self._written[handle] = bytearray()

    def gatts_read(self, handle: int) -> bytes:
        data = bytes(self._written.get(handle, b""))
        self._written[handle] = bytearray()
        return data

    def gap_advertise(self, interval_us: int, adv_data: bytes | None = None,
                      resp_data: bytes | None = None, connectable: bool = True) -> None:
        def start() -> None:
            self._loop.create_task(self.device.start_advertising(
                advertising_data=adv_data, scan_response_data=resp_data,
                advertising_interval_min=max(20.0, interval_us / 1000)))

        now = self._loop.time()
        at = self.radio.audible_at(now) if self.radio is not None else now
        self._loop.call_at(at, start)

    def gatts_notify(self, conn: int, handle: int, data: Any = None) -> None:
        if len(self._queue) >= QUEUE:
            self.refused += 1
            raise OSError(errno.ENOMEM)
        value = bytes(data)
        self._queue.append((value, self.radio.handed(value) if self.radio is not None else [],
                            self._loop.time()))
        self._wake.set()

    # -- the stack side --
    def _writer(self, h: int) -> Callable[[Connection, bytes], None]:
        def arrive(connection: Connection, value: bytes) -> None:
            if connection is not self._conn:
                return  # the connection ended before the write got across
            self._written.setdefault(h, bytearray()).extend(value)
            if self._handler is not None:
                self._handler(_IRQ_GATTS_WRITE, (connection.handle, h))

        def write(connection: Connection, value: bytes) -> None:
            if self.radio is None:
                return arrive(connection, value)
            now = self._loop.time()
            self.radio.wrote(value, now)
            at = self.radio.write_arrives(now)
            if at is not None:
                self._loop.call_at(at, arrive, connection, value)
        return write

    def _on_connection(self, connection: Connection) -> None:
        self._conn = connection
        self._queue.clear()
        if self.radio is not None:
            self.radio.reset()
        connection.on(connection.EVENT_DISCONNECTION, self._on_disconnection)
        connection.on(connection.EVENT_CONNECTION_ATT_MTU_UPDATE,
                      lambda: self._irq(_IRQ_MTU_EXCHANGED, (connection.handle, connection.att_mtu)))
        connection.on(connection.EVENT_CONNECTION_PARAMETERS_UPDATE,
                      lambda: self._parameters(connection))
        self._irq(_IRQ_CENTRAL_CONNECT, (connection.handle, 0, bytes(6)))
        self._parameters(connection)

    def _parameters(self, connection: Connection) -> None:
        """Tell the board the connection's parameters in MicroPython's units."""
        p = connection.parameters
        data = (connection.handle, round(p.connection_interval / INTERVAL_UNIT_MS),
                p.peripheral_latency, round(p.supervision_timeout / TIMEOUT_UNIT_MS), 0)
        self.updates.append(data)
        self._irq(_IRQ_CONNECTION_UPDATE, data)

    def _on_disconnection(self, reason: int) -> None:
        conn = self._conn
        self._conn = None
        self._queue.clear()  # a board's stack drops what it had not sent
        self._irq(_IRQ_CENTRAL_DISCONNECT, (conn.handle if conn else 0, 0, bytes(6)))

    def _irq(self, event: int, data: Any) -> None:
        if self._handler is not None:
            self._handler(event, data)

    def _supervision_timeout(self) -> None:
        """The radio went silent too long: the connection ends on both sides. (Real
        controllers each declare the timeout; bumble's virtual ones carry the
        reason with the disconnection.)"""
        if self._conn is not None:
            self._loop.create_task(self._conn.disconnect(reason=HCI_CONNECTION_TIMEOUT))

    async def _drain(self) -> None:
        data_char = None
        while True:
            await self._wake.wait()
            self._wake.clear()
            while self._queue and self._conn is not None:
                if data_char is None:
                    data_char = next(c for c in self._chars.values() if c.properties & 0x10)
                if self.radio is not None:
                    conn = self._conn
                    # the first event after the stack took it: one it may have missed
                    # while the one before it was being delivered still counts
                    at = self.radio.next_event(self._queue[0][2], len(self._queue[0][0]))
                    await asyncio.sleep(max(0.0, at - self._loop.time()))
                    if conn is not self._conn or not self._queue:
                        continue  # the connection ended while waiting for its event
                    if self.radio.lost(self._queue[0][1], self._loop.time()):
                        self._queue.popleft()
                        self.notified += 1
                        continue
                value = self._queue[0][0]
                try:
                    await self.device.notify_subscriber(self._conn, data_char, value)
                except Exception:  # the link went away mid-send: the board's queue is gone too
                    self._queue.clear()
                    break
                if self._queue:
                    self._queue.popleft()
                self.notified += 1

    def close(self) -> None:
        self._drainer.cancel()
        if self._watcher is not None:
            self._watcher.cancel()


class BluetoothModule:
    """Stands in for `import bluetooth` on the board: exposes BLE and UUID."""

    UUID = UUID

    def __init__(self, device: Device, radio: Any = None) -> None:
        self._ble = BLE(device, radio)

    def BLE(self) -> BLE:  # noqa: N802 - MicroPython's name
        return self._ble


class VirtualBoard:
    """The board's firmware (board.py, link.py, mirror.py) on the simulated
    hardware layer, radioing through a bumble Device: the rotor side of
    end-to-end tests. Board time moves only in step()."""

    def __init__(self, device: Device, config: dict[str, Any],
                 on_frame: Callable[[Any, int], None] | None = None, hw: Any = None,
                 mirror_path: str | None = None, radio: Any = None) -> None:
        """hw: a simhw.SimHW to run on (default: one whose time moves in step());
        mirror_path: where the mirror goes (default: the config's path);
        radio: a sim.rotating_link.RotatingLink (default: a perfect radio)."""
        firmware_on_path()
        import config as fw_config
        from board import Board
        from link import Link
        from simhw import SimHW

        cfg = fw_config.validate(config)
        self.hw = hw if hw is not None else SimHW()
        self.mirror = None
        if cfg["mirror"]["enabled"]:
            from mirror import Mirror

            m = cfg["mirror"]
            self.mirror = Mirror(mirror_path or m["path"], m["max_bytes"], m["flush_every_ms"],
                                 self.hw.ticks_ms())
            self.hw.on_frame = self.mirror.write
        if on_frame is not None:
            self.hw.on_frame = on_frame
        self.board = Board(cfg, self.hw, self.hw.next_run_id())
        self.board.mirror = self.mirror
        self.bt = BluetoothModule(device, radio)
        # as main.py builds it (on a stack that refuses when full: no pacing)
        params = getattr(self.board, "conn_params", None)  # firmware that logs them
        self.board.link = Link(self.bt.BLE(), self.bt, cfg["name"], self.board.ring,
                               self.board.command_bytes,
                               **({"on_conn_params": params} if params is not None else {}))

    def poll(self) -> None:
        """One turn of the board's main loop at the present board time."""
        self.board.poll()
        if self.mirror is not None:
            self.mirror.poll(self.hw.ticks_ms())

    def step(self, us: int) -> None:
        self.hw.advance(us)
        self.poll()

    async def run(self, stop: asyncio.Event, step_us: int, pause_s: float = 0.0005) -> None:
        """Turn the main loop until stop is set, yielding to the link between turns."""
        while not stop.is_set():
            self.step(step_us)
            await asyncio.sleep(pause_s)

    async def run_paced(self, stop: asyncio.Event, every_s: float) -> None:
        """Turn the main loop every `every_s` of loop time (the hardware follows
        the loop's clock) until stop is set."""
        loop = asyncio.get_running_loop()
        done = loop.create_future()

        def turn() -> None:  # a timer callback, not a task: the cheapest turn of the loop
            if stop.is_set():
                done.set_result(None)
                return
            self.poll()
            loop.call_later(every_s, turn)

        turn()
        await done

    def close(self) -> None:
        self.bt.BLE().close()
        if self.mirror is not None:
            self.mirror.close()
