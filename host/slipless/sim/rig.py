"""A simulated physics rig: a rotating coaxial capacitor inside a pulsed solenoid.

Scenario of our own, for tests and the demo (invented data): the capacitor's
charge amplifier (`cap_amp`), the coil current through a shunt
(`coil_current`) and a gyro on the rotor (`gyro_z`) are sampled by a board that
builds its frames with protocol/wire.py, as the firmware does. The rotor runs
in blocks (stopped, counter-clockwise, clockwise, ...) and the coil is pulsed
+, off, -, off within each block; it stays off while the rotor changes speed.

The amplifier sees, before its own first-order bandwidth:
  induction  d * I * w         d = induction_scale x the model's slope (predict.compute)
  leakage    b * I             flips with the field, not with rotation: the artifact
  pickup     M * dI/dt         inductive kick at switching, settles with the amplifier
  heating    e * |I|           same sign for both polarities
  spin       k * w             an offset while spinning (removed by the baselines)
plus a linear drift, a random walk, white noise that grows while spinning
(vibration), and 16-bit quantisation.
Everything is deterministic for a seed and vectorised (a few minutes in well
under a second).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.signal import lfilter

from slipless.model import physics
from slipless.model.predict import RigInputs, compute
from slipless.protocol import wire

TICK_HZ = 1_000_000
FW = (0, 3, 0)
H = ord("h")
STATUS_EVERY_S = 5.0
DESCRIPTOR_EVERY_S = 10.0
TWO_PI = 2.0 * math.pi


@dataclass
class RigConfig:
    seed: int = 1
    board: int = 1
    run: int = 1
    rate_hz: int = 1000  # cap_amp and coil_current
    gyro_rate_hz: int = 200
    gyro: bool = True  # False: no rotation stream (the rate is run metadata)
    # rotor program: one rate per block, rad/s (+ = counter-clockwise seen from +z)
    blocks_rad_s: tuple[float, ...] = (0.0, TWO_PI, -TWO_PI, 0.0, -TWO_PI, TWO_PI)
    block_s: float = 30.0
    ramp_s: float = 2.0  # coil off while the rotor changes speed
    quiet_s: float = 1.0  # and a little longer, so the first baseline sees a steady rotor
    pulse_s: float = 1.0  # each state of (+, off, -, off)
    max_cycles: int = 7  # per block: the board's pulse program holds 32 steps (firmware/config.py)
    # apparatus (predict.RigInputs)
    inner_m: float = 0.02
    outer_m: float = 0.04
    cap_length_m: float = 0.10
    eps_r: float = 1.0
    turns: float = 500
    coil_length_m: float = 0.20
    coil_radius_m: float = 0.05
    coil_ohm: float = 4.0
    supply_v: float = 8.0
    diode_v: float = 0.7
    gain: float = 100.0
    input_f: float = 10e-12
    latitude_deg: float = 48.0
    # what reaches the amplifier
    induction_scale: float = 1.0  # fraction of the model's term present (0: a null rig)
    leak_v_per_a: float = 1.0e-3  # the artifact b
    pickup_v_s_per_a: float = 2.0e-5
    heating_v_per_a: float = 2.0e-4
    spin_v_per_rad_s: float = 3.0e-3
    amp_tau_s: float = 1.6e-3  # ~100 Hz bandwidth
    drift_v_per_s: float = 5.0e-6
    walk_v_per_rt_s: float = 2.0e-4
    noise_v: float = 5.0e-3
    vibration_v_per_rad_s: float = 1.0e-3  # extra noise while spinning (makes noise unequal)
    current_noise_a: float = 2.0e-3
    gyro_noise_rad_s: float = 0.02
    gyro_bias_rad_s: float = 0.003
    # board encoding (int16 counts)
    cap_scale: float = 1e-4  # V per count: +-3.3 V full scale
    current_scale: float = 2e-4  # A per count
    gyro_scale: float = 1e-3  # rad/s per count

    @property
    def seconds(self) -> float:
        return self.block_s * len(self.blocks_rad_s)

    @property
    def inductance_h(self) -> float:
        return physics.long_solenoid_inductance(self.turns, self.coil_length_m, self.coil_radius_m)

    @property
    def amps(self) -> float:
        return self.supply_v / self.coil_ohm

    def rig_inputs(self, omega_rad_s: float = TWO_PI) -> RigInputs:
        return RigInputs(inner_m=self.inner_m, outer_m=self.outer_m, current_a=self.amps,
                         omega_rad_s=omega_rad_s, cap_length_m=self.cap_length_m,
                         eps_r=self.eps_r, turns=self.turns, coil_length_m=self.coil_length_m,
                         coil_radius_m=self.coil_radius_m, gain=self.gain, input_f=self.input_f,
                         latitude_deg=self.latitude_deg, coil_ohm=self.coil_ohm)

    def prediction(self) -> dict[str, Any]:
        return compute(self.rig_inputs())

    def truth(self) -> dict[str, float]:
        """The factorial model's coefficients this rig obeys (s = current in A,
        w = rotation in rad/s): a from heating, b from leakage, c = 0 (the spin
        offset is constant within a block, so the baselines remove it)."""
        return {"a": self.heating_v_per_a * self.amps, "b": self.leak_v_per_a, "c": 0.0,
                "d": self.induction_scale * self.prediction()["slope_V_per_A_rad_s"],
                "drift_v_per_s": self.drift_v_per_s}


@dataclass
class RigSignals:
    """Board-time samples as the decoder would give them (quantised, scaled)."""

    cfg: RigConfig
    t_s: np.ndarray  # cap_amp and coil_current sample times
    cap_v: np.ndarray
    current_a: np.ndarray
    gyro_t_s: np.ndarray
    gyro_rad_s: np.ndarray
    event_t_s: np.ndarray  # coil commands
    event_state: np.ndarray
    cap_counts: np.ndarray = field(repr=False)
    current_counts: np.ndarray = field(repr=False)
    gyro_counts: np.ndarray = field(repr=False)


def coil_program(cfg: RigConfig) -> tuple[np.ndarray, np.ndarray]:
    """Coil command times (s) and states: per block, off during the ramp and a
    quiet spell, then (+, off, -, off) cycles that fit whole before the block
    ends (at most max_cycles). Every block has the same pattern, so the board
    runs it as one program repeated per block (sim.rig_board)."""
    times, states = [], []
    cycle = 4 * cfg.pulse_s
    for k in range(len(cfg.blocks_rad_s)):
        t = k * cfg.block_s + cfg.ramp_s + cfg.quiet_s
        for _ in range(cfg.max_cycles):
            if t + cycle > (k + 1) * cfg.block_s + 1e-9:
                break
            for j, st in enumerate((1, 0, -1, 0)):
                times.append(t + j * cfg.pulse_s)
                states.append(st)
            t += cycle
    return np.round(np.asarray(times), 6), np.asarray(states, dtype=np.int64)


def rotation(cfg: RigConfig, t: np.ndarray) -> np.ndarray:
    """Rotor rate: linear ramps of ramp_s at the start of each block."""
    rates = np.asarray(cfg.blocks_rad_s, dtype=float)
    k = np.minimum((t // cfg.block_s).astype(np.int64), len(rates) - 1)
    prev = np.where(k > 0, rates[np.maximum(k - 1, 0)], rates[0])
    frac = np.clip((t - k * cfg.block_s) / cfg.ramp_s, 0.0, 1.0) if cfg.ramp_s > 0 else 1.0
    return prev + (rates[k] - prev) * frac


def coil_current(cfg: RigConfig, t: np.ndarray, cmd_t: np.ndarray,
                 cmd_state: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Current and dI/dt: L/R rise when driven, flyback-diode tail when off."""
    tau = cfg.inductance_h / cfg.coil_ohm
    vd_r = cfg.diode_v / cfg.coil_ohm
    i = np.zeros_like(t)
    didt = np.zeros_like(t)
    i0 = 0.0
    edges = np.append(cmd_t, np.inf)
    for c in range(len(cmd_t)):
        sel = slice(np.searchsorted(t, edges[c]), np.searchsorted(t, edges[c + 1]))
        x = (t[sel] - edges[c]) / tau
        if cmd_state[c] != 0:
            target = cmd_state[c] * cfg.amps
            i[sel] = target + (i0 - target) * np.exp(-x)
            didt[sel] = -(i0 - target) / tau * np.exp(-x)
            i0 = target + (i0 - target) * math.exp(-(edges[c + 1] - edges[c]) / tau) \
                if math.isfinite(edges[c + 1]) else target
        else:
            sign, mag = math.copysign(1.0, i0), abs(i0)
            raw = (mag + vd_r) * np.exp(-x) - vd_r
            i[sel] = sign * np.maximum(raw, 0.0)
            didt[sel] = np.where(raw > 0, -sign * (mag + vd_r) / tau * np.exp(-x), 0.0)
            i0 = 0.0 if not math.isfinite(edges[c + 1]) else sign * max(
                (mag + vd_r) * math.exp(-(edges[c + 1] - edges[c]) / tau) - vd_r, 0.0)
    return i, didt


