"""Finding coil pulses and placing the analysis windows around each.

A pulse is an interval with the coil driven (+1 or -1). Its windows:

    before       settle   plateau            settle   after
  [------]g|^^^^^^^^^^^^[==============]g|\\\\\\\\\\\\[------]
            onset                          switch-off

`g` is a guard of one coil time constant (the detected edges can lag the
switching a little). The baselines before and after are centred symmetrically
around the plateau, so their mean is the drift line at the plateau's centre.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from slipless.errors import InputError

RISE_TO_TAU = math.log(9.0)  # 10-90 % rise of 1 - exp(-t/tau) takes tau ln 9
SETTLE_TAUS = 10.0  # 5 tau leaves 0.7 % of the step; twice that for the amplifier's settling
ON_FRACTION, OFF_FRACTION = 0.5, 0.1  # hysteresis levels, fractions of the peak current


EDGE_GAP = 2.5  # sample periods: a longer hole at a switching edge means the edge was lost
LOST_END = 0.2  # the current ended this much earlier than the events say: an off event was lost


@dataclass
class Pulse:
    onset_s: float
    end_s: float  # switch-off
    polarity: int
    source: str = "events"
    note: str = ""  # set when the pulse cannot be used as found


@dataclass
class Windows:
    settle_s: float
    baseline_s: float
    plateau_s: float | None  # None: to the end of the pulse
    guard_s: float
    rise_s: float | None  # measured 10-90 % rise of the coil current

    def spans(self, p: Pulse) -> tuple[tuple[float, float], tuple[float, float], tuple[float, float]]:
        """(before, plateau, after) as (start, stop) in board seconds."""
        g, s, b = self.guard_s, self.settle_s, self.baseline_s
        start = p.onset_s + s
        stop = p.end_s - g if self.plateau_s is None else min(p.end_s - g, start + self.plateau_s)
        return (p.onset_s - g - b, p.onset_s - g), (start, stop), (p.end_s + s, p.end_s + s + b)


def from_events(t_s: np.ndarray, state: np.ndarray) -> list[Pulse]:
    """Coil events: a pulse runs from a non-zero state to the next change."""
    out = []
    for k in range(len(t_s) - 1):
        if state[k] != 0 and state[k + 1] != state[k]:
            out.append(Pulse(float(t_s[k]), float(t_s[k + 1]), int(np.sign(state[k]))))
    return out


def from_current(t_s: np.ndarray, amps: np.ndarray, on_amps: float | None = None,
                 off_amps: float | None = None) -> list[Pulse]:
    """Threshold |I| with hysteresis; the sign of the current gives the polarity.

    A pulse starts when |I| rises above `on_amps` and ends when it falls below
    `off_amps`. The onset is moved back to the last sample below `off_amps`,
    the end back to the last sample at 90 % of the pulse's own level.
    """
    mag = np.abs(amps)
    peak = float(np.percentile(mag, 99.5)) if mag.size else 0.0
    on = ON_FRACTION * peak if on_amps is None else on_amps
    off = OFF_FRACTION * peak if off_amps is None else off_amps
    if not on > off >= 0 or peak <= 0:
        return []
    above = mag > on
    rises = np.flatnonzero(above[1:] & ~above[:-1]) + 1
    below = np.flatnonzero(mag < off)
    out, done = [], -1
    for u in rises.tolist():
        if u <= done:
            continue
        k = int(np.searchsorted(below, u))
        if k == 0 or k == below.size:
            continue  # began before the record or never ended: no baselines
        fall = int(below[k])
        level = float(np.median(mag[u:fall]))
        last = u + int(np.flatnonzero(mag[u:fall] >= 0.9 * level)[-1])
        sign = int(np.sign(np.median(amps[u:fall])))
        start = int(below[k - 1])
        lost = _hole(t_s, start, u) or _hole(t_s, last, fall)
        out.append(Pulse(float(t_s[start]), float(t_s[last]), sign, "current",
                         "switching edge lost on the link" if lost else ""))
        done = fall
    return out


def _hole(t_s: np.ndarray, i: int, j: int) -> bool:
    """A hole in the samples between indices i and j (inclusive)?"""
    period = float(np.median(np.diff(t_s[: min(t_s.size, 1000)])))
    return bool(np.max(np.diff(t_s[i : j + 1]), initial=0.0) > EDGE_GAP * period)


def merge(events: list[Pulse], current: list[Pulse]) -> list[Pulse]:
    """Event pulses checked against the current: where an event was lost on the
    link, the current says where the pulse ended, or that it happened at all."""
    out = []
    for e in events:
        inside = [c for c in current if e.onset_s < c.end_s and c.onset_s < e.end_s]
        if len(inside) == 1 and not inside[0].note and \
                inside[0].end_s < e.end_s - LOST_END * (e.end_s - e.onset_s):
            e = Pulse(e.onset_s, inside[0].end_s, e.polarity, "events+current")
        out.append(e)
    for c in current:
        if not any(e.onset_s < c.end_s and c.onset_s < e.end_s for e in events):
            out.append(c)
    return sorted(out, key=lambda p: p.onset_s)


def rise_time(t_s: np.ndarray, amps: np.ndarray, pulses: list[Pulse]) -> float | None:
    """Median 10-90 % rise of |I| over the pulses (linear interpolation)."""
    mag = np.abs(amps)
    rises = []
    for p in pulses:
        i0, i1 = np.searchsorted(t_s, [p.onset_s, p.end_s])
        seg_t, seg = t_s[i0:i1], mag[i0:i1]
        if seg.size < 8:
            continue
        level = float(np.median(seg[seg.size // 2 :]))
        t10, t90 = _crossing(seg_t, seg, 0.1 * level), _crossing(seg_t, seg, 0.9 * level)
        if t10 is not None and t90 is not None and t90 > t10:
            rises.append(t90 - t10)
    return float(np.median(rises)) if rises else None


def _crossing(t: np.ndarray, y: np.ndarray, level: float) -> float | None:
    k = np.flatnonzero(y >= level)
    if k.size == 0:
        return None
    j = int(k[0])
    if j == 0:
        return float(t[0])
    frac = (level - y[j - 1]) / (y[j] - y[j - 1])
    return float(t[j - 1] + frac * (t[j] - t[j - 1]))


def choose_windows(pulses: list[Pulse], rise_s: float | None, sample_s: float,
                   settle_s: float | None = None, baseline_s: float | None = None,
                   plateau_s: float | None = None) -> Windows:
    """Defaults from the measured rise: settle 10 tau, guard 1 tau, baselines as
    long as fits between neighbouring pulses (and no longer than the plateau)."""
    if not pulses:
        raise InputError("no coil pulses found")
    tau = max(rise_s / RISE_TO_TAU if rise_s else 0.0, sample_s)
    if settle_s is None:
        if rise_s is None:
            raise InputError("cannot measure the coil's rise time (no current channel): "
                             "give --settle-ms")
        settle_s = max(SETTLE_TAUS * tau, 5 * sample_s)
    guard = tau
    on = np.array([p.end_s - p.onset_s for p in pulses])
    plateau_len = float(np.median(on)) - settle_s - guard
    if plateau_s is not None:
        plateau_len = min(plateau_len, plateau_s)
    if plateau_len < 4 * sample_s:
        raise InputError(f"pulses of {np.median(on) * 1e3:.0f} ms leave no plateau after "
                         f"{settle_s * 1e3:.0f} ms of settling: lower --settle-ms")
    if baseline_s is None:
        gaps = np.array([b.onset_s - a.end_s for a, b in zip(pulses, pulses[1:])])
        room = (float(np.median(gaps)) - settle_s - guard) / 2 if gaps.size else plateau_len
        baseline_s = min(plateau_len, room)
        if baseline_s < 4 * sample_s:
            raise InputError(f"the coil is off too briefly between pulses for baselines after "
                             f"{settle_s * 1e3:.0f} ms of settling: lower --settle-ms or give "
                             "--baseline-ms")
    return Windows(settle_s, baseline_s, plateau_s, guard, rise_s)
