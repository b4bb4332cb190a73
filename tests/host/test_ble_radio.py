"""The board's simulated BLE stack with the radio model in it, over bumble's
virtual link (real GATT, ATT and notifications), in simulated time: a burst
of notifications leaves a few per connection event, not one per event; at a
50 ms interval without Data Length Extension bumble cuts each notification
into 27-octet ACL fragments and the model times it by its packets."""

from __future__ import annotations

import asyncio

import pytest

from slipless.protocol import wire
from slipless.record.transports.bumble_central import BumbleCentral
from slipless.sim import virtual_time
from slipless.sim.ble_board import BluetoothModule, virtual_pair
from slipless.sim.links import LINKS, AirLink
from slipless.sim.rotating_link import LinkPlan, RotatingLink


class AclCounter:
    """A bumble snooper on the board's host: the ACL data lengths it hands its controller."""

    def __init__(self) -> None:
        self.lengths: list[int] = []

    def snoop(self, packet: bytes, direction: int) -> None:
        if direction == 0 and packet[0] == 0x02:  # H4 ACL, host -> controller
            self.lengths.append(int.from_bytes(packet[3:5], "little"))


def note(enc: wire.Encoder, size: int) -> bytes:
    """A notification of `size` bytes: whole STATUS frames, then frame delimiters."""
    out = b""
    while len(out) + 40 <= size:
        out += enc.frame(enc.status(0, 3900, 2500, 1000, 1, 0, 0, 0))
    return out + bytes(size - len(out))


async def burst(n: int, air: AirLink | None = None, size: int = 0,
                acl: AclCounter | None = None) -> tuple[list[float], RotatingLink]:
    air = air or LINKS["fast"]
    laptop, board = virtual_pair(air)
    if acl is not None:
        board.host.snooper = acl
    await laptop.power_on()
    await board.power_on()
    radio = RotatingLink(LinkPlan(seed=1, interval_s=air.interval_ms / 1000,
                                  per_event=air.packets_per_event, ll_payload=air.ll_payload,
                                  host_delay_s=0.0, elsewhere=0.0), lambda _t: 0.0, lambda: 7)
    bt = BluetoothModule(board, radio)
    ble = bt.BLE()
    data = (bt.UUID(wire.DATA_UUID), 0x0012)
    cmd = (bt.UUID(wire.COMMAND_UUID), 0x000C)
    ((h_data, _),) = ble.gatts_register_services(((bt.UUID(wire.SERVICE_UUID), (data, cmd)),))
    ble.gatts_set_buffer(0, 64)
    ble.gap_advertise(100_000, adv_data=b"\x02\x01\x06\x11\x07"
                      + bytes(reversed(bytes.fromhex(wire.SERVICE_UUID.replace("-", "")))))
    loop = asyncio.get_running_loop()
    arrived: list[float] = []
    central = BumbleCentral(laptop, None, scan_s=5)
    await central.connect(lambda _d: arrived.append(loop.time()), lambda _why: None)
    await asyncio.sleep(0.1)
    enc = wire.Encoder(1, 7)
    sent_at = loop.time()
    if acl is not None:
        acl.lengths.clear()  # from here on: the notifications only
    for _ in range(n):
        ble.gatts_notify(0, h_data, note(enc, size) if size
                         else enc.frame(enc.status(0, 3900, 2500, 1000, 1, 0, 0, 0)))
    await asyncio.sleep(0.5)
    ble.close()
    return [t - sent_at for t in arrived], radio


def test_a_burst_leaves_four_per_connection_event() -> None:
    times, radio = virtual_time.run(burst(6))
    assert len(times) == 6 and sorted(radio.truth.delivered) == list(range(6))
    events = sorted({round(t, 6) for t in times})
    assert len(events) == 2 and events[1] - events[0] == pytest.approx(0.015)  # 4, then 2
    assert sum(1 for t in times if round(t, 6) == events[0]) == 4
    assert 0.0 <= events[0] < 0.015 + 1e-9


def test_at_50_ms_without_dle_a_244_byte_notification_is_ten_fragments_and_waits_for_them() -> None:
    # 244 + 3 (ATT) + 4 (L2CAP) = 251 octets in payloads of at most 27 (no Data Length
    # Extension, Bluetooth Core Specification v4.2): 9 x 27 + 8. Six packets per 50 ms
    # event (the preset's figure, common practice): notification i (from 1) ends with
    # packet 10 i, in event ceil(10 i / 6) - 1 -> events 1, 3, 4 after the first.
    acl = AclCounter()
    times, radio = virtual_time.run(burst(3, LINKS["slow-50ms"], size=244, acl=acl))
    assert acl.lengths == [27] * 9 + [8] + [27] * 9 + [8] + [27] * 9 + [8]
    assert len(times) == 3 and radio.packets(244) == 10
    assert 0.050 - 1e-9 <= times[0] < 0.100 + 1e-9  # event 1: one interval after the first
    gaps = [round((t - times[0]) / 0.050, 6) for t in times]
    assert gaps == [0.0, 2.0, 3.0]  # events 1, 3 and 4
