"""A capture file from boards with known clocks, for alignment tests and demos.

Each board samples the same physical signals, functions of true time (the
laptop's monotonic clock stands in for it): an analog sine `sig` (V) and a
square-wave state channel `level`, whose changes also go out as marker
events. Its frames carry its own ticks; they reach the laptop through
sim.clocks' delays; the laptop pings every second and the board answers with
SYNC frames, all written into one capture like `slipless record` writes. The
truth (each board's ClockSim and the capture's wall-mono anchor) comes back
for checking.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from slipless.io.capture import RX, TX, CaptureWriter
from slipless.protocol import wire
from slipless.sim.clocks import TICK_HZ, ClockSim, deliver
from slipless.version import __version__

H = ord("h")
SIG_HZ = 0.2
SIG_SCALE = 1e-4  # V per count
ANCHOR_NS = 1_700_000_000_000_000_000  # wall minus monotonic clock of the simulated laptop
LEVEL_PERIOD_S = 1.3  # the state channel flips every half of this
SEND_AFTER_US = 300  # a full frame leaves this long after its last sample


@dataclass
class SimBoard:
    board: int
    clock: ClockSim
    rate_hz: int = 100
    per_frame: int = 20  # samples per SAMPLES frame
    lost_s: tuple[float, float] | None = None  # board seconds where `sig` frames are lost
    run: int = 1


@dataclass
class SimCapture:
    path: Path
    anchor_ns: int  # wall minus monotonic
    boards: list[SimBoard] = field(default_factory=list)

    def utc_ns(self, board: SimBoard, ticks: np.ndarray) -> np.ndarray:
        return board.clock.laptop_ns(ticks) + self.anchor_ns


def signal_sig(t_s: np.ndarray) -> np.ndarray:
    return np.sin(2 * math.pi * SIG_HZ * np.asarray(t_s))


def signal_level(t_s: np.ndarray) -> np.ndarray:
    return (np.floor(np.asarray(t_s) / (LEVEL_PERIOD_S / 2)) % 2).astype(np.int64)


Job = tuple[int, Callable[[wire.Encoder], bytes]]  # send tick, frame builder


def _board_jobs(b: SimBoard) -> list[Job]:
    """What one board sends, SYNC replies excluded, as (send tick, builder);
    frames are built later in sending order so sequence numbers follow it."""
    c = b.clock
    period = TICK_HZ // b.rate_hz
    streams = [(0, H, 0, period, SIG_SCALE, 0.0, "sig", "V"),
               (1, H, wire.FLAG_STATE, period, 1.0, 0.0, "level", "")]
    t0 = c.start_tick
    jobs: list[Job] = [(t0, lambda e: e.frame(e.descriptor(t0, TICK_HZ, (0, 9, 0), 5000, 2, streams)))]
    n = int(c.seconds * b.rate_hz)
    ticks = t0 + np.arange(n, dtype=np.int64) * period
    t_true = c.laptop_s(ticks)
    sig = np.rint(signal_sig(t_true) / SIG_SCALE).astype(int).tolist()
    level = signal_level(t_true).tolist()
    next_status = t0 + 5 * TICK_HZ
    for i in range(0, n, b.per_frame):
        send = int(ticks[min(i + b.per_frame, n) - 1]) + SEND_AFTER_US  # built on the next loop turn
        first = int(ticks[i])
        lost = b.lost_s is not None and b.lost_s[0] <= (first - t0) / TICK_HZ < b.lost_s[1]
        for stream, values in ((0, sig[i : i + b.per_frame]), (1, level[i : i + b.per_frame])):
            jobs.append((send, functools.partial(_samples, stream, first, values,
                                                 stream == 0 and lost)))
        flips = [(int(ticks[k]), wire.EV_MARKER, level[k]) for k in range(max(i, 1), min(i + b.per_frame, n))
                 if level[k] != level[k - 1]]
        if flips:  # the level's changes also go out as marker events
            jobs.append((send, functools.partial(_events, flips)))
        if send >= next_status:
            jobs.append((send, functools.partial(_status, send)))
            next_status += 5 * TICK_HZ
    end = t0 + n * period
    jobs.append((end + 1, lambda e: e.frame(e.end(end, 2, [(0, n), (1, n)]))))
    return jobs


def _samples(stream: int, tick: int, values: list[int], lost: bool, enc: wire.Encoder) -> bytes:
    f = enc.frame(enc.samples(stream, tick, H, values))
    return b"" if lost else f  # a lost frame still used its sequence number


def _events(items: list[tuple[int, int, int]], enc: wire.Encoder) -> bytes:
    return enc.frame(enc.events(items))


def _status(tick: int, enc: wire.Encoder) -> bytes:
    return enc.frame(enc.status(tick, 3900, 2500, 90000, 2, 0, 0, 40))


def _sync(request: int, t1_ns: int, t2: int, t3: int, enc: wire.Encoder) -> bytes:
    return enc.frame(enc.sync(request, t1_ns, t2, t3))


def write_clock_capture(path: Path, boards: Sequence[SimBoard], seed: int = 1,
                        anchor_ns: int = ANCHOR_NS) -> SimCapture:
    """Write a capture of every board's run (one link each) and return the truth."""
    rng = np.random.default_rng(seed)
    records: list[Record] = []
    host = wire.Encoder(0, 0)
    for src, b in enumerate(boards):
        c = b.clock
        jobs = _board_jobs(b)
        t_first = float(c.laptop_s(np.array([c.start_tick]))[0])
        t1 = t_first + np.arange(0.5, c.seconds, c.ping_every_s) + rng.uniform(0, 0.01)
        arrive = deliver(rng, c, t1, c.write_floor_s, ordered=False)
        t2 = np.ceil(c.board_s(arrive) * TICK_HZ).astype(np.int64)
        for k in range(t1.size):
            t1_ns = int(math.floor(t1[k] * 1e9))
            records.append((t1_ns, TX, src, host.frame(host.ping(k + 1, t1_ns))))
            t3 = int(t2[k]) + c.turnaround_us
            jobs.append((t3, functools.partial(_sync, k + 1, t1_ns, int(t2[k]), t3)))
        jobs.sort(key=lambda j: j[0])  # the board sends in tick order
        enc = wire.Encoder(b.board, b.run)
        frames = [(tick, build(enc)) for tick, build in jobs]
        records += _received(rng, c, src, [f for f in frames if f[1]])
    _write(path, records, [b.board for b in boards], anchor_ns)
    return SimCapture(path, anchor_ns, list(boards))


