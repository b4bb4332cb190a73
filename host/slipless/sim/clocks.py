"""Simulated clocks and link delays, with the truth kept for checking.

A board clock with a skew (and optionally a skew that wanders linearly, as
with temperature) against the laptop's monotonic clock; frames leave the
board at known ticks and reach the laptop after a one-sided delay:
exponential, plus a floor, plus rare stalls during which nothing gets through;
notifications keep their order. PINGs go the other way with their own delays
and come back as SYNC exchanges. Everything is vectorised and deterministic
for a seed.
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

    def laptop_s(self, tick: np.ndarray) -> np.ndarray:
        """True laptop time (s) of board ticks."""
        b = np.asarray(tick, dtype=np.float64) / TICK_HZ
        k = self.drift_ppm_per_h / 3600.0
        return self.offset_s + b - (self.skew_ppm * b + k * b * b / 2) * 1e-6

    def laptop_ns(self, tick: np.ndarray) -> np.ndarray:
        return self.laptop_s(tick) * 1e9

    def board_s(self, t: np.ndarray) -> np.ndarray:
        """Inverse of laptop_s (Newton; the map is a hair off the identity)."""
        t = np.asarray(t, dtype=np.float64)
        b = t - self.offset_s
        for _ in range(3):
            f = self.laptop_s(b * TICK_HZ) - t
            k = self.drift_ppm_per_h / 3600.0
            b = b - f / (1 - (self.skew_ppm + k * b) * 1e-6)
        return b


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
    t = _stalled(rng, sim, t_send) + floor_s + rng.exponential(sim.delay_mean_s, t_send.size)
    return np.maximum.accumulate(t) if ordered else t


def simulate_clock(sim: ClockSim) -> ClockRun:
    rng = np.random.default_rng(sim.seed)
    n = int(sim.seconds * sim.frame_hz)
    board_s = sim.start_tick / TICK_HZ + np.arange(n) / sim.frame_hz
    board_s += rng.uniform(0, 0.5 / sim.frame_hz, n)  # frames are not perfectly periodic
    ticks = np.floor(board_s * TICK_HZ).astype(np.int64)  # stamped before sending
    rx = deliver(rng, sim, sim.laptop_s(board_s * TICK_HZ), sim.floor_s)
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
    t4 = deliver(rng, sim, sim.laptop_s(t3), sim.floor_s, ordered=False)
    return Exchanges(np.floor(t1 * 1e9).astype(np.int64), t2, t3, np.ceil(t4 * 1e9).astype(np.int64))
