"""A simulated rotor board that builds its frames with the board's own encoder.

The encoder is protocol/wire.py, the same file the firmware runs. The signals
are a scenario of our own for the demo: a charge amplifier on a rotating
capacitor and the coil current of a pulsed solenoid (+, off, -, off), sampled
at 1 kHz each as 16-bit counts.
"""

from __future__ import annotations

import math
import random
from collections.abc import Iterator
from dataclasses import dataclass

from slipless.protocol import wire

TICK_HZ = 1_000_000
FW = (0, 1, 0)
H = ord("h")


@dataclass
class SimConfig:
    seconds: float = 60.0
    rate_hz: int = 1000
    board: int = 1
    run: int = 1
    seed: int = 1
    pulse_s: float = 1.0  # duration of each coil state
    coil_amps: float = 2.0
    coil_tau_s: float = 0.005  # L/R of the coil
    rotation_hz: float = 1.0
    status_every_s: float = 5.0
    descriptor_every_s: float = 10.0
    start_tick: int = 0  # board tick at the first sample (set near 2**32 to test wraps)


CAP_SCALE = 1e-4  # V per count
COIL_SCALE = 1e-3  # A per count
PROGRAM = (1, 0, -1, 0)

STREAMS = (
    (0, H, 0, 1000, CAP_SCALE, 0.0, "cap_amp", "V"),
    (1, H, 0, 1000, COIL_SCALE, 0.0, "coil_current", "A"),
)


def _streams(period_us: int) -> list[tuple]:
    return [(s[0], s[1], s[2], period_us, s[4], s[5], s[6], s[7]) for s in STREAMS]


def simulate(cfg: SimConfig) -> Iterator[tuple[int, bytes]]:
    """Yield (board tick when sent, frame bytes) in sending order."""
    rng = random.Random(cfg.seed)
    enc = wire.Encoder(cfg.board, cfg.run)
    period_us = TICK_HZ // cfg.rate_hz
    streams = _streams(period_us)
    per_frame = wire.max_samples(H)
    n_total = int(cfg.seconds * cfg.rate_hz)
    t0 = cfg.start_tick
    yield t0, enc.frame(enc.descriptor(t0, TICK_HZ, FW, int(cfg.status_every_s * 1000),
                                       len(streams), streams))
    next_status = t0 + int(cfg.status_every_s * TICK_HZ)
    next_desc = t0 + int(cfg.descriptor_every_s * TICK_HZ)
    cap: list[int] = []
    coil: list[int] = []
    block_tick = t0
    state = 0
    current = 0.0
    drift = 0.0
    pending_events: list[tuple[int, int, int]] = []
    dropped = late = 0
    for i in range(n_total):
        tick = t0 + i * period_us
        t = i / cfg.rate_hz
        want = PROGRAM[int(t / cfg.pulse_s) % len(PROGRAM)]
        if want != state:
            state = want
            pending_events.append((tick, wire.EV_COIL, state))
        target = state * cfg.coil_amps
        current += (target - current) * (1 - math.exp(-1.0 / (cfg.rate_hz * cfg.coil_tau_s)))
        drift += rng.gauss(0, 2e-6)
        signal = 4e-5 * (current / cfg.coil_amps) * math.cos(2 * math.pi * 0.01 * t)
        cap.append(_count(signal + drift + rng.gauss(0, 5e-5), CAP_SCALE))
        coil.append(_count(current + rng.gauss(0, 2e-3), COIL_SCALE))
        if len(cap) == per_frame or i == n_total - 1:
            sent = tick + period_us
            yield sent, enc.frame(enc.samples(0, block_tick, H, cap))
            yield sent, enc.frame(enc.samples(1, block_tick, H, coil))
            cap, coil = [], []
            block_tick = tick + period_us
            if pending_events:
                yield sent, enc.frame(enc.events(pending_events))
                pending_events = []
            if sent >= next_status:
                yield sent, enc.frame(enc.status(sent, 3900 - i // 10000, 2500, 90_000, 3,
                                                 dropped, late, 40 + rng.randrange(60)))
                next_status += int(cfg.status_every_s * TICK_HZ)
            if sent >= next_desc:
                yield sent, enc.frame(enc.descriptor(sent, TICK_HZ, FW,
                                                     int(cfg.status_every_s * 1000),
                                                     len(streams), streams))
                next_desc += int(cfg.descriptor_every_s * TICK_HZ)
    end_tick = t0 + n_total * period_us
    yield end_tick, enc.frame(enc.end(end_tick, 2, [(0, n_total), (1, n_total)]))


def _count(value: float, scale: float) -> int:
    return max(-32768, min(32767, round(value / scale)))