def write_timed_capture(path: Path, sent: Iterable[tuple[int, bytes]], clock: ClockSim,
                        seed: int = 1, anchor_ns: int = ANCHOR_NS) -> int:
    """A capture of frames some other simulation built ((send tick, frame) in
    sending order, e.g. sim.board.simulate), stamped with `clock`'s delays.
    No PINGs: the fit is one-way only. Returns the anchor (wall - mono)."""
    rng = np.random.default_rng(seed)
    _write(path, _received(rng, clock, 0, list(sent)), [0], anchor_ns)
    return anchor_ns


Record = tuple[int, int, int, bytes]  # mono_ns, type, source, payload


def _received(rng: np.random.Generator, c: ClockSim, src: int,
              frames: list[tuple[int, bytes]]) -> list[Record]:
    send = np.array([f[0] for f in frames], dtype=np.int64)
    rx = deliver(rng, c, c.laptop_s(send), c.floor_s + c.air_s)  # one link: notifications in order
    return [(int(math.ceil(t * 1e9)), RX, src, f) for t, (_, f) in zip(rx, frames)]


def _write(path: Path, records: list[Record], boards: list[int], anchor_ns: int) -> None:
    records.sort(key=lambda r: r[0])
    mono0 = records[0][0] - 1_000_000_000 if records else 0
    meta = {"slipless": __version__, "created_wall_ns": mono0 + anchor_ns, "created_mono_ns": mono0,
            "host": "simulation", "backend": "sim", "sync_every_s": 1.0,
            "sources": [{"address": f"sim:{b}", "name": f"board{b}"} for b in boards]}
    w = CaptureWriter(path, meta)
    for mono, typ, src, payload in records:
        w.write(typ, src, payload, mono, mono + anchor_ns)
    w.close()
