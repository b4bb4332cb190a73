"""A long run of one board as a capture file, fast enough for hours of it.

For the long-run benchmark (bench_run8h.py) and its small test. The run:
  streams   cap_amp (int16, 1 kHz, V), coil_current (int16, 1 kHz, A),
            gyro_z (int16, 100 Hz, rad/s), coil_state (int8 state stream, 100 Hz)
  rotor     blocks of block_s (stopped, ccw, cw, stopped, cw, ccw, ...), ramps
            between them; the coil pulsed +, off, -, off (pulse_s each) inside
            each block by the board's program, every switch an EV_COIL event
  frames    full SAMPLES frames, STATUS every 5 s, DESCRIPTOR every 10 s, SYNC
            replies, END
  laptop    a PING every second (capture TX records), receive times with
            one-sided delays (sim.clocks), the board clock skew_ppm fast, a few
            disconnections (the frames sent meanwhile asked for again with RESEND
            and resent) and rare single lost notifications (most resent too)
The physics are the rig's (sim/rig.py: its coil current, its amplifier terms
and its truth), computed chunk by chunk (chunk_blocks blocks at a time) with
the drift, the random walk and the amplifier's filter carried across chunks,
so memory stays flat whatever the length. SAMPLES frames use wire's header
and sample layout, sealed with the C `cobs` package (as run_bench.write_capture
does) to write hundreds of MB in seconds; every other frame is wire.Encoder's.

Invented data, a scenario of our own.

    .venv/bin/python tests/bench/long_run.py --hours 0.5 OUT.slcap
"""

from __future__ import annotations

import argparse
import json
import math
import struct
import sys
import time
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from cobs.cobs import encode as cobs_encode
from scipy.signal import lfilter

from slipless import __version__
from slipless.io.capture import EVENT, RX, TX, CaptureWriter
from slipless.model import physics
from slipless.protocol import wire
from slipless.sim import rig
from slipless.sim.clocks import TICK_HZ, ClockSim

H, B = ord("h"), ord("b")
ANCHOR_NS = 1_700_000_000_000_000_000  # wall minus monotonic clock of the simulated laptop
FW = (0, 4, 0)
SEND_AFTER_US = 300  # a full frame leaves this long after its last sample
EVENT_DELAY_US = 20_000  # coil events go out with the next batch
GYRO_PERIOD_US = 10_000
STATE_PERIOD_US = 10_000
ROTOR_PATTERN = (0.0, rig.TWO_PI, -rig.TWO_PI, 0.0, -rig.TWO_PI, rig.TWO_PI)
_SAMPLES_HEAD = struct.Struct("<BHHIBI")  # wire.HEADER + wire.SAMPLES_FIXED
_VK_SAMPLES = (wire.VERSION << 4) | wire.SAMPLES


@dataclass
class LongRun:
    hours: float = 8.0
    seed: int = 1
    board: int = 1
    run: int = 1
    skew_ppm: float = 20.0  # board fast
    block_s: float = 30.0
    chunk_blocks: int = 20  # blocks computed at a time (10 min): bounds the generator's memory
    start_tick: int = 3_000_000
    offset_s: float = 5000.0  # laptop monotonic time at board tick 0
    outages_per_hour: float = 0.4  # at least one in any run
    outage_s: tuple[float, float] = (3.0, 12.0)
    lost_p: float = 2e-4  # single notifications lost on the radio
    lost_for_good_p: float = 0.2  # ... whose resent copy is lost too
    rig: rig.RigConfig = field(default_factory=rig.RigConfig)

    @property
    def seconds(self) -> float:
        """Whole blocks only, at least one."""
        return max(1, round(self.hours * 3600 / self.block_s)) * self.block_s

    @property
    def n_blocks(self) -> int:
        return int(round(self.seconds / self.block_s))

    def rates(self) -> np.ndarray:
        return np.resize(np.asarray(ROTOR_PATTERN), self.n_blocks)

    def clock(self) -> ClockSim:
        return ClockSim(seconds=self.seconds, skew_ppm=self.skew_ppm, offset_s=self.offset_s,
                        start_tick=self.start_tick, stall_every_s=120.0, seed=self.seed)

    def truth(self) -> dict[str, float]:
        return self.rig.truth()

    def streams(self) -> list[tuple[Any, ...]]:
        us = TICK_HZ // self.rig.rate_hz
        c = self.rig
        return [(0, H, 0, us, c.cap_scale, 0.0, "cap_amp", "V"),
                (1, H, 0, us, c.current_scale, 0.0, "coil_current", "A"),
                (2, H, 0, GYRO_PERIOD_US, c.gyro_scale, 0.0, "gyro_z", "rad/s"),
                (3, B, wire.FLAG_STATE, STATE_PERIOD_US, 1.0, 0.0, "coil_state", "")]


