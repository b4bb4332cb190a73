"""The links a simulated board can radio over, by name: the connection
parameters the laptop's stack picks, whether the controllers use LE Data
Length Extension, and how many link-layer packets they move per connection
event. Plain values only (no bumble, no numpy): the command line imports
this to offer the names.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

# Largest link-layer data payload: 27 octets without Data Length Extension,
# up to 251 with it (Bluetooth Core Specification v4.2, Vol 6 Part B 2.4).
LL_PAYLOAD = 27
LL_PAYLOAD_DLE = 251
L2CAP_HEADER = 4  # length + channel id, before the ATT PDU (Core Vol 3 Part A)
NOTIFY_HEADER = 3  # ATT opcode + attribute handle, before a notification's value
DEFAULT_MTU = 23  # ATT MTU until an exchange (Core Vol 3 Part F): 20-byte notifications


@dataclass(frozen=True)
class AirLink:
    name: str
    interval_ms: float  # connection interval (1.25 ms steps, 7.5 ms .. 4 s)
    latency: int  # peripheral latency, connection events
    supervision_ms: float  # silence before the link is declared lost (10 ms steps)
    dle: bool  # LE Data Length Extension: 251-octet link-layer payloads, else 27
    packets_per_event: int  # link-layer packets the controllers move per connection event
    what: str  # one line for the demo

    @property
    def ll_payload(self) -> int:
        return LL_PAYLOAD_DLE if self.dle else LL_PAYLOAD


def packets(value_len: int, ll_payload: int) -> int:
    """A notification is an ATT PDU in an L2CAP frame, cut into link-layer
    payloads of at most ll_payload octets."""
    return max(1, math.ceil((value_len + NOTIFY_HEADER + L2CAP_HEADER) / ll_payload))


LINKS: dict[str, AirLink] = {
    # the demo's first link: a short interval with DLE, each notification one packet;
    # four packets per event is common practice for such controllers
    "fast": AirLink("fast", 15.0, 0, 500.0, True, 4,
                    "15 ms connection interval, Data Length Extension (251-octet link-layer "
                    "payloads), 4 packets per event"),
    # Linux asks for a 30-50 ms interval by default (BlueZ's kernel defaults 24 and 40
    # units) and a 420 ms supervision timeout (from memory); an adapter without DLE
    # moves 27-octet payloads; six packets per 50 ms event is common practice
    "slow-50ms": AirLink("slow-50ms", 50.0, 0, 420.0, False, 6,
                         "50 ms connection interval, no Data Length Extension (27-octet "
                         "link-layer payloads), 6 packets per event"),
}
DEFAULT_LINK = "fast"
