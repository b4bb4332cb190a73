"""The links a simulated board can radio over, by name: the connection
parameters the laptop's stack picks, whether the controllers use LE Data
Length Extension, and how many link-layer packets they move per connection
event. Plain values only (no bumble, no numpy): the command line imports
this to offer the names.
"""

from __future__ import annotations

from dataclasses import dataclass

# The link layer's numbers live with the budget, which does the same arithmetic
# for real links: 27-octet payloads without Data Length Extension, 251 with it
# (Core v4.2), the L2CAP and ATT notification headers, the default ATT MTU.
from slipless.board.budget import ATT_MTU_MIN as DEFAULT_MTU
from slipless.board.budget import ATT_NOTIFY_HEADER as NOTIFY_HEADER
from slipless.board.budget import L2CAP_HEADER, LL_PAYLOAD_DLE
from slipless.board.budget import LL_PAYLOAD_BASIC as LL_PAYLOAD
from slipless.board.budget import ll_pdus as packets

__all__ = ["DEFAULT_MTU", "L2CAP_HEADER", "LL_PAYLOAD", "LL_PAYLOAD_DLE", "NOTIFY_HEADER",
           "AirLink", "LINKS", "DEFAULT_LINK", "packets"]


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