def signals(cfg: RigConfig) -> RigSignals:
    rng = np.random.default_rng(cfg.seed)
    n = int(round(cfg.seconds * cfg.rate_hz))
    t = np.arange(n) / cfg.rate_hz
    cmd_t, cmd_state = coil_program(cfg)
    cur, didt = coil_current(cfg, t, cmd_t, cmd_state)
    earth = physics.earth_vertical_rate(cfg.latitude_deg)
    w = rotation(cfg, t) + earth  # the inertial rate the model uses
    truth = cfg.truth()
    into_amp = (truth["d"] * cur * w + cfg.leak_v_per_a * cur + cfg.pickup_v_s_per_a * didt
                + cfg.heating_v_per_a * np.abs(cur) + cfg.spin_v_per_rad_s * w)
    a = math.exp(-1.0 / (cfg.rate_hz * cfg.amp_tau_s))
    amp = lfilter([1.0 - a], [1.0, -a], into_amp)
    walk = np.cumsum(rng.normal(0.0, cfg.walk_v_per_rt_s / math.sqrt(cfg.rate_hz), n))
    noise = np.hypot(cfg.noise_v, cfg.vibration_v_per_rad_s * np.abs(w))
    cap = amp + cfg.drift_v_per_s * t + walk + noise * rng.standard_normal(n)
    shunt = cur + rng.normal(0.0, cfg.current_noise_a, n)
    gt = np.arange(int(round(cfg.seconds * cfg.gyro_rate_hz))) / cfg.gyro_rate_hz
    gyro = rotation(cfg, gt) + earth + cfg.gyro_bias_rad_s + rng.normal(
        0.0, cfg.gyro_noise_rad_s, gt.size)
    cap_c, cur_c, gyr_c = (_counts(cap, cfg.cap_scale), _counts(shunt, cfg.current_scale),
                           _counts(gyro, cfg.gyro_scale))
    return RigSignals(cfg, t, cap_c * cfg.cap_scale, cur_c * cfg.current_scale, gt,
                      gyr_c * cfg.gyro_scale, cmd_t, cmd_state, cap_c, cur_c, gyr_c)


