"""Simulated clocks and link delays, with the truth kept for checking.

A board clock with a skew (and optionally a skew that wanders linearly, as
with temperature) against the laptop's monotonic clock; frames leave the
board at known ticks and reach the laptop after a one-sided delay:
exponential, plus a floor, plus rare stalls during which nothing gets through;
notifications keep their order. PINGs go the other way with their own delays
and come back as SYNC exchanges. Everything is vectorised and deterministic
for a seed.

Optional, all off by default (then every draw is as before):
- a skew that swings as a sine (wander_ppm over wander_period_s), as a board
  warming and cooling does;
- a connection-interval link: packets leave only at connection events, every
  interval_s on the controller's clock (link_ppm against the laptop's), in
  either direction; a notification then also spends air_s on the air before
  the laptop can stamp it, a PING write write_floor_s;
- frames sent on a strict period of the board's clock (frame_jitter = 0):
  near lock with the connection events their wait drifts slowly, a sawtooth.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from slipless.align.clockmodel import Exchanges

TICK_HZ = 1_000_000


@dataclass
class ClockSim:
    seconds: float = 1800.0
    skew_ppm: float = 30.0  # board rate over laptop rate, minus one (+ = board fast)
    drift_ppm_per_h: float = 0.0  # how fast the skew itself changes
    offset_s: float = 5000.0  # laptop monotonic time at board tick 0
    frame_hz: float = 18.0  # frames with a receive time per second
    delay_mean_s: float = 0.015  # exponential part of every one-way delay
    floor_s: float = 0.0  # least latency board -> laptop
    write_floor_s: float = 0.0  # least latency laptop -> board
    stall_every_s: float = 120.0  # mean time between stalls (0: none)
    stall_s: float = 0.2
    ping_every_s: float = 1.0  # 0: no time-sync exchanges
    turnaround_us: int = 2000  # board ticks between a PING's arrival and its SYNC
    start_tick: int = 3_000_000
    seed: int = 1
    wander_ppm: float = 0.0  # amplitude of a sinusoidal swing of the skew
    wander_period_s: float = 1200.0
    wander_phase: float = 0.0  # radians at board tick 0
    interval_s: float = 0.0  # connection interval (0: no connection events, delays only)
    link_ppm: float = 0.0  # the controller's clock against the laptop's (+ = events come late)
    air_s: float = 0.0  # a notification's time on the air (added to every board -> laptop leg)
    frame_jitter: float = 0.5  # frames leave up to this share of a frame period late (random)

    def _skew(self, b: np.ndarray) -> np.ndarray:
        """Skew (ppm) at board seconds b."""
        k = self.drift_ppm_per_h / 3600.0
        w = 2 * np.pi / self.wander_period_s
        return self.skew_ppm + k * b + self.wander_ppm * np.sin(w * b + self.wander_phase)

    def laptop_s(self, tick: np.ndarray) -> np.ndarray:
        """True laptop time (s) of board ticks (the integral of 1 - skew)."""
        b = np.asarray(tick, dtype=np.float64) / TICK_HZ
        k = self.drift_ppm_per_h / 3600.0
        lag = self.skew_ppm * b + k * b * b / 2
        if self.wander_ppm:
            w = 2 * np.pi / self.wander_period_s
            ph = self.wander_phase
            lag = lag + self.wander_ppm * (np.cos(ph) - np.cos(w * b + ph)) / w
        return self.offset_s + b - lag * 1e-6

    def laptop_ns(self, tick: np.ndarray) -> np.ndarray:
        return self.laptop_s(tick) * 1e9

    def board_s(self, t: np.ndarray) -> np.ndarray:
        """Inverse of laptop_s (Newton; the map is a hair off the identity)."""
        t = np.asarray(t, dtype=np.float64)
        b = t - self.offset_s
        for _ in range(3):
            f = self.laptop_s(b * TICK_HZ) - t
            b = b - f / (1 - self._skew(b) * 1e-6)
        return b

    def next_event(self, t: np.ndarray) -> np.ndarray:
        """The first connection event at or after laptop time t (t itself
        without connection events). Events are counted from laptop time 0."""
        if self.interval_s <= 0:
            return t
        step = self.interval_s * (1 + self.link_ppm * 1e-6)
        return np.ceil(np.asarray(t) / step) * step


@dataclass
class ClockRun:
    """What a laptop would have seen, and the truth."""

    sim: ClockSim
    ticks: np.ndarray  # board tick of each one-way frame
    rx_ns: np.ndarray  # laptop receive time (monotonic ns)
    exchanges: Exchanges

    def error_ns(self, est_ns: np.ndarray, ticks: np.ndarray) -> np.ndarray:
        return est_ns - self.sim.laptop_ns(ticks)


def _stalled(rng: np.random.Generator, sim: ClockSim, t_send: np.ndarray) -> np.ndarray:
    """Earliest delivery time imposed by stalls (nothing passes during one)."""
    if sim.stall_every_s <= 0:
        return t_send
    t0 = sim.laptop_s(np.array([sim.start_tick]))[0]
    n = rng.poisson(sim.seconds / sim.stall_every_s)
    starts = np.sort(t0 + rng.uniform(0, sim.seconds, n))
    if n == 0:
        return t_send
    i = np.searchsorted(starts, t_send, side="right") - 1
    inside = (i >= 0) & (t_send < starts[np.maximum(i, 0)] + sim.stall_s)
    return np.where(inside, starts[np.maximum(i, 0)] + sim.stall_s, t_send)


def deliver(rng: np.random.Generator, sim: ClockSim, t_send: np.ndarray, floor_s: float,
            ordered: bool = True) -> np.ndarray:
    """Arrival times of packets handed to the radio at t_send: the next
    connection event (when the link has them), the floor, the random wait."""
    t = sim.next_event(_stalled(rng, sim, t_send)) + floor_s
    t = t + rng.exponential(sim.delay_mean_s, t_send.size)
    return np.maximum.accumulate(t) if ordered else t


def simulate_clock(sim: ClockSim) -> ClockRun:
    rng = np.random.default_rng(sim.seed)
    n = int(sim.seconds * sim.frame_hz)
    board_s = sim.start_tick / TICK_HZ + np.arange(n) / sim.frame_hz
    board_s += rng.uniform(0, sim.frame_jitter / sim.frame_hz, n)  # not perfectly periodic
    ticks = np.floor(board_s * TICK_HZ).astype(np.int64)  # stamped before sending
    rx = deliver(rng, sim, sim.laptop_s(board_s * TICK_HZ), sim.floor_s + sim.air_s)
    ex = _exchanges(rng, sim)
    return ClockRun(sim, ticks, np.ceil(rx * 1e9).astype(np.int64), ex)


def _exchanges(rng: np.random.Generator, sim: ClockSim) -> Exchanges:
    if sim.ping_every_s <= 0:
        z = np.zeros(0, dtype=np.int64)
        return Exchanges(z, z, z, z)
    t0 = sim.laptop_s(np.array([sim.start_tick]))[0]
    t1 = t0 + np.arange(0.5, sim.seconds, sim.ping_every_s)
    t1 += rng.uniform(0, 0.01, t1.size)
    arrive = deliver(rng, sim, t1, sim.write_floor_s, ordered=False)
    t2 = np.ceil(sim.board_s(arrive) * TICK_HZ).astype(np.int64)  # read after arrival
    t3 = t2 + sim.turnaround_us
    t4 = deliver(rng, sim, sim.laptop_s(t3), sim.floor_s + sim.air_s, ordered=False)
    return Exchanges(np.floor(t1 * 1e9).astype(np.int64), t2, t3, np.ceil(t4 * 1e9).astype(np.int64))
