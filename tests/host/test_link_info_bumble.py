"""BumbleCentral.link_info over bumble's virtual link, against the board's own
firmware (sim.ble_board), in simulated time."""

from __future__ import annotations

import asyncio
from typing import Any

from slipless.record.transports import LINK_INFO_KEYS
from slipless.record.transports.bumble_central import BumbleCentral
from slipless.sim import ble_board, virtual_time

CONFIG = {
    "board_id": 31, "name": "rotor-info",
    "streams": [{"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 100,
                 "type": "h", "scale": 0.001, "offset": 0.0}],
}


async def session(target: str | None = None) -> dict[str, Any]:
    laptop_dev, board_dev = ble_board.virtual_pair()
    await laptop_dev.power_on()
    await board_dev.power_on()
    vb = ble_board.VirtualBoard(board_dev, CONFIG)
    stop = asyncio.Event()
    task = asyncio.create_task(vb.run(stop, 1000))
    central = BumbleCentral(laptop_dev, target, scan_s=5)
    await central.connect(lambda d: None, lambda w: None)
    info = central.link_info()
    await central.disconnect()
    stop.set()
    await task
    vb.close()
    return info


def test_bumble_link_info() -> None:
    info = virtual_time.run(session())
    assert tuple(info) == LINK_INFO_KEYS
    assert info["backend"] == "bumble" and info["backend_version"]
    assert info["address_kind"] in ("public", "random")
    assert info["mtu"] == 247 and info["write_size"] == 244
    # LE connection intervals are 7.5 ms to 4 s (Core Specification Vol 6 Part B 4.5.1,
    # from memory)
    assert 7.5 <= info["interval_ms"] <= 4000


def test_board_found_by_its_advertised_name() -> None:
    """The name rides in the board's scan response (firmware/link.py adv_payload)."""
    info = virtual_time.run(session("rotor-info"))
    assert info["address"] == "F1:F1:F1:F1:F1:F1"