def _counts(x: np.ndarray, scale: float) -> np.ndarray:
    return np.clip(np.round(x / scale), -32768, 32767).astype("<i2")


# ---- frames --------------------------------------------------------------------------
def stream_entries(cfg: RigConfig) -> list[tuple[Any, ...]]:
    us = TICK_HZ // cfg.rate_hz
    out = [(0, H, 0, us, cfg.cap_scale, 0.0, "cap_amp", "V"),
           (1, H, 0, us, cfg.current_scale, 0.0, "coil_current", "A")]
    if cfg.gyro:
        out.append((2, H, 0, TICK_HZ // cfg.gyro_rate_hz, cfg.gyro_scale, 0.0, "gyro_z", "rad/s"))
    return out


def frames(cfg: RigConfig, sig: RigSignals | None = None) -> Iterator[bytes]:
    """The run as the board would send it: descriptor, samples, coil events,
    status, end. Frames are built in sending order (sequence numbers)."""
    return (f for _, f in timed_frames(cfg, sig))


Extra = tuple[int, Callable[[wire.Encoder], int]]  # send tick, body builder (returns its size)
StatusFields = Callable[[int], tuple[int, int]]  # seq -> (queue_high, dropped)


def timed_frames(cfg: RigConfig, sig: RigSignals | None = None, extra: Sequence[Extra] = (),
                 status: StatusFields | None = None) -> Iterator[tuple[int, bytes]]:
    """(send tick, frame) of the run in sending order; `extra` frames (e.g. SYNC
    replies) join at their ticks, `status` sets the queue figures of each STATUS."""
    sig = sig if sig is not None else signals(cfg)
    enc = wire.Encoder(cfg.board, cfg.run)
    streams = stream_entries(cfg)
    per = wire.max_samples(H)
    jobs: list[tuple[int, int, tuple[Any, ...]]] = []  # (send tick, order, job)
    data = [sig.cap_counts, sig.current_counts] + ([sig.gyro_counts] if cfg.gyro else [])
    for s, counts in zip(streams, data):
        period = s[3]
        for i in range(0, counts.size, per):
            j = min(i + per, counts.size)
            jobs.append((j * period, 1, ("samples", s[0], i * period, counts[i:j])))
    ev_ticks = np.round(sig.event_t_s * TICK_HZ).astype(np.int64)
    for tick, state in zip(ev_ticks.tolist(), sig.event_state.tolist()):
        jobs.append((tick + 20_000, 2, ("events", tick, state)))  # sent with the next batch
    end_tick = int(round(cfg.seconds * TICK_HZ))
    for k in range(1, int(cfg.seconds / STATUS_EVERY_S) + 1):
        jobs.append((int(k * STATUS_EVERY_S * TICK_HZ), 3, ("status",)))
    for k in range(1, int(cfg.seconds / DESCRIPTOR_EVERY_S) + 1):
        jobs.append((int(k * DESCRIPTOR_EVERY_S * TICK_HZ), 4, ("descriptor",)))
    jobs += [(tick, 5, ("call", build)) for tick, build in extra]
    jobs.sort(key=lambda j: (j[0], j[1]))
    yield 0, enc.frame(enc.descriptor(0, TICK_HZ, FW, 5000, len(streams), streams))
    for tick, _, job in jobs:
        if job[0] == "samples":
            off = enc.begin_samples(job[1], job[2])
            raw = job[3].tobytes()
            enc.body[off : off + len(raw)] = raw
            yield tick, enc.frame(enc.finish(off + len(raw)))
        elif job[0] == "events":
            yield tick, enc.frame(enc.events([(job[1], wire.EV_COIL, job[2])]))
        elif job[0] == "status":
            queue, dropped = status(enc.seq) if status is not None else (4, 0)
            yield tick, enc.frame(enc.status(tick, 3900, 2600, 90_000, queue, dropped, 0, 45))
        elif job[0] == "call":
            yield tick, enc.frame(job[1](enc))
        else:
            yield tick, enc.frame(enc.descriptor(tick, TICK_HZ, FW, 5000, len(streams), streams))
    yield end_tick, enc.frame(enc.end(end_tick, 2, [(s[0], d.size) for s, d in zip(streams, data)]))


def capture(cfg: RigConfig) -> bytes:
    """The whole run as one byte stream (a lossless link)."""
    return b"".join(frames(cfg))
