"""The board's simulated BLE stack with the radio model in it, over bumble's
virtual link (real GATT, ATT and notifications), in simulated time: a burst
of notifications leaves a few per connection event, not one per event."""

from __future__ import annotations

import asyncio

import pytest

from slipless.protocol import wire
from slipless.sim import virtual_time
from slipless.sim.ble_board import BluetoothModule, virtual_pair
from slipless.sim.rotating_link import LinkPlan, RotatingLink
from slipless.transports.bumble_central import BumbleCentral


async def burst(n: int) -> tuple[list[float], RotatingLink]:
    laptop, board = virtual_pair()
    await laptop.power_on()
    await board.power_on()
    radio = RotatingLink(LinkPlan(seed=1, interval_s=0.015, per_event=4, host_delay_s=0.0,
                                  elsewhere=0.0), lambda _t: 0.0, lambda: 7)
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
    for _ in range(n):
        ble.gatts_notify(0, h_data, enc.frame(enc.status(0, 3900, 2500, 1000, 1, 0, 0, 0)))
    await asyncio.sleep(0.2)
    ble.close()
    return [t - sent_at for t in arrived], radio


def test_a_burst_leaves_four_per_connection_event() -> None:
    times, radio = virtual_time.run(burst(6))
    assert len(times) == 6 and sorted(radio.truth.delivered) == list(range(6))
    events = sorted({round(t, 6) for t in times})
    assert len(events) == 2 and events[1] - events[0] == pytest.approx(0.015)  # 4, then 2
    assert sum(1 for t in times if round(t, 6) == events[0]) == 4
    assert 0.0 <= events[0] < 0.015 + 1e-9
