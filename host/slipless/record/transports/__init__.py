"""Laptop-side links to a board, chosen by name and imported lazily so that
decoding never needs a BLE stack: `bleak` (the laptop's own Bluetooth) and
`bumble` (a USB HCI dongle, or bumble's virtual link in tests).

A Central connects to one board, subscribes to its data characteristic and
hands every notification to `on_data`; `on_disconnect` is called when the
link drops. The recorder (record.py) owns everything else.

Link failures are LinkErrors whose class says whether trying again can help
(`retry`): the recorder backs off and tries again, or stops with the one line.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any, Protocol

from slipless.errors import BoardNotFound, ConnectFailed, LinkError, NoBluetooth, WrongGatt  # noqa: F401

BACKENDS = ("bleak", "bumble")

# The keys of Central.link_info(), in order (see each back end for how it knows them).
LINK_INFO_KEYS = ("backend", "backend_version", "os", "address", "address_kind", "mtu",
                  "write_size", "interval_ms")

_MAC = re.compile(r"^[0-9A-Fa-f]{2}(:[0-9A-Fa-f]{2}){5}$")
# CoreBluetooth names a peripheral by a UUID of its own per host (RFC 9562 text form)
_UUID = re.compile(r"^[0-9A-Fa-f]{8}-[0-9A-Fa-f]{4}-[0-9A-Fa-f]{4}-[0-9A-Fa-f]{4}-[0-9A-Fa-f]{12}$")


class Central(Protocol):
    mtu: int
    address: str
    name: str

    async def connect(self, on_data: Callable[[bytes], None],
                      on_disconnect: Callable[[str], None]) -> None: ...

    async def write(self, data: bytes) -> None: ...

    async def disconnect(self) -> None: ...

    def link_info(self) -> dict[str, Any]: ...




def address_kind(target: str) -> str | None:
    """'mac' for XX:XX:XX:XX:XX:XX, 'uuid' for a CoreBluetooth identifier, None
    for anything else (a board name)."""
    if _MAC.match(target):
        return "mac"
    if _UUID.match(target):
        return "uuid"
    return None


def package_version(name: str) -> str:
    """The installed version of a distribution, or "" (a source tree without metadata)."""
    from importlib import metadata

    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return ""


def link_facts(backend: str, address: str, kind: str | None, mtu: int, write_size: int,
               interval_ms: float | None) -> dict[str, Any]:
    """A Central's link_info(): what the link is, for the capture (LINK_INFO_KEYS)."""
    import platform

    return {"backend": backend, "backend_version": package_version(backend),
            "os": f"{platform.system()} {platform.release()}", "address": address,
            "address_kind": kind, "mtu": mtu, "write_size": write_size,
            "interval_ms": interval_ms}
