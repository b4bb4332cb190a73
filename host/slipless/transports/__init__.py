"""Laptop-side links to a board, chosen by name and imported lazily so that
decoding never needs a BLE stack: `bleak` (the laptop's own Bluetooth) and
`bumble` (a USB HCI dongle, or bumble's virtual link in tests).

A Central connects to one board, subscribes to its data characteristic and
hands every notification to `on_data`; `on_disconnect` is called when the
link drops. The recorder (record.py) owns everything else.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Protocol

BACKENDS = ("bleak", "bumble")


class Central(Protocol):
    mtu: int
    address: str
    name: str

    async def connect(self, on_data: Callable[[bytes], None],
                      on_disconnect: Callable[[str], None]) -> None: ...

    async def write(self, data: bytes) -> None: ...

    async def disconnect(self) -> None: ...


class LinkError(Exception):
    """The board could not be found, connected or subscribed to."""
