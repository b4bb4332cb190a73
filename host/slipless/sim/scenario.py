"""The demo's whole run as the recorder would have captured it, with its truth.

Scenario of our own (invented data): the physics rig (sim.rig: a rotating
coaxial capacitor in a pulsed solenoid, charge amplifier, coil current, gyro)
on a board whose clock runs `skew_ppm` fast (sim.clocks). Its frames meet:
- the board's send queue overflowing once: `overflow_frames` frames in a row
  never leave the board, and the STATUS frames after it count them
  (firmware/ring.py's rule: a frame x dropped from a queue of Q is counted by
  every STATUS b with x <= b - 1 - Q);
- a rotating link (sim.shadow's rule): frames sent while the antenna faces a
  dead sector of the turn are lost, a bursty loss once per turn, plus a rare
  loss elsewhere;
- one disconnection: nothing gets through for `down_s`; after reconnecting
  the recorder asks for the missing range and the board resends what its ring
  of `ring_frames` still holds;
- one-sided receive delays and stalls (sim.clocks), and a PING every second
  answered by a SYNC frame, so `align` can fit the clock.
The board also keeps every frame it built in its mirror file. Nothing here
runs the firmware itself: the frames are built as the firmware would build
them (protocol/wire.py's encoder, as sim.rig does).
"""

from __future__ import annotations

import functools
import json
import math
import random
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from slipless.capture import EVENT, RX, TX
from slipless.protocol import wire
from slipless.sim import rig
from slipless.sim.clock_capture import ANCHOR_NS, SEND_AFTER_US, Record, _write
from slipless.sim.clocks import TICK_HZ, ClockSim, deliver

HOST_BOARD = 0xFFFF  # the laptop's own encoder (commands)


@dataclass
class ScenarioConfig:
    seed: int = 1
    seconds: float = 180.0
    skew_ppm: float = 23.0
    dead_from_deg: float = 200.0  # the antenna's dead sector of the turn
    dead_to_deg: float = 236.0
    elsewhere: float = 0.002  # share of frames lost at other angles
    overflow_at: float = 0.30  # where in the run (fraction) the queue overflows
    overflow_frames: int = 14
    queue_frames: int = 8  # Q: the board's send queue
    down_at: float = 0.62  # where in the run the link drops
    down_s: float = 3.0
    ring_frames: int = 48  # frames the board can still resend


@dataclass
class Scenario:
    cfg: ScenarioConfig
    rig: rig.RigConfig
    clock: ClockSim
    capture: Path
    mirror: Path
    frames: int = 0
    board_dropped: list[int] = field(default_factory=list)
    shadow_lost: list[int] = field(default_factory=list)
    down: list[int] = field(default_factory=list)  # seqs sent while the link was down
    resent: list[int] = field(default_factory=list)
    down_board_s: tuple[float, float] = (0.0, 0.0)
    pings: int = 0

    def truth(self) -> dict[str, float]:
        return {**self.rig.truth(), "skew_ppm": self.clock.skew_ppm}


def rig_config(cfg: ScenarioConfig) -> rig.RigConfig:
    # whole seconds per block: each stopped block then faces angle 0, outside the dead sector
    return rig.RigConfig(seed=cfg.seed, block_s=float(max(10, round(cfg.seconds / 6))))


def angle_deg(rc: rig.RigConfig, t_s: np.ndarray) -> np.ndarray:
    """True rotor angle (degrees, 0 at the start) at board seconds `t_s`."""
    grid = np.arange(0.0, rc.seconds + 0.002, 0.001)
    turned = np.concatenate([[0.0], np.cumsum(rig.rotation(rc, grid[:-1]) * 0.001)])
    return np.degrees(np.interp(t_s, grid, turned))


def _sync(request: int, t1_ns: int, t2: int, t3: int, enc: wire.Encoder) -> int:
    return enc.sync(request, t1_ns, t2, t3)


def _leaves(rc: rig.RigConfig, tick: int, frame: bytes) -> int:
    """When a frame leaves the board: a SAMPLES frame SEND_AFTER_US after its
    last sample (sim.rig orders them by the next sample's tick), others at their tick."""
    body = wire.cobs_decode(frame[:-1])
    if body[0] & 0x0F != wire.SAMPLES:
        return tick
    period = TICK_HZ // (rc.gyro_rate_hz if body[wire.HEADER_SIZE] == 2 else rc.rate_hz)
    return tick - period + SEND_AFTER_US


def _status(drops: list[int], q: int, seq: int) -> tuple[int, int]:
    counted = sum(1 for x in drops if x <= seq - 1 - q)
    return (q if drops and seq > drops[0] else 4), counted


