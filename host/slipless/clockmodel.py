"""One board's clock on the laptop's clock, from both kinds of evidence.

Evidence, all on the laptop's monotonic clock:
- one-way: a frame stamped with board tick x reached the laptop at y. Its
  delay y - m(x) is never negative (the tick is taken before sending), so the
  true mapping m lies on or under every point.
- two-way: a PING sent at t1, received by the board at tick t2, answered at
  tick t3, heard at t4. So m(t2) >= t1 and m(t3) <= t4.

How they are combined:
1. Shape. The lower envelope E of the one-way points (every frame: dense),
   piecewise linear over windows (default 10 min) and continuous at the
   joins, so a skew that wanders with temperature is followed
   (clockfit.fit_envelope). The exchanges add a floor: E must also stay on
   or above every (t2, t1) (less the bend a drifting clock shows, below),
   which stops a sparse envelope from tilting. Exchanges that contradict
   the receive times are dropped, and said so.
2. Level. One-way delays have a floor (the link's least latency) that one-way
   data cannot tell from the offset; the exchanges can. With board ticks
   mapped through E, each exchange gives RFC 5905's offset theta and delay
   delta, and the shift s (m = E - s) must lie in theta +- delta/2. The
   exchanges with the smallest round trips are kept; s is the middle of
   their common interval, which also starts at 0 (m <= E where E touches
   the points). Without exchanges s = 0 and the result says "one-way only".
3. Uncertainty, a bound on |m_est - m| over the run, the sum of:
   - band: half the width of that interval for s (0 without exchanges);
   - shape: the largest deviation from E of eight refits on interleaved
     eighths of the one-way points (and exchanges), at the knots and at the ends of the run
     (where extrapolation grows). An envelope's error scales with the
     inverse of its point count, so an eighth errs about eight times as much
     as the full fit and its deviation covers the full fit's error. With
     quarters the full fit's error exceeded this term in about 1 % of
     simulated runs; with eighths, over 1200 simulated runs (20 s to 30 min,
     with and without exchanges) the largest error was 0.76 of the whole
     uncertainty. It is a bound, typically 5 to 20 times the actual error;
   - curvature: |change of slope| x window / 8 at each join, the error of a
     piecewise-linear curve through a smooth drift;
   - one tick.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from slipless.clockfit import FitError, fit_envelope, onwire, piecewise, smallest_round_trips

WINDOW_S = 600.0  # piecewise window: long enough for a sharp envelope, short next to thermal drift
MIN_WINDOW_POINTS = 64  # fewer receive times than this in a window: merge it with a neighbour
MAX_PIECES = 1000  # keeps the LP small (a day in 10-min pieces is 144)
MAX_SKEW = 0.01  # 10,000 ppm: crystals are within a few hundred; beyond, the times are not this clock's
MAX_ROUND_TRIP_S = 10.0  # an exchange slower than this is no evidence (a stall, or foreign stamps)
SUBSETS = 8  # refits for the shape term (see the module doc)


@dataclass
class Exchanges:
    """Time-sync exchanges: laptop send/receive (ns, monotonic) and board ticks."""

    t1_ns: np.ndarray
    t2_tick: np.ndarray
    t3_tick: np.ndarray
    t4_ns: np.ndarray

    def __len__(self) -> int:
        return len(self.t1_ns)


@dataclass
class ClockModel:
    """laptop monotonic ns = ns0 + 1e9 * (x + r(x)), x = (tick - tick0) / tick_hz,
    r piecewise linear through (knots_x, knots_r)."""

    tick0: int
    ns0: int
    tick_hz: float
    knots_x: np.ndarray
    knots_r: np.ndarray
    points: int = 0
    exchanges: int = 0
    kept: int = 0
    band_s: float = 0.0
    shape_s: float = 0.0
    curvature_s: float = 0.0
    delay_p50_s: float = 0.0
    delay_p95_s: float = 0.0
    consistent: bool = True  # the kept exchanges agree with the envelope
    notes: list[str] = field(default_factory=list)

    @property
    def uncertainty_s(self) -> float:
        return self.band_s + self.shape_s + self.curvature_s + 1.0 / self.tick_hz

    @property
    def basis(self) -> str:
        return "two-way + one-way" if self.kept else "one-way only"

    @property
    def window_skews_ppm(self) -> np.ndarray:
        """Board rate over laptop rate, minus one, in ppm, per window (+ = board fast)."""
        slope = np.diff(self.knots_r) / np.diff(self.knots_x)
        return (1.0 / (1.0 + slope) - 1.0) * 1e6

    @property
    def skew_ppm(self) -> float:
        span = self.knots_x[-1] - self.knots_x[0]
        slope = (self.knots_r[-1] - self.knots_r[0]) / span
        return float((1.0 / (1.0 + slope) - 1.0) * 1e6)

    def x_of(self, ticks: np.ndarray) -> np.ndarray:
        return (np.asarray(ticks, dtype=np.int64) - self.tick0) / self.tick_hz

    def laptop_ns(self, ticks: np.ndarray) -> np.ndarray:
        """Laptop monotonic time (int64 ns) of board ticks."""
        x = self.x_of(ticks)
        return self.ns0 + np.rint((x + piecewise(self.knots_x, self.knots_r, x)) * 1e9).astype(np.int64)

    def offset_s(self) -> float:
        """Laptop monotonic clock minus board clock at the first knot, s."""
        return float(self.ns0 * 1e-9 + self.knots_r[0] - self.tick0 / self.tick_hz)

    def to_json(self) -> dict[str, Any]:
        return {
            "tick0": self.tick0, "ns0": self.ns0, "tick_hz": self.tick_hz,
            "knots_tick": [int(self.tick0 + round(x * self.tick_hz)) for x in self.knots_x],
            "knots_mono_ns": [int(self.ns0 + round((x + r) * 1e9))
                              for x, r in zip(self.knots_x, self.knots_r)],
            "skew_ppm": round(self.skew_ppm, 4),
            "window_skew_ppm": [round(float(s), 4) for s in self.window_skews_ppm],
            "offset_s": self.offset_s(),
            "points": self.points, "exchanges": self.exchanges, "exchanges_kept": self.kept,
            "basis": self.basis, "consistent": self.consistent,
            "delay_p50_ms": self.delay_p50_s * 1e3, "delay_p95_ms": self.delay_p95_s * 1e3,
            "uncertainty_ms": self.uncertainty_s * 1e3,
            "uncertainty_parts_ms": {"band": self.band_s * 1e3, "shape": self.shape_s * 1e3,
                                     "curvature": self.curvature_s * 1e3,
                                     "tick": 1e3 / self.tick_hz},
            "notes": self.notes,
        }


def window_knots(x: np.ndarray, window_s: float, min_points: int = MIN_WINDOW_POINTS) -> np.ndarray:
    """Equal windows of about window_s over the span of x, merged with a
    neighbour while one holds fewer than min_points points."""
    xs = np.sort(x)
    lo, hi = float(xs[0]), float(xs[-1])
    n = max(1, min(int(round((hi - lo) / window_s)), xs.size // min_points, MAX_PIECES))
    knots = np.linspace(lo, hi, n + 1)
    while knots.size > 2:
        edges = np.searchsorted(xs, knots[1:-1], side="left")
        counts = np.diff(np.r_[0, edges, xs.size])
        k = int(np.argmin(counts))
        if counts[k] >= min_points:
            break
        if k == 0:
            drop = 1
        elif k == counts.size - 1:
            drop = k
        else:
            drop = k if counts[k - 1] <= counts[k + 1] else k + 1  # join the smaller neighbour
        knots = np.delete(knots, drop)
    return knots


def fit_clock(ticks: np.ndarray, rx_ns: np.ndarray, exchanges: Exchanges | None = None,
              tick_hz: float = 1e6, window_s: float = WINDOW_S,
              extent: tuple[int, int] | None = None) -> ClockModel:
    """Fit one board and run. ticks: board ticks of one-way frames; rx_ns: laptop
    monotonic receive times; extent: the board ticks the model must serve
    (default the ticks' span), for the extrapolation part of the uncertainty."""
    ticks = np.asarray(ticks, dtype=np.int64)
    rx_ns = np.asarray(rx_ns, dtype=np.int64)
    if ticks.size < 2 or ticks.min() == ticks.max():
        raise FitError("at least two frames with distinct board ticks need receive times")
    tick0, ns0 = int(ticks.min()), int(rx_ns.min())
    x = (ticks - tick0) / tick_hz
    r = (rx_ns - ns0) * 1e-9 - x  # laptop minus board: small, well conditioned
    knots = window_knots(x, window_s)
    m = ClockModel(tick0, ns0, tick_hz, knots, fit_envelope(x, r, knots), points=int(x.size))
    floor = None
    if exchanges is not None and len(exchanges):
        m.exchanges = len(exchanges)
        exchanges = _plausible(m, exchanges)
        if len(exchanges):
            # A drifting clock is not quite piecewise linear: loosen the floor by
            # the bend the one-way curve already shows, so both sides can be met.
            slack = _curvature(knots, m.knots_r)
            x2 = m.x_of(exchanges.t2_tick)
            floor = (x2, (exchanges.t1_ns - ns0) * 1e-9 - x2 - slack)
            try:
                m.knots_r = fit_envelope(x, r, knots, floor)
            except FitError:
                floor = None
                m.notes.append("time-sync exchanges contradict the receive times: skew from "
                               "receive times only")
    if np.any(np.abs(np.diff(m.knots_r) / np.diff(knots)) > MAX_SKEW):
        raise FitError("receive times do not follow the board's ticks (skew beyond 1 %)")
    ends = [0.0, float(x.max())] if extent is None else [
        (extent[0] - tick0) / tick_hz, (extent[1] - tick0) / tick_hz]
    m.shape_s = _shape(x, r, knots, m.knots_r, np.r_[knots, ends], floor)
    m.curvature_s = _curvature(knots, m.knots_r)
    if exchanges is not None and len(exchanges):
        _level(m, exchanges)
    gap = r - piecewise(knots, m.knots_r, x)
    m.delay_p50_s, m.delay_p95_s = (float(q) for q in np.percentile(gap, [50, 95]))
    return m


def _shape(x: np.ndarray, r: np.ndarray, knots: np.ndarray, values: np.ndarray,
           at: np.ndarray, floor: tuple[np.ndarray, np.ndarray] | None) -> float:
    full = piecewise(knots, values, at)
    worst = 0.0
    for q in range(SUBSETS):
        sel = slice(q, None, SUBSETS)
        part_floor = None if floor is None else (floor[0][sel], floor[1][sel])
        try:
            part = fit_envelope(x[sel], r[sel], knots, part_floor)
        except FitError:
            continue  # too few points in some window of this subset
        worst = max(worst, float(np.max(np.abs(piecewise(knots, part, at) - full))))
    return worst


def _curvature(knots: np.ndarray, values: np.ndarray) -> float:
    if knots.size < 3:
        return 0.0
    width = np.diff(knots)
    bend = np.abs(np.diff(np.diff(values) / width))
    return float(np.max(bend * np.minimum(width[:-1], width[1:]) / 8.0))


def _onwire(m: ClockModel, ex: Exchanges) -> tuple[np.ndarray, np.ndarray]:
    """RFC 5905 offset and delay of each exchange with the board stamps mapped
    through the current curve: offset = the shift s that exchange asks for."""
    y1 = (np.asarray(ex.t1_ns, dtype=np.int64) - m.ns0) * 1e-9
    y4 = (np.asarray(ex.t4_ns, dtype=np.int64) - m.ns0) * 1e-9
    x2, x3 = m.x_of(ex.t2_tick), m.x_of(ex.t3_tick)
    m2 = x2 + piecewise(m.knots_x, m.knots_r, x2)
    m3 = x3 + piecewise(m.knots_x, m.knots_r, x3)
    return onwire(y1, m2, m3, y4)


def _plausible(m: ClockModel, ex: Exchanges) -> Exchanges:
    """Exchanges that fit the one-way envelope at all: a round trip and offset
    under MAX_ROUND_TRIP_S (anything else is a stall or stamps from another clock)."""
    theta, delta = _onwire(m, ex)
    ok = (delta >= 0) & (delta < MAX_ROUND_TRIP_S) & (np.abs(theta) < MAX_ROUND_TRIP_S)
    if not ok.all():
        m.notes.append(f"{int((~ok).sum())} time-sync exchanges ignored (implausible round trip)")
    return Exchanges(*(np.asarray(a)[ok] for a in (ex.t1_ns, ex.t2_tick, ex.t3_tick, ex.t4_ns)))


def _level(m: ClockModel, ex: Exchanges) -> None:
    """Shift the curve down by s, set from the exchanges (module doc, step 2)."""
    theta, delta = _onwire(m, ex)
    keep = smallest_round_trips(delta)
    m.kept = int(keep.size)
    hi = float(np.min(theta[keep] + delta[keep] / 2))  # m(t2) >= t1
    lo = max(0.0, float(np.max(theta[keep] - delta[keep] / 2)))  # m(t3) <= t4, m <= E
    if lo > hi:
        m.consistent = False
        m.shape_s = max(m.shape_s, lo - hi)  # the curve's shape is off by at least that
        m.notes.append(f"time-sync exchanges disagree with the receive times by {(lo - hi) * 1e3:.3f} "
                       "ms; uncertainty widened")
    m.band_s = abs(hi - lo) / 2
    m.knots_r = m.knots_r - (lo + hi) / 2


def least_squares_line(ticks: np.ndarray, rx_ns: np.ndarray, tick_hz: float = 1e6) -> ClockModel:
    """Ordinary least squares through the one-way points: the baseline the
    envelope is measured against (`make bench`). No uncertainty is claimed."""
    ticks = np.asarray(ticks, dtype=np.int64)
    rx_ns = np.asarray(rx_ns, dtype=np.int64)
    tick0, ns0 = int(ticks.min()), int(rx_ns.min())
    x = (ticks - tick0) / tick_hz
    r = (rx_ns - ns0) * 1e-9 - x
    slope, icpt = np.polyfit(x, r, 1)
    knots = np.array([0.0, max(float(x.max()), 1e-9)])
    return ClockModel(tick0, ns0, tick_hz, knots, icpt + slope * knots, points=int(x.size))


__all__ = ["ClockModel", "Exchanges", "FitError", "fit_clock", "least_squares_line", "window_knots"]
