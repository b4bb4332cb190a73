"""Calibrations measured from a run's own data (no I/O: ChannelStores in, numbers out).

Times are board seconds (tick / tick_hz, the `board_time_s` of decode's
tables). Means over a stretch get the method of batch means for their
standard error (the stretch cut into BATCHES equal parts; the spread of the
part means): neighbouring samples of a filtered amplifier are correlated, so
the plain std/sqrt(n) would be too small. That is common practice in the
analysis of correlated series.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from slipless.decode.store import ChannelStore
from slipless.errors import InputError
from slipless.model import physics

BATCHES = 10
STILL_RAD_S = 0.05  # under this the rotor stands (as loss/angle.py; common practice)
STILL_MIN_S = 5.0  # still stretches shorter than this are not used for the bias


@dataclass(frozen=True)
class Mean:
    value: float
    se: float
    n: int


def batch_mean(x: np.ndarray, batches: int = BATCHES) -> Mean:
    """Mean and its standard error by the method of batch means."""
    n = x.size
    if n < 2 * batches:
        raise InputError(f"too few samples ({n}) for a mean with an honest error: need "
                         f"{2 * batches} or more")
    usable = n - n % batches
    means = x[:usable].reshape(batches, -1).mean(axis=1)
    return Mean(float(x.mean()), float(means.std(ddof=1) / math.sqrt(batches)), n)


def window(store: ChannelStore, hz: int, t0_s: float, t1_s: float) -> np.ndarray:
    """The stream's values with board time in [t0_s, t1_s)."""
    lo, hi = (int(store.index(np.int64(round(t * hz)))) for t in (t0_s, t1_s))
    return store.values(lo, hi)


def zero(store: ChannelStore, hz: int, t0_s: float, t1_s: float) -> Mean:
    """The stream's reading over a stretch where its input is known to be zero."""
    x = window(store, hz, t0_s, t1_s)
    if x.size == 0:
        raise InputError(f"{store.info.name}: no samples between {t0_s:g} and {t1_s:g} s "
                         "board time")
    return batch_mean(x)


@dataclass(frozen=True)
class Step:
    at_s: float
    size: float  # after - before, in the stream's unit
    se: float


def step(store: ChannelStore, hz: int, at_s: float | None = None, span_s: float = 0.5,
         guard_s: float = 0.05) -> Step:
    """A step in the stream: the mean over span_s after it less the mean over
    span_s before it, guard_s kept clear on both sides (the amplifier settling).
    Without at_s, the step is where a 20 ms running mean jumps most."""
    if at_s is None:
        at_s = _largest_jump(store, hz)
    before = window(store, hz, at_s - guard_s - span_s, at_s - guard_s)
    after = window(store, hz, at_s + guard_s, at_s + guard_s + span_s)
    if min(before.size, after.size) < 2 * BATCHES:
        raise InputError(f"{store.info.name}: too few samples around the step at {at_s:.3f} s "
                         f"(span {span_s:g} s each side)")
    b, a = batch_mean(before), batch_mean(after)
    return Step(at_s, a.value - b.value, math.hypot(a.se, b.se))


def _largest_jump(store: ChannelStore, hz: int) -> float:
    t, v = store.ticks(), store.values()
    if v.size < 4:
        raise InputError(f"{store.info.name}: too few samples to find a step")
    k = max(1, int(round(0.02 * hz / store.period)))  # samples in 20 ms
    run = np.convolve(v, np.ones(k) / k, mode="valid")
    jump = np.abs(run[k:] - run[:-k])
    i = int(np.argmax(jump)) + k  # the first sample after the jump
    return float(t[min(i, t.size - 1)] / hz)


def charge_gain(step_v: Step, cal_f: float, step_volts: float) -> tuple[float, float]:
    """Amplifier gain in output volts per coulomb from a known charge step
    q = C_cal x V_step injected at its input; returns (gain, its se from the
    step's measurement alone: the caller adds the parts' tolerances)."""
    q = cal_f * step_volts
    if q == 0 or step_v.size == 0:
        raise InputError("the calibration step is zero: check --step-pF, --step-volts and "
                         "the step's time")
    return step_v.size / q, step_v.se / abs(q)


def still_stretches(store: ChannelStore, hz: int, still: float = STILL_RAD_S,
                    min_s: float = STILL_MIN_S) -> list[tuple[int, int]]:
    """Index ranges where the rate stays under `still` for at least min_s."""
    v = store.values()
    quiet = np.abs(v) < still
    edges = np.flatnonzero(np.diff(np.r_[0, quiet.astype(np.int8), 0]))
    need = int(min_s * hz / store.period)
    return [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2]) if b - a >= need]


def gyro_bias(store: ChannelStore, hz: int, latitude_deg: float | None = None) -> tuple[Mean, float]:
    """Gyro zero from the stretches where the rotor stands; returns (bias, seconds
    used). With a latitude, the Earth's rate about the vertical (omega_E sin(lat))
    is taken off: a gyro at rest on a bench feels it, the rotor's angle does not."""
    parts = still_stretches(store, hz)
    if not parts:
        raise InputError(f"{store.info.name}: the rotor never stands still for "
                         f"{STILL_MIN_S:g} s (under {STILL_RAD_S} rad/s): no gyro bias")
    x = np.concatenate([store.values(a, b) for a, b in parts])
    m = batch_mean(x)
    earth = 0.0 if latitude_deg is None else physics.earth_vertical_rate(latitude_deg)
    seconds = x.size * store.period / hz
    return Mean(m.value - earth, m.se, m.n), seconds


def gyro_scale(store: ChannelStore, hz: int, marker_ticks: np.ndarray,
               bias: float) -> tuple[float, float, int]:
    """Scale factor true/measured from index markers (one a revolution): between
    two markers the rotor turned 2 pi in their time apart; the gyro's mean over
    the same time (bias taken off) should say the same. A line through the
    origin over every revolution; returns (scale, se, revolutions used)."""
    ticks = np.sort(np.asarray(marker_ticks, np.int64))
    true, seen = [], []
    for t0, t1 in zip(ticks[:-1], ticks[1:]):
        lo, hi = int(store.index(t0)), int(store.index(t1))
        if hi - lo < 3:
            continue
        measured = float(store.values(lo, hi).mean()) - bias
        if abs(measured) < STILL_RAD_S:
            continue
        true.append(math.copysign(2 * math.pi * hz / (t1 - t0), measured))
        seen.append(measured)
    if len(true) < 3:
        raise InputError(f"{store.info.name}: fewer than 3 turns between index markers "
                         "while turning: no gyro scale")
    tv, sv = np.array(true), np.array(seen)
    scale = float(tv @ sv / (sv @ sv))
    resid = tv - scale * sv
    se = float(math.sqrt(resid @ resid / (tv.size - 1) / (sv @ sv)))
    return scale, se, int(tv.size)