@dataclass
class Outage:
    down_s: float  # laptop monotonic seconds
    up_s: float


@dataclass
class Written:
    path: Path
    records: int = 0
    frames: int = 0
    samples: int = 0
    outages: list[Outage] = field(default_factory=list)
    resent: int = 0
    lost: int = 0  # frames never obtained
    pulses: int = 0  # coil switched on (either sign)
    seconds: float = 0.0


def _seal(body: bytes) -> bytes:
    return cobs_encode(body + zlib.crc32(body).to_bytes(4, "little")) + b"\x00"


# ---- physics, one chunk at a time -------------------------------------------------------
@dataclass
class _Carry:
    """What crosses a chunk boundary so the signals stay continuous."""

    walk_v: float = 0.0
    zi: np.ndarray = field(default_factory=lambda: np.zeros(1))
    prev_rate: float = 0.0


def _rotation(rates: np.ndarray, prev: float, block_s: float, ramp_s: float,
              t: np.ndarray) -> np.ndarray:
    """rig.rotation with the previous block's rate carried in (ramps at chunk starts too)."""
    k = np.minimum((t // block_s).astype(np.int64), len(rates) - 1)
    before = np.concatenate(([prev], rates[:-1]))[k]
    frac = np.clip((t - k * block_s) / ramp_s, 0.0, 1.0)
    return before + (rates[k] - before) * frac


def _counts(x: np.ndarray, scale: float) -> np.ndarray:
    return np.clip(np.round(x / scale), -32768, 32767).astype("<i2")


def _chunk_signals(lr: LongRun, rates: np.ndarray, t0_s: float, carry: _Carry,
                   rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Counts of every stream over the chunk's blocks (board seconds from t0_s)."""
    cfg = rig.RigConfig(**{**vars(lr.rig), "blocks_rad_s": tuple(rates.tolist()),
                           "block_s": lr.block_s})
    n = int(round(cfg.seconds * cfg.rate_hz))
    t = np.arange(n) / cfg.rate_hz
    cmd_t, cmd_state = rig.coil_program(cfg)
    cur, didt = rig.coil_current(cfg, t, cmd_t, cmd_state)
    earth = physics.earth_vertical_rate(cfg.latitude_deg)
    w = _rotation(rates, carry.prev_rate, lr.block_s, cfg.ramp_s, t) + earth
    truth = cfg.truth()
    into_amp = (truth["d"] * cur * w + cfg.leak_v_per_a * cur + cfg.pickup_v_s_per_a * didt
                + cfg.heating_v_per_a * np.abs(cur) + cfg.spin_v_per_rad_s * w)
    a = math.exp(-1.0 / (cfg.rate_hz * cfg.amp_tau_s))
    if not carry.zi.any():
        carry.zi = np.array([a * into_amp[0]])  # the amplifier starts settled
    amp, carry.zi = lfilter([1.0 - a], [1.0, -a], into_amp, zi=carry.zi)
    walk = carry.walk_v + np.cumsum(rng.normal(0.0, cfg.walk_v_per_rt_s / math.sqrt(cfg.rate_hz), n))
    carry.walk_v = float(walk[-1])
    noise = np.hypot(cfg.noise_v, cfg.vibration_v_per_rad_s * np.abs(w))
    cap = amp + cfg.drift_v_per_s * (t0_s + t) + walk + noise * rng.standard_normal(n)
    shunt = cur + rng.normal(0.0, cfg.current_noise_a, n)
    gt = np.arange(int(round(cfg.seconds * 1e6 / GYRO_PERIOD_US))) * (GYRO_PERIOD_US / 1e6)
    gyro = (_rotation(rates, carry.prev_rate, lr.block_s, cfg.ramp_s, gt) + earth
            + cfg.gyro_bias_rad_s + rng.normal(0.0, cfg.gyro_noise_rad_s, gt.size))
    carry.prev_rate = float(rates[-1])
    st = np.arange(int(round(cfg.seconds * 1e6 / STATE_PERIOD_US))) * (STATE_PERIOD_US / 1e6)
    idx = np.searchsorted(cmd_t, st, side="right") - 1
    state = np.where(idx >= 0, cmd_state[np.maximum(idx, 0)], 0).astype("<i1")
    return {"cap": _counts(cap, cfg.cap_scale), "cur": _counts(shunt, cfg.current_scale),
            "gyro": _counts(gyro, cfg.gyro_scale), "state": state,
            "cmd_t": cmd_t, "cmd_state": cmd_state}


# ---- frames, one chunk at a time ----------------------------------------------------------
Job = tuple[int, int, Any]  # send tick, order among equal ticks, what to build


def _sample_jobs(stream: int, counts: np.ndarray, first_tick: int, period_us: int,
                 per: int) -> list[Job]:
    out: list[Job] = []
    raw = counts.tobytes()
    size = counts.itemsize
    for i in range(0, counts.size, per):
        j = min(i + per, counts.size)
        out.append((first_tick + (j - 1) * period_us + SEND_AFTER_US, 1,
                    (stream, first_tick + i * period_us, raw[i * size : j * size])))
    return out


class _Generator:
    def __init__(self, lr: LongRun, path: Path) -> None:
        self.lr = lr
        self.clock = lr.clock()
        self.rng = np.random.default_rng(lr.seed)
        self.enc = wire.Encoder(lr.board, lr.run)
        self.host = wire.Encoder(lr.board, 0)  # the laptop's commands (its own counter)
        self.request = 0
        self.streams = lr.streams()
        self.out = Written(path)
        self.totals = [0, 0, 0, 0]
        self.last_rx_s = -math.inf  # notifications keep their order
        self.carry: list[tuple[int, int, int, bytes]] = []  # records not yet safe to write
        self.next_status = lr.start_tick + int(rig.STATUS_EVERY_S * TICK_HZ)
        self.next_desc = lr.start_tick + int(rig.DESCRIPTOR_EVERY_S * TICK_HZ)
        self.outages = self._outages()
        self.out.outages = self.outages
        self.pings = self._pings()
        self.writer: CaptureWriter | None = None
        self._horizon_s = -math.inf  # records before it are written; later ones wait

    # -- plan made up front: outages and time-sync exchanges (small arrays) --
    def _laptop_s(self, tick: float) -> float:
        return float(self.clock.laptop_s(np.array([tick]))[0])

    def _outages(self) -> list[Outage]:
        lr = self.lr
        n = max(1, int(round(lr.seconds / 3600 * lr.outages_per_hour)))
        rng = np.random.default_rng(lr.seed + 1)
        slots = np.linspace(0, lr.seconds, n + 1)
        out = []
        for k in range(n):  # one per stretch, never in its first or last 20 s
            lo, hi = slots[k] + 20.0, slots[k + 1] - 20.0 - lr.outage_s[1]
            start = float(rng.uniform(lo, max(lo, hi)))
            length = float(rng.uniform(*lr.outage_s))
            t0 = self._laptop_s(lr.start_tick + start * TICK_HZ)
            out.append(Outage(t0, t0 + length))
        return out

    def _down(self, t_s: np.ndarray, margin_s: float = 0.0) -> np.ndarray:
        bad = np.zeros(t_s.shape, dtype=bool)
        for o in self.outages:
            bad |= (t_s >= o.down_s - margin_s) & (t_s < o.up_s + margin_s)
        return bad

    def _pings(self) -> dict[str, np.ndarray]:
        c = self.clock
        rng = np.random.default_rng(self.lr.seed + 2)
        t_first = self._laptop_s(c.start_tick)
        t1 = t_first + np.arange(0.5, c.seconds, c.ping_every_s) + rng.uniform(0, 0.01)
        t1 = t1[~self._down(t1, margin_s=0.5)]  # no pings while the link is down
        arrive = t1 + c.write_floor_s + rng.exponential(c.delay_mean_s, t1.size)
        t2 = np.ceil(c.board_s(arrive) * TICK_HZ).astype(np.int64)
        return {"t1": t1, "t2": t2, "t3": t2 + c.turnaround_us}

    # -- the run --
    def write(self) -> Written:
        lr = self.lr
        t_start = time.perf_counter()
        mono0 = int((self._laptop_s(lr.start_tick) - 1.0) * 1e9)
        meta = {"slipless": __version__, "created_wall_ns": mono0 + ANCHOR_NS,
                "created_mono_ns": mono0, "host": "simulation", "backend": "sim",
                "sync_every_s": 1.0, "label": f"long run {lr.hours:g} h",
                "sources": [{"address": f"sim:{lr.board}", "name": f"board{lr.board}"}]}
        self.writer = CaptureWriter(self.out.path, meta, sync_every_s=1e9)
        self._record(mono0 + 500_000_000, EVENT, 0, _event("connected", mtu=247))
        rates = lr.rates()
        carry = _Carry(prev_rate=float(rates[0]))
        first = True
        for b0 in range(0, lr.n_blocks, lr.chunk_blocks):
            chunk = rates[b0 : b0 + lr.chunk_blocks]
            t0_s = b0 * lr.block_s
            sig = _chunk_signals(lr, chunk, t0_s, carry, self.rng)
            tick0 = lr.start_tick + int(round(t0_s * TICK_HZ))
            tick1 = lr.start_tick + int(round((t0_s + chunk.size * lr.block_s) * TICK_HZ))
            jobs = self._jobs(sig, tick0, tick1, first)
            first = False
            last = b0 + lr.chunk_blocks >= lr.n_blocks
            if last:
                jobs.append((tick1 + 1, 9, ("end", tick1)))
            self._send(jobs, tick1, last)
        assert not self.carry
        self.writer.close()
        self.out.seconds = time.perf_counter() - t_start
        return self.out

    def _jobs(self, sig: dict[str, np.ndarray], tick0: int, tick1: int, first: bool) -> list[Job]:
        per_h, per_b = wire.max_samples(H), wire.max_samples(B)
        us = self.streams[0][3]
        jobs: list[Job] = []
        if first:
            jobs.append((tick0, 0, ("descriptor", tick0)))
        for stream, key, period, per in ((0, "cap", us, per_h), (1, "cur", us, per_h),
                                         (2, "gyro", GYRO_PERIOD_US, per_h),
                                         (3, "state", STATE_PERIOD_US, per_b)):
            jobs += _sample_jobs(stream, sig[key], tick0, period, per)
            self.totals[stream] += sig[key].size
        ev_ticks = tick0 + np.round(sig["cmd_t"] * TICK_HZ).astype(np.int64)
        for tick, state in zip(ev_ticks.tolist(), sig["cmd_state"].tolist()):
            jobs.append((tick + EVENT_DELAY_US, 2, ("events", [(tick, wire.EV_COIL, state)])))
            self.out.pulses += state != 0
        while self.next_status < tick1:
            jobs.append((self.next_status, 3, ("status", self.next_status)))
            self.next_status += int(rig.STATUS_EVERY_S * TICK_HZ)
        while self.next_desc < tick1:
            jobs.append((self.next_desc, 4, ("descriptor", self.next_desc)))
            self.next_desc += int(rig.DESCRIPTOR_EVERY_S * TICK_HZ)
        p = self.pings
        sel = np.flatnonzero((p["t3"] >= tick0) & (p["t3"] < tick1))
        for k in sel.tolist():
            jobs.append((int(p["t3"][k]), 5, ("sync", k)))
        jobs.sort(key=lambda j: (j[0], j[1]))
        return jobs

    def _build(self, job: Any) -> bytes:
        enc, what = self.enc, job[0]
        if isinstance(what, int):  # SAMPLES: stream, first tick, raw values
            body = _SAMPLES_HEAD.pack(_VK_SAMPLES, enc.board, enc.run, enc.seq, what,
                                      job[1] & 0xFFFFFFFF) + job[2]
            enc.seq += 1
            self.out.samples += len(job[2]) // (1 if what == 3 else 2)
            return _seal(body)
        if what == "events":
            return enc.frame(enc.events(job[1]))
        if what == "status":
            return enc.frame(enc.status(job[1], 3900, 2600, 90_000, 6, 0, 0, 45))
        if what == "descriptor":
            return enc.frame(enc.descriptor(job[1], TICK_HZ, FW, 5000, len(self.streams),
                                            self.streams))
        if what == "sync":
            k = job[1]
            t1_ns = int(math.floor(self.pings["t1"][k] * 1e9))
            return enc.frame(enc.sync((k + 1) & 0xFFFF, t1_ns, int(self.pings["t2"][k]),
                                      int(self.pings["t3"][k])))
        return enc.frame(enc.end(job[1], 2, [(s[0], n) for s, n in zip(self.streams, self.totals)]))

    def _send(self, jobs: list[Job], tick1: int, last: bool) -> None:
        """Build the chunk's frames in sending order, deliver them, write what is safe."""
        first_seq = self.enc.seq
        frames = [self._build(j[2]) for j in jobs]
        seqs = np.arange(first_seq, first_seq + len(frames))
        self.out.frames += len(frames)
        send_s = self.clock.laptop_s(np.array([j[0] for j in jobs], dtype=np.float64))
        rx = self._deliver(send_s)
        lost = self._down(rx) | (self.rng.random(rx.size) < self.lr.lost_p)
        lost[-1] &= not last  # END always arrives live
        recs = self.carry
        rx_ns = np.ceil(rx * 1e9).astype(np.int64)
        for k in np.flatnonzero(~lost).tolist():
            recs.append((int(rx_ns[k]), RX, 0, frames[k]))
        self._outage_events(recs, self.outages, self._horizon_s,
                            math.inf if last else self._laptop_s(tick1))
        self._resends(recs, np.flatnonzero(lost), seqs, rx, frames)
        p = self.pings
        lo = self._horizon_s
        hi = math.inf if last else self._laptop_s(tick1)
        for k in np.flatnonzero((p["t1"] >= lo) & (p["t1"] < hi)).tolist():
            t1_ns = int(math.floor(p["t1"][k] * 1e9))
            self.request += 1
            recs.append((t1_ns, TX, 0, self.host.frame(self.host.ping(self.request & 0xFFFF,
                                                                       t1_ns))))
        recs.sort(key=lambda r: r[0])
        self._horizon_s = hi
        cut = len(recs) if last else int(np.searchsorted([r[0] for r in recs], hi * 1e9))
        for r in recs[:cut]:
            self._record(*r)
        self.carry = recs[cut:]

    def _deliver(self, send_s: np.ndarray) -> np.ndarray:
        """sim.clocks.deliver, with the order carried from the last chunk."""
        c = self.clock
        n_stalls = self.rng.poisson((send_s[-1] - send_s[0]) / c.stall_every_s)
        t = send_s.copy()
        for start in self.rng.uniform(send_s[0], send_s[-1], n_stalls):
            inside = (t >= start) & (t < start + c.stall_s)
            t[inside] = start + c.stall_s
        t += c.floor_s + self.rng.exponential(c.delay_mean_s, t.size)
        t[0] = max(t[0], self.last_rx_s)
        t = np.maximum.accumulate(t)
        self.last_rx_s = float(t[-1])
        return t

    @staticmethod
    def _outage_events(recs: list[tuple[int, int, int, bytes]], outages: list[Outage],
                       lo_s: float, hi_s: float) -> None:
        """The link events of the outages that begin in [lo_s, hi_s)."""
        for o in outages:
            if lo_s <= o.down_s < hi_s:
                recs.append((int(o.down_s * 1e9), EVENT, 0,
                             _event("disconnected", reason="supervision timeout")))
                recs.append((int(o.up_s * 1e9), EVENT, 0, _event("connected", mtu=247)))

    def _resends(self, recs: list[tuple[int, int, int, bytes]], lost: np.ndarray,
                 seqs: np.ndarray, rx: np.ndarray, frames: list[bytes]) -> None:
        """Every gap asked for again once frames flow after it; the board resends."""
        if lost.size == 0:
            return
        groups = np.split(lost, np.flatnonzero(np.diff(lost) > 1) + 1)
        for g in groups:
            after = int(g[-1]) + 1
            seen_s = (rx[after] if after < rx.size else rx[-1]) + 0.05
            for o in self.outages:  # the recorder asks once the link is back
                if o.down_s <= seen_s < o.up_s + 0.3:
                    seen_s = o.up_s + 0.3
            first, last = int(seqs[g[0]]), int(seqs[g[-1]])
            t_ns = int(seen_s * 1e9)
            self.request += 1
            self.host.run = self.lr.run
            cmd = self.host.frame(self.host.resend(self.request & 0xFFFF, first, last))
            self.host.run = 0
            recs.append((t_ns, EVENT, 0, _event("resend", board=self.lr.board, run=self.lr.run,
                                                 first=first, last=last)))
            recs.append((t_ns, TX, 0, cmd))
            arrive = seen_s + 0.03 + 0.002 * np.arange(g.size)
            gone = (self.rng.random(g.size) < self.lr.lost_for_good_p) & (g.size == 1)
            for k, t, bad in zip(g.tolist(), arrive.tolist(), gone.tolist()):
                if bad:
                    self.out.lost += 1
                    continue
                recs.append((int(math.ceil(t * 1e9)), RX, 0, frames[k]))
                self.out.resent += 1

    def _record(self, mono_ns: int, type_: int, source: int, payload: bytes) -> None:
        assert self.writer is not None
        self.writer.write(type_, source, payload, mono_ns, mono_ns + ANCHOR_NS)
        self.out.records += 1


def _event(name: str, **fields: Any) -> bytes:
    return json.dumps({"event": name, **fields}).encode()


def write_long_run(path: Path, lr: LongRun | None = None) -> Written:
    """Write the run's capture to `path`; return what went into it."""
    return _Generator(lr if lr is not None else LongRun(), path).write()


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("out", type=Path)
    p.add_argument("--hours", type=float, default=8.0)
    p.add_argument("--seed", type=int, default=1)
    a = p.parse_args(argv)
    w = write_long_run(a.out, LongRun(hours=a.hours, seed=a.seed))
    print(f"{a.out}: {a.out.stat().st_size / 1e6:.1f} MB, {w.records:,} records, "
          f"{w.frames:,} frames, {w.samples:,} samples, {len(w.outages)} outages, "
          f"{w.resent:,} resent, {w.lost} lost, {w.pulses:,} pulses, {w.seconds:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
