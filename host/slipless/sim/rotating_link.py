"""The radio between a rotor board and the laptop, as the demo models it.

Scenario of our own (invented, for the demo and tests). It sits inside the
board's simulated BLE stack (sim.ble_board.BLE) and decides when and whether
each notification and each laptop write gets across:
- connection events: notifications leave at the connection interval, a few
  link-layer packets per event, and reach the laptop's application after its
  stack's latency; a notification takes as many packets as its ATT PDU needs
  at the link-layer payload (one with Data Length Extension, about ten for a
  244-byte notification without it: sim.links) and arrives with its last;
  a laptop write reaches the board at the next event after that latency;
  each connection has its own event phase;
- the dead sector: while the board's antenna faces it (once per turn), what
  the board sends does not reach the laptop's application; elsewhere a rare
  loss at random. (A simplification: a real link layer retries, so a shadow
  shows partly as stalls and queue overflow, partly as drops in the laptop's
  stack.)
- one stall (interference): no connection event gets through for `stall_s`,
  the link survives, and the board's send queue overflows;
- one outage: the link goes silent, the supervision timeout ends the
  connection, and the board cannot be heard until `down_s` after the silence
  began; the laptop then reconnects.
It also keeps the truth: every frame that reached the laptop, every copy
lost, and every resend the laptop asked for.
"""

from __future__ import annotations

import asyncio
import math
import random
import struct
from collections.abc import Callable
from dataclasses import dataclass, field

from slipless.protocol import wire
from slipless.sim.links import LL_PAYLOAD_DLE, packets


@dataclass
class LinkPlan:
    seed: int = 1
    interval_s: float = 0.015  # connection interval
    per_event: int = 4  # link-layer packets per connection event
    ll_payload: int = LL_PAYLOAD_DLE  # octets per link-layer packet (27 without DLE)
    host_delay_s: float = 0.001  # mean latency of the laptop's stack, each way (exponential)
    dead_from_deg: float = 200.0
    dead_to_deg: float = 236.0
    elsewhere: float = 0.002  # share of notifications lost at other angles
    stall_at_s: float = 0.0  # laptop loop time; 0: no stall
    stall_s: float = 1.6
    down_at_s: float = 0.0  # laptop loop time the link goes silent; 0: never
    down_s: float = 3.0  # until the board can be heard again
    # silence before the connection is declared lost: the Core Specification allows
    # 100 ms to 32 s, more than 2 x (1 + latency) x interval (here 30 ms)
    supervision_s: float = 0.5


@dataclass
class Truth:
    """What really went over the air (frames by seq, for the board's run)."""

    delivered: dict[int, float] = field(default_factory=dict)  # seq -> first arrival (loop s)
    lost_dead: set[int] = field(default_factory=set)  # a copy was lost at the dead angle
    lost_random: set[int] = field(default_factory=set)  # a copy was lost elsewhere
    notes_dead: int = 0  # notifications lost at the dead angle
    notes_random: int = 0
    pings: int = 0  # PING commands the laptop wrote
    asked: dict[int, float] = field(default_factory=dict)  # seq -> first RESEND naming it (sent)
    outage: tuple[float, float] = (0.0, 0.0)  # loop seconds: silent from, heard again at
    disconnected_at: float = 0.0