def build(folder: Path, cfg: ScenarioConfig) -> Scenario:
    """Write `run.slcap` (the capture) and `run.mirror` into `folder`."""
    rc = rig_config(cfg)
    clock = ClockSim(seconds=rc.seconds, skew_ppm=cfg.skew_ppm, start_tick=0, offset_s=5000.0,
                     floor_s=0.004, write_floor_s=0.004, delay_mean_s=0.006, seed=cfg.seed)
    rng = np.random.default_rng(cfg.seed + 10)
    sc = Scenario(cfg, rc, clock, folder / "run.slcap", folder / "run.mirror")
    d0 = cfg.down_at * rc.seconds
    sc.down_board_s = (d0, d0 + cfg.down_s)
    down_lap = clock.laptop_s(np.array(sc.down_board_s) * TICK_HZ)

    # pings every second (none while the link is down), answered by SYNC frames
    host = wire.Encoder(HOST_BOARD, 0)
    records: list[Record] = []
    t1 = clock.offset_s + np.arange(0.5, rc.seconds - 1.0, clock.ping_every_s)
    t1 = t1[(t1 < down_lap[0]) | (t1 > down_lap[1] + 0.2)] + rng.uniform(0, 0.01, 1)
    arrive = deliver(rng, clock, t1, clock.write_floor_s, ordered=False)
    t2 = np.ceil(clock.board_s(arrive) * TICK_HZ).astype(np.int64)
    extra = []
    for k in range(t1.size):
        t1_ns = int(math.floor(t1[k] * 1e9))
        records.append((t1_ns, TX, 0, host.frame(host.ping(k + 1, t1_ns))))
        t3 = int(t2[k]) + clock.turnaround_us
        extra.append((t3, functools.partial(_sync, k + 1, t1_ns, int(t2[k]), t3)))
    sc.pings = t1.size

    sig = rig.signals(rc)
    first = list(rig.timed_frames(rc, sig, extra))  # once for the seqs and their ticks
    ticks = np.array([t for t, _ in first], dtype=np.int64)
    start = int(np.searchsorted(ticks, cfg.overflow_at * rc.seconds * TICK_HZ))
    sc.board_dropped = list(range(start, start + cfg.overflow_frames))
    status = functools.partial(_status, sc.board_dropped, cfg.queue_frames)
    built = list(rig.timed_frames(rc, sig, extra, status))
    frames = [f for _, f in built]
    sc.frames = len(frames)
    sc.mirror.write_bytes(b"".join(frames))

    t_s = ticks / TICK_HZ
    dead = np.mod(angle_deg(rc, t_s), 360.0)
    dead = (dead >= cfg.dead_from_deg) & (dead < cfg.dead_to_deg)
    down = (t_s >= sc.down_board_s[0]) & (t_s < sc.down_board_s[1])
    drop = set(sc.board_dropped)
    pick = random.Random(cfg.seed + 20)
    live: list[tuple[int, bytes]] = []
    for seq, (tick, frame) in enumerate(built):
        if seq in drop:
            continue
        if down[seq]:
            sc.down.append(seq)
        elif dead[seq] or pick.random() < cfg.elsewhere:
            sc.shadow_lost.append(seq)
        else:
            live.append((tick, frame))
    leave = np.array([_leaves(rc, t, f) for t, f in live], dtype=np.int64)
    rx = deliver(rng, clock, clock.laptop_s(leave), clock.floor_s)
    records += [(int(math.ceil(t * 1e9)), RX, 0, f) for t, (_, f) in zip(rx, live)]

    # the link drops (supervision timeout after the last packet), comes back, asks for the gap
    gone_ns = int(down_lap[0] * 1e9) + 500_000_000
    back_ns = int(down_lap[1] * 1e9)
    records.append((gone_ns, EVENT, 0, json.dumps({"event": "disconnected",
                                                   "reason": "supervision timeout"}).encode()))
    records.append((back_ns, EVENT, 0, json.dumps({"event": "connected", "mtu": 247}).encode()))
    head = int(np.searchsorted(ticks, sc.down_board_s[1] * TICK_HZ))
    held = [s for s in sc.down if s >= head - cfg.ring_frames]
    sc.resent = held
    if held:
        after = [r[0] for r in records if r[1] == RX and r[0] > back_ns]
        t = max(back_ns + 50_000_000, min(after, default=back_ns) + 10_000_000)  # once live again
        records.append((t, TX, 0, host.frame(host.resend(t1.size + 1, held[0], held[-1]))))
        for seq in held:
            t += 2_000_000
            records.append((t, RX, 0, frames[seq]))
    _write(sc.capture, records, [rc.board], ANCHOR_NS)
    return sc
