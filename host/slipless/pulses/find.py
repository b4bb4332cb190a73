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
from slipless.pulses.data import Series, ranked

RISE_TO_TAU = math.log(9.0)  # 10-90 % rise of 1 - exp(-t/tau) takes tau ln 9
SETTLE_TAUS = 10.0  # 5 tau leaves 0.7 % of the step; twice that for the amplifier's settling
ON_FRACTION, OFF_FRACTION = 0.5, 0.1  # hysteresis levels, fractions of the peak current
PEAK_PERCENTILE = 99.5  # the peak current: a few spikes above it do not move the thresholds


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
    """pulses_in_current on plain arrays."""
    return pulses_in_current(Series(t_s, amps), on_amps, off_amps)


def pulses_in_current(cur: Series, on_amps: float | None = None,
                      off_amps: float | None = None) -> list[Pulse]:
    """Threshold |I| with hysteresis; the sign of the current gives the polarity.

    A pulse starts when |I| rises above `on_amps` and ends when it falls below
    `off_amps`. The onset is moved back to the last sample below `off_amps`,
    the end back to the last sample at 90 % of the pulse's own level. The
    series is read in chunks: only the pulses' own samples are kept at once.
    """
    peak = abs_percentile(cur, PEAK_PERCENTILE) if cur.n else 0.0
    on = ON_FRACTION * peak if on_amps is None else on_amps
    off = OFF_FRACTION * peak if off_amps is None else off_amps
    if not on > off >= 0 or peak <= 0:
        return []
    rises, low_start, low_end = _crossings(cur, on, off)
    if not rises.size:
        return []
    period = float(np.median(np.diff(cur.times(0, min(cur.n, 1000)))))  # for the edge holes
    out, done = [], -1
    for u in rises.tolist():
        if u <= done:
            continue
        r_fall = int(np.searchsorted(low_end, u, side="right"))  # first stretch below off after u
        r_start = int(np.searchsorted(low_start, u)) - 1  # last one begun before u
        if r_start < 0 or r_fall == low_end.size:
            continue  # began before the record or never ended: no baselines
        fall = max(int(low_start[r_fall]), u)
        start = min(int(low_end[r_start]) - 1, u - 1)
        amps = cur.values(u, fall)
        mag = np.abs(amps)
        level = float(np.median(mag))
        last = u + int(np.flatnonzero(mag >= 0.9 * level)[-1])
        sign = int(np.sign(np.median(amps)))
        lost = _hole(cur, start, u, period) or _hole(cur, last, fall, period)
        out.append(Pulse(float(cur.times(start, start + 1)[0]), float(cur.times(last, last + 1)[0]),
                         sign, "current", "switching edge lost on the link" if lost else ""))
        done = fall
    return out


def _crossings(cur: Series, on: float, off: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Indices where |I| rises above `on` (from not above), and the stretches
    [start, end) where |I| < off, found chunk by chunk."""
    rises, starts, ends = [], [], []
    was_above, was_below = True, False  # the first sample starts no rise
    for lo, hi in cur.chunks():
        mag = np.abs(cur.values(lo, hi))
        above = np.r_[was_above, mag > on]
        rises.append(np.flatnonzero(above[1:] & ~above[:-1]) + lo)
        below = np.r_[was_below, mag < off].astype(np.int8)
        step = np.diff(below)
        starts.append(np.flatnonzero(step == 1) + lo)
        ends.append(np.flatnonzero(step == -1) + lo)
        was_above, was_below = bool(above[-1]), bool(below[-1])
    if was_below:
        ends.append(np.array([cur.n]))

    def joined(parts: list[np.ndarray]) -> np.ndarray:
        return np.concatenate(parts).astype(np.int64) if parts else np.zeros(0, np.int64)

    return joined(rises), joined(starts), joined(ends)


def abs_percentile(s: Series, q: float) -> float:
    """np.percentile(np.abs(values), q), by counting for a store of small integers."""
    lv = s.levels()
    if lv is None:  # plain arrays (already whole), or a store of floats made whole once
        return float(np.percentile(np.abs(s.values()), q))
    mag = np.abs(lv[0])
    order = np.argsort(mag, kind="stable")
    return ranked_percentile(mag[order], lv[1][order], q)


def ranked_percentile(sorted_vals: np.ndarray, counts: np.ndarray, q: float) -> float:
    """np.percentile of the multiset `sorted_vals` repeated `counts` times, with
    numpy's default ('linear', Hyndman & Fan type 7) arithmetic step for step."""
    n = int(counts.sum())
    vi = (n - 1) * np.true_divide(q, 100)
    if vi >= n - 1:
        return float(sorted_vals[-1])
    prev = np.floor(vi)
    a, b = ranked(sorted_vals, counts, [int(prev), int(prev) + 1])
    gamma = vi - prev
    diff = b - a
    return float(b - diff * (1 - gamma) if gamma >= 0.5 else a + diff * gamma)


def _hole(cur: Series, i: int, j: int, period: float) -> bool:
    """A hole in the samples between indices i and j (inclusive)?"""
    return bool(np.max(np.diff(cur.times(i, j + 1)), initial=0.0) > EDGE_GAP * period)


def merge(events: list[Pulse], current: list[Pulse]) -> list[Pulse]:
    """Event pulses checked against the current: where an event was lost on the
    link, the current says where the pulse ended, or that it happened at all."""
    out = []
    for e, inside in zip(events, _overlapping(events, current)):
        if len(inside) == 1 and not inside[0].note and \
                inside[0].end_s < e.end_s - LOST_END * (e.end_s - e.onset_s):
            e = Pulse(e.onset_s, inside[0].end_s, e.polarity, "events+current")
        out.append(e)
    for c, hits in zip(current, _overlapping(current, events)):
        if not hits:
            out.append(c)
    return sorted(out, key=lambda p: p.onset_s)


def _overlapping(these: list[Pulse], others: list[Pulse]) -> list[list[Pulse]]:
    """For each of `these`, the `others` it overlaps (a.onset < b.end and
    b.onset < a.end), in their order. Pulses found either way follow one
    another without overlapping, so the hits are one stretch found by bisection;
    others out of order are searched one by one."""
    on = np.array([p.onset_s for p in others])
    end = np.array([p.end_s for p in others])
    if not (np.all(on[1:] >= on[:-1]) and np.all(end[1:] >= end[:-1])):
        return [[o for o in others if a.onset_s < o.end_s and o.onset_s < a.end_s] for a in these]
    first = np.searchsorted(end, [a.onset_s for a in these], side="right")  # end > a.onset
    stop = np.searchsorted(on, [a.end_s for a in these], side="left")  # onset < a.end
    return [others[i:j] for i, j in zip(first.tolist(), stop.tolist())]


def rise_time(t_s: np.ndarray, amps: np.ndarray, pulses: list[Pulse]) -> float | None:
    """rise_of on plain arrays."""
    return rise_of(Series(t_s, amps), pulses)


def rise_of(cur: Series, pulses: list[Pulse]) -> float | None:
    """Median 10-90 % rise of |I| over the pulses (linear interpolation)."""
    rises = []
    for p in pulses:
        i0, i1 = cur.span(p.onset_s, p.end_s)
        seg_t, seg = cur.times(i0, i1), np.abs(cur.values(i0, i1))
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