class RotatingLink:
    def __init__(self, plan: LinkPlan, angle_deg: Callable[[float], float],
                 run: Callable[[], int]) -> None:
        self.plan = plan
        self.angle_deg = angle_deg  # loop time -> rotor angle (degrees)
        self.run = run  # the board's present run id: the truth follows that run
        self.truth = Truth()
        self._rng = random.Random(plan.seed)
        self._phase = 0.0  # connection events come at phase + k x interval_s
        self._event_k = -(1 << 62)  # the connection event being filled
        self._in_event = 0
        self._deliver_at = 0.0
        self._up = wire.Deframer()
        self._down = wire.Deframer()
        self._up.feed(b"\x00")  # both start at a frame boundary
        self._down.feed(b"\x00")
        self.on_timeout: Callable[[], None] | None = None  # set by the stack: drop the connection
        if plan.down_at_s:
            t = plan.down_at_s
            self.truth.outage = (t, t + plan.down_s)
            self.truth.disconnected_at = t + plan.supervision_s

    # ---- timing -------------------------------------------------------------------
    def _silent(self, t: float) -> float:
        """If the link is silent at t, when it can next carry something; else t."""
        p = self.plan
        for start, length in ((p.stall_at_s, p.stall_s), (p.down_at_s, p.down_s)):
            if start and start <= t < start + length - 1e-9:
                return start + length
        return t

    def _k(self, t: float) -> int:
        """The first connection event at or after t (events: phase + k x interval)."""
        return math.ceil((t - self._phase) / self.plan.interval_s - 1e-9)

    def _at(self, k: int) -> float:
        return self._phase + k * self.plan.interval_s

    def _open(self, k: int) -> int:
        """Event k, or the first after it that falls outside the stall and the outage."""
        while (quiet := self._silent(self._at(k))) != self._at(k):
            k = self._k(quiet)
        return k

    def packets(self, value_len: int) -> int:
        """Link-layer packets a notification of value_len bytes takes."""
        return packets(value_len, self.plan.ll_payload)

    def next_event(self, now: float, value_len: int = 0) -> float:
        """When a notification of value_len bytes offered now reaches the
        laptop: its packets fill the connection events from the first with
        room (per_event packets each); it arrives with the event carrying its
        last packet, plus the laptop stack's latency (one draw per event: the
        event's packets come up together)."""
        p = self.plan
        k = max(self._k(now), self._event_k)
        left = self.packets(value_len)
        while left:
            if k == self._event_k and self._in_event >= p.per_event:
                k += 1
            k = self._open(k)
            if k != self._event_k:
                self._event_k, self._in_event = k, 0
                self._deliver_at = self._at(k) + (self._rng.expovariate(1.0 / p.host_delay_s)
                                                  if p.host_delay_s else 0.0)
            took = min(left, p.per_event - self._in_event)
            self._in_event += took
            left -= took
        return self._deliver_at

    def carries_Bps(self, value_len: int) -> float:  # noqa: N802 - B/s: bytes, not bits
        """Notification bytes per second through open events, every
        notification value_len bytes (the hand arithmetic the model follows)."""
        return value_len * self.plan.per_event / self.packets(value_len) / self.plan.interval_s

    def write_arrives(self, now: float) -> float | None:
        """When a laptop write sent now reaches the board (None: never, the
        connection is dying): after the laptop stack's latency, at the next
        connection event the link can carry."""
        p = self.plan
        up = self._rng.expovariate(1.0 / p.host_delay_s) if p.host_delay_s else 0.0
        k = self._k(now + up)
        if p.down_at_s and p.down_at_s <= self._at(k) < p.down_at_s + p.down_s:
            return None
        return self._at(self._open(k))

    def audible_at(self, now: float) -> float:
        """When advertising started now can first be heard."""
        return self._silent(now) if self.plan.down_at_s <= now else now

    async def watch(self) -> None:
        """End the connection when the supervision timeout runs out."""
        if not self.plan.down_at_s:
            return
        loop = asyncio.get_running_loop()
        await asyncio.sleep(max(0.0, self.truth.disconnected_at - loop.time()))
        if self.on_timeout is not None:
            self.on_timeout()

    # ---- loss ----------------------------------------------------------------------
    def handed(self, payload: bytes) -> list[int]:
        """The board's stack took this notification: the seqs of the run in it."""
        return self._seqs(self._down, payload)

    def lost(self, seqs: list[int], now: float) -> bool:
        """Whether the laptop misses a notification going out now; keeps the truth."""
        t = self.truth
        a = self.angle_deg(now) % 360.0
        if self.plan.dead_from_deg <= a < self.plan.dead_to_deg:
            t.lost_dead.update(seqs)
            t.notes_dead += 1
            return True
        if self._rng.random() < self.plan.elsewhere:
            t.lost_random.update(seqs)
            t.notes_random += 1
            return True
        for s in seqs:
            t.delivered.setdefault(s, now)
        return False

    def wrote(self, data: bytes, now: float) -> None:
        """The laptop wrote: note its pings and the resends it asks for (when it asked)."""
        for body in self._up.feed(data):
            if len(body) < wire.HEADER_SIZE + wire.COMMAND_FIXED_SIZE:
                continue
            opcode = body[wire.HEADER_SIZE] & 0x7F
            self.truth.pings += opcode == wire.CMD_PING
            if opcode == wire.CMD_RESEND:
                first, last = struct.unpack_from(wire.RESEND_ARGS, body,
                                                 wire.HEADER_SIZE + wire.COMMAND_FIXED_SIZE)
                for s in range(first, last + 1):
                    self.truth.asked.setdefault(s, now)

    def _seqs(self, deframer: wire.Deframer, data: bytes) -> list[int]:
        run = self.run()
        out = []
        for body in deframer.feed(data):
            _, _, r, seq = struct.unpack_from(wire.HEADER, body)
            if r == run:
                out.append(seq)
        return out

    def reset(self) -> None:
        """A new connection: its events have their own phase; the board starts
        at a frame boundary again."""
        self._phase = self._rng.uniform(0.0, self.plan.interval_s)
        self._event_k, self._in_event = -(1 << 62), 0
        self._down = wire.Deframer()
        self._down.feed(b"\x00")
