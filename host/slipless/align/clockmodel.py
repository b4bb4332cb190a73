"""One board's clock on the laptop's clock, from both kinds of evidence.

Evidence, all on the laptop's monotonic clock:
- one-way: a frame stamped with board tick x reached the laptop at y. Its
  delay y - m(x) is never negative (the tick is taken before sending), so the
  true mapping m lies on or under every point. A SYNC reply built at tick t3
  and heard at t4 is one more such point.
- forward legs: a PING stamped t1 on the laptop before it is written reached
  the board at tick t2, so m(t2) >= t1. The write does not wait behind the
  board's send queue, so this holds, and stays tight, whatever that queue does.

Assumptions: both kinds of delay are never negative (the stamps are taken
before sending and after receiving); m is piecewise linear over pieces
(continuous at the joins) to within the curvature term below; the board's
rate is within 1 % of the laptop's (MAX_SKEW); for the level (step 3), the
least latency board -> laptop equals that of laptop -> board plus a known
asymmetry (default 0): the exchanges measure only the sum of the two. Nothing is assumed
about how long a frame waits: on a link slower than the board (a full queue,
every frame waiting about as long) the receive times lie far above m and the
bound says so.

How they are combined:
0. Pieces. The --window windows (default 10 min) are cut into 1, 2, 4 or 8
   equal pieces, the cut with the least one-way error bound (refit spread +
   chord term, see `choose_knots`) winning: a board whose skew swings with
   temperature gets short pieces, a steady one keeps the long ones.
1. Band. Every curve on or under the one-way points and on or over the
   forward legs is a clock the evidence allows. The band is solved on
   half windows (BAND_PARTS), closer to a drifting clock than the model's
   own pieces: at each of their knots and at the ends of the span the model
   serves, a linear program gives the lowest and highest value such a curve
   takes there (clockfit.feasible_band; only the windows near the point,
   which can only widen it). m and the estimate are both linear between
   those knots, so |m_est - m| peaks at them and the band bounds it there
   without any statistics. If no curve fits, the least loosening that lets
   one is the shape part of the bound, and noted. When step 0 cut the pieces
   shorter than the windows, a second band on the windows' halves (more
   points a piece, longer chords) is solved too; m lies in both, so the
   bound is taken on their intersection.
2. Shape. Two envelopes: the lower envelope of the one-way points (the
   least summed gap above them: clockfit.fit_envelope) and the upper
   envelope of the forward legs (the same, mirrored). Each is refitted on
   interleaved eighths of its points; the spread of those refits says how
   well it is pinned. The shape is their mean weighted by the inverse square
   of the spreads: on a quick link the dense receive times lead (their
   floor, the link's least latency, is met again and again), on a saturated
   one the waits vary and the forward legs lead (said so in the notes).
   Exchanges with an implausible round trip or offset (beyond
   MAX_ROUND_TRIP_S) are dropped first, and said so. Near lock (the board's
   rate and the connection events' almost equal) frames sent on the board's
   clock wait a slowly creeping time for their event: the receive times'
   least delay ramps, a sawtooth's tooth. The pings are timed by the laptop,
   so their waits stay random: a steady trend between the two envelopes
   beyond twice their spreads is taken out of the one-way envelope (noted).
3. Level. The shifts that keep the shape under every one-way point (s >= lo)
   and over every forward leg (s <= hi) span hi - lo, the least round trip:
   the least latency of both ways summed. The shape is shifted to the
   middle plus half the given asymmetry (RFC 5905's offset +- delay/2,
   pooled over all exchanges; that middle is right only when both ways are
   equally fast, hence the asymmetry). The model keeps hi - lo and the
   asymmetry, and its JSON states the assumption (LEVEL_ASSUMPTION).
4. Uncertainty, a bound on |m_est - m| over the run, the sum of:
   - band: the largest distance from the estimate to either edge of the
     band at the knots and ends (so an estimate near one edge of a wide band
     gets the whole width: the data cannot place m closer);
   - shape: with exchanges, the loosening of step 1 (usually 0); without
     exchanges (no band), the largest deviation from the one-way envelope
     of its eight refits at the knots and ends (where extrapolation grows).
     An envelope's error scales with the inverse of its point count, so an
     eighth errs about eight times as much as the full fit and its deviation
     covers the full fit's error. Over 300 simulated runs (20 s to 30 min,
     skew drifting by up to 12 ppm an hour or not) the largest error was 0.60
     of the whole uncertainty (0.71 with exchanges). It assumes the
     delay floor is met often; without exchanges nothing can check that, and
     the result says "one-way only";
   - curvature: the error of straight pieces through a smooth drift, rate x
     width**2 / 8 (a parabola against its chord), the rate of change of slope
     taken from an envelope on half windows; for the band's half-window
     pieces with exchanges, the model's own windows without (both sides of
     the band are loosened by it);
   - one tick.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from slipless.align.clockfit import (
    FitError,
    Vertices,
    feasible_band,
    fit_envelope,
    hull_candidates,
    least_loosening,
    onwire,
    piecewise,
    window_vertices,
)

WINDOW_S = 600.0  # piecewise window: long enough for a sharp envelope, short next to thermal drift
MIN_WINDOW_POINTS = 64  # fewer receive times than this in a window: merge it with a neighbour
MAX_PIECES = 1000  # keeps the LP small (a day in 10-min pieces is 144)
MAX_SKEW = 0.01  # 10,000 ppm: crystals are within a few hundred; beyond, the times are not this clock's
MAX_ROUND_TRIP_S = 10.0  # an exchange slower than this is no evidence (a stall, or foreign stamps)
SUBSETS = 8  # refits for the shape term (see the module doc)
BAND_PARTS = 2  # the band's pieces per window (module doc, step 1)
PIECE_SPLITS = (1, 2, 4, 8)  # candidate pieces per --window window, chosen by BIC (module doc)
MIN_PIECE_S = 60.0  # no piece shorter: drift bends a clock over minutes, not seconds
LEVEL_ASSUMPTION = ("the least latency board -> laptop (a notification's, air time included) "
                    "equals the least latency laptop -> board (a PING write's) plus asymmetry_ms; "
                    "the exchanges measure only their sum (least_round_trip_ms)")
CONFLICT_MARGIN_S = 1e-9  # on top of the least loosening, so the loosened band LP is not borderline


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
    consistent: bool = True  # the exchanges and receive times fit one curve of this form
    one_way_weight: float = 1.0  # share of the receive times' envelope in the shape
    asymmetry_s: float = 0.0  # least latency board -> laptop minus laptop -> board, assumed
    least_round_trip_s: float | None = None  # both ways' least latency summed (with exchanges)
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

    def level_json(self) -> dict[str, Any]:
        """What the level rests on: the exchanges measure the sum of both ways'
        least latency, never its split; the split is assumed."""
        if self.least_round_trip_s is None:
            return {"assumption": "one-way only: the laptop time includes the link's least "
                                  "latency board -> laptop, which receive times cannot measure"}
        return {"least_round_trip_ms": round(self.least_round_trip_s * 1e3, 4),
                "asymmetry_ms": round(self.asymmetry_s * 1e3, 4),
                "assumption": LEVEL_ASSUMPTION}

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
            "shape_weight_one_way": round(self.one_way_weight, 4),
            "pieces": int(self.knots_x.size - 1),
            "level": self.level_json(),
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
              extent: tuple[int, int] | None = None, asymmetry_s: float = 0.0) -> ClockModel:
    """Fit one board and run. ticks: board ticks of one-way frames; rx_ns: laptop
    monotonic receive times; window_s: the longest piece (shorter ones where
    the data ask, see `choose_knots`); extent: the board ticks the model must
    serve (default the ticks' span), for the extrapolation part of the
    uncertainty; asymmetry_s: the least latency board -> laptop minus that of
    laptop -> board, which the level assumes (module doc, step 3)."""
    ticks = np.asarray(ticks, dtype=np.int64)
    rx_ns = np.asarray(rx_ns, dtype=np.int64)
    if ticks.size < 2 or ticks.min() == ticks.max():
        raise FitError("at least two frames with distinct board ticks need receive times")
    tick0, ns0 = int(ticks.min()), int(rx_ns.min())
    x = (ticks - tick0) / tick_hz
    r = (rx_ns - ns0) * 1e-9 - x  # laptop minus board: small, well conditioned
    base = window_knots(x, window_s)
    knots, values, hull = choose_knots(x, r, base)
    m = ClockModel(tick0, ns0, tick_hz, knots, values, points=int(x.size), asymmetry_s=asymmetry_s)
    ends = [0.0, float(x.max())] if extent is None else [
        (extent[0] - tick0) / tick_hz, (extent[1] - tick0) / tick_hz]
    at = np.unique(np.r_[knots, ends])  # where |m_est - m| peaks: both are linear between
    if exchanges is not None and len(exchanges):
        m.exchanges = len(exchanges)
        exchanges = _plausible(m, exchanges)
        if len(exchanges):
            try:
                _between(m, x, r, hull, exchanges, at, base)
            except FitError as exc:  # the LP solver gave up: keep the one-way fit
                m.notes.append(f"time-sync exchanges not used ({exc}): skew and offset from "
                               "receive times only")
    if not m.kept:
        m.shape_s = _shape(x, r, knots, m.knots_r, at) or 0.0
        m.curvature_s = _chord(_drift_rate(knots, x, r, m.knots_r, hull), knots)
    if np.any(np.abs(np.diff(m.knots_r) / np.diff(knots)) > MAX_SKEW):
        raise FitError("receive times do not follow the board's ticks (skew beyond 1 %)")
    gap = r - piecewise(knots, m.knots_r, x)
    m.delay_p50_s, m.delay_p95_s = (float(q) for q in np.percentile(gap, [50, 95]))
    return m


def choose_knots(x: np.ndarray, r: np.ndarray,
                 base: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(knots, envelope values, hull candidates): the --window windows (base) cut
    into 1, 2, 4 or 8 equal pieces (none under MIN_PIECE_S, none with fewer
    than MIN_WINDOW_POINTS points), the cut with the least one-way error
    bound winning: the spread of refits on interleaved eighths (a
    cross-validation: each eighth is a fold; short pieces hold few points and
    spread more) plus the chord term (long pieces miss a bending clock by
    rate x width**2 / 8). Both are the uncertainty's own terms (module doc)."""
    hull = hull_candidates(x, r, _split(base, PIECE_SPLITS[-1] * BAND_PARTS))  # holds every cut's
    xs = np.sort(x)
    best: tuple[float, np.ndarray, np.ndarray] | None = None
    for parts in PIECE_SPLITS:
        knots = _split(base, parts)
        counts = np.diff(np.searchsorted(xs, knots[1:-1], side="left"), prepend=0, append=xs.size)
        if best is not None and (np.min(np.diff(knots)) < MIN_PIECE_S
                                 or counts.min() < MIN_WINDOW_POINTS):
            break
        try:
            values = fit_envelope(x, r, knots, hull_of=hull)
        except FitError:
            if best is None:
                raise
            break
        spread = _shape(x, r, knots, values, np.unique(np.r_[knots, 0.0, x.max()]))
        if spread is None and best is not None:
            break
        score = (spread or 0.0) + _chord(_drift_rate(knots, x, r, values, hull), knots)
        if best is not None and score >= best[0]:
            break  # finer cuts only spread more from here
        best = (score, knots, values)
    assert best is not None
    return best[1], best[2], hull


def _between(m: ClockModel, x: np.ndarray, r: np.ndarray, hull: np.ndarray, ex: Exchanges,
             at: np.ndarray, base: np.ndarray) -> None:
    """Two-way fit (module doc, step 2): the band the evidence leaves, a shape
    from both of its sides, the level in the band; the band gives the bound.
    base: the --window windows the pieces were cut from (a second band).
    Changes m only once everything is solved (a FitError leaves the one-way fit)."""
    knots = m.knots_x
    x2, x3 = m.x_of(ex.t2_tick), m.x_of(ex.t3_tick)
    y1 = (np.asarray(ex.t1_ns, dtype=np.int64) - m.ns0) * 1e-9
    y4 = (np.asarray(ex.t4_ns, dtype=np.int64) - m.ns0) * 1e-9
    weight, shape, rate, tilt = _blend(m.knots_r, x, r, hull, x2, y1 - x2, knots, at)
    # The band is solved on pieces BAND_PARTS times shorter than the model's:
    # a drifting clock is closer to them (the chord error falls with the
    # square of the width), and both sides are loosened by what is left.
    fine = _split(knots, BAND_PARTS)
    coarse = _split(base, BAND_PARTS)
    fine_at = np.unique(np.r_[fine, coarse, at])
    ceiling = window_vertices(np.r_[x[hull], x3], np.r_[r[hull], y4 - x3], fine)  # m(tick) <= arrival
    floor = window_vertices(x2, y1 - x2, fine, upper=True)  # m(t2) >= t1
    slack = _chord(rate, fine)
    conflict = 0.0
    try:
        lo, hi = feasible_band(ceiling, floor, fine, fine_at, slack, MAX_SKEW)
    except FitError:
        conflict = least_loosening(ceiling, floor, fine, slack, MAX_SKEW) + CONFLICT_MARGIN_S
        lo, hi = feasible_band(ceiling, floor, fine, fine_at, slack + conflict, MAX_SKEW)
    lo_s, hi_s = _level(knots, shape, ceiling, floor, fine)
    gap = max(hi_s - lo_s, 0.0)  # the least round trip the envelopes leave: both ways' floors
    asym = float(np.clip(m.asymmetry_s, -gap, gap))
    values = shape - ((lo_s + hi_s) / 2 + asym / 2)
    est = piecewise(knots, values, fine_at)
    m.knots_r, m.one_way_weight, m.kept = values, weight, len(ex)
    m.least_round_trip_s = gap
    if asym != m.asymmetry_s:
        m.notes.append(f"asymmetry {m.asymmetry_s * 1e3:.3f} ms is more than the least round trip "
                       f"({gap * 1e3:.3f} ms) allows: {asym * 1e3:.3f} ms used")
    lo, hi = lo - slack, hi + slack  # m itself: within the chord term of a curve in the band
    wide = _coarse_band(coarse, fine, x, r, hull, x3, y4, x2, y1, fine_at, rate)
    if wide is not None:  # m lies in both bands: in their intersection
        lo, hi = np.maximum(lo, wide[0]), np.minimum(hi, wide[1])
    total = float(np.max(np.maximum(hi - est, est - lo)))
    m.curvature_s = min(slack, total)  # the short pieces' chord term; the rest is the band's
    m.band_s = total - m.curvature_s
    if conflict:
        m.consistent = False
        m.shape_s = conflict  # the curve's form is off by at least that
        m.notes.append(f"time-sync exchanges disagree with the receive times by {conflict * 1e3:.3f} "
                       "ms (more than the curve's bend explains); uncertainty widened")
    if tilt:
        m.notes.append(f"the receive times' least delay drifted {tilt * 1e6:+.3f} us/s against the "
                       "pings' (frames locked to the connection events?): the shape takes the "
                       "pings' rate")
    if weight < 0.5:
        m.notes.append("the receive times' envelope is loose (frames waited unevenly, as in a full "
                       "queue): the clock's shape follows the pings' forward legs")


Blend = tuple[float, np.ndarray, float, float]  # weight, shape, drift rate, floor tilt


def _blend(one_way: np.ndarray, x: np.ndarray, r: np.ndarray, hull: np.ndarray, x2: np.ndarray,
           f: np.ndarray, knots: np.ndarray, at: np.ndarray) -> Blend:
    """(weight of the one-way envelope, the shape, its drift rate, tilt): the
    one-way envelope and the forward legs' envelope (the curve on or over
    every (t2, t1) with the least summed gap), weighted by the inverse square
    of each one's spread over interleaved refits. tilt: the rate (s/s) at
    which the receive times' least delay drifted against the forward legs'
    (taken out of the one-way envelope; 0 when within the spreads)."""
    bend = _drift_rate(knots, x, r, one_way, hull)
    try:
        forward = -fit_envelope(x2, -f, knots)
    except FitError:
        return 1.0, one_way, bend, 0.0  # too few exchanges in some window for a shape of their own
    spread_one_way = _shape(x, r, knots, one_way, at)
    spread_forward = _shape(x2, -f, knots, -forward, at)
    if spread_forward is None:
        return 1.0, one_way, bend, 0.0
    bend_forward = _drift_rate(knots, x2, -f, -forward)
    if spread_one_way is None:
        return 0.0, forward, bend_forward, 0.0
    # Near lock, frames sent on the board's clock meet the connection events
    # at a phase that creeps: their least delay ramps (a sawtooth's tooth)
    # and the one-way envelope takes the ramp for skew. The pings are timed by
    # the laptop, their waits random: a steady trend of the gap between the
    # two envelopes, beyond twice their spreads, is the one-way floor's.
    tilt = 0.0
    if knots.size >= 3:
        slope = float(np.polyfit(knots, one_way - forward, 1)[0])
        if abs(slope) * float(knots[-1] - knots[0]) > 2 * (spread_one_way + spread_forward):
            tilt = slope
            one_way = one_way - tilt * (knots - knots[0])
    # Both envelopes ride on floors of their own; when those are steady the
    # two curves differ by a constant. A gap between them that moves by more
    # than their spreads explain is a floor that moves: the receive times'
    # (frames sent on the board's clock can lock with the connection events
    # and wait a slowly changing time, a sawtooth; the pings are timed by the
    # laptop, so their waits are random). It counts as the one-way side's error.
    apart = piecewise(knots, one_way - forward, at)
    moves = float(np.max(apart) - np.min(apart)) / 2
    excess = max(0.0, moves - spread_one_way - spread_forward)
    var_o, var_f = spread_one_way ** 2 + excess ** 2, spread_forward ** 2
    w = 0.5 if var_o + var_f == 0 else var_f / (var_o + var_f)
    return w, w * one_way + (1 - w) * forward, w * bend + (1 - w) * bend_forward, tilt


def _coarse_band(coarse: np.ndarray, fine: np.ndarray, x: np.ndarray, r: np.ndarray,
                 hull: np.ndarray, x3: np.ndarray, y4: np.ndarray, x2: np.ndarray, y1: np.ndarray,
                 at: np.ndarray, rate: float) -> tuple[np.ndarray, np.ndarray] | None:
    """(lowest, highest) value of m at `at` from a band on the --window
    windows' halves, when the model's pieces are shorter: more points a piece
    pin it closer, the longer chords loosen it; m lies in both bands, so
    their intersection bounds it (m and the estimate are linear between the
    knots of both, all in `at`). None when no such band is needed or fits."""
    if coarse.size >= fine.size:
        return None
    ceiling = window_vertices(np.r_[x[hull], x3], np.r_[r[hull], y4 - x3], coarse)
    floor = window_vertices(x2, y1 - x2, coarse, upper=True)
    slack = _chord(rate, coarse)
    try:
        lo, hi = feasible_band(ceiling, floor, coarse, at, slack, MAX_SKEW)
    except FitError:
        return None  # the long pieces cannot follow this clock: the short ones' band stands
    return lo - slack, hi + slack


def _level(knots: np.ndarray, shape: np.ndarray, ceiling: Vertices, floor: Vertices,
           fine: np.ndarray) -> tuple[float, float]:
    """(lo, hi): the shifts s the evidence allows for shape - s: under every
    arrival (s >= lo) and over every send (s <= hi). hi - lo is the sum of
    both ways' least latency; the level's split of it is assumed (step 3).
    The vertices are those of the `fine` windows."""
    lo = float(np.max(_at_vertices(knots, shape, ceiling, fine) - ceiling[2]))
    hi = float(np.min(_at_vertices(knots, shape, floor, fine) - floor[2]))
    return lo, hi


def _at_vertices(knots: np.ndarray, values: np.ndarray, v: Vertices, fine: np.ndarray) -> np.ndarray:
    win, lam, _ = v
    return piecewise(knots, values, fine[win] + lam * (fine[win + 1] - fine[win]))


def _shape(x: np.ndarray, r: np.ndarray, knots: np.ndarray, values: np.ndarray,
           at: np.ndarray) -> float | None:
    """Largest deviation at `at` of refits on interleaved eighths from the full
    fit (None when no eighth has enough points to fit)."""
    full = piecewise(knots, values, at)
    worst = None
    for q in range(SUBSETS):
        sel = slice(q, None, SUBSETS)
        try:
            part = fit_envelope(x[sel], r[sel], knots)
        except FitError:
            continue  # too few points in some window of this subset
        dev = float(np.max(np.abs(piecewise(knots, part, at) - full)))
        worst = dev if worst is None else max(worst, dev)
    return worst


def _drift_rate(knots: np.ndarray, x: np.ndarray, y: np.ndarray, values: np.ndarray,
                hull: np.ndarray | None = None) -> float:
    """How fast the slope changes (1/s), from a lower envelope of (x, y) on half
    windows: the change of slope at each of its joins over the width around
    it. With too few points for half windows, the joins of `values` serve."""
    fine = _split(knots, BAND_PARTS)  # the windows `hull` was taken on
    try:
        fine_values = fit_envelope(x, y, fine, hull_of=hull)
    except FitError:
        fine, fine_values = knots, values
    if fine.size < 3:
        return 0.0
    width = np.diff(fine)
    return float(np.max(np.abs(np.diff(np.diff(fine_values) / width)) / ((width[:-1] + width[1:]) / 2)))


def _chord(rate: float, knots: np.ndarray) -> float:
    """The largest gap between a parabola of that rate and its chords over the
    widest piece: the error of straight pieces through a smooth drift."""
    return rate * float(np.max(np.diff(knots))) ** 2 / 8


def _split(knots: np.ndarray, parts: int) -> np.ndarray:
    """Every window cut into `parts` equal pieces."""
    steps = np.linspace(0.0, 1.0, parts + 1)[:-1]
    inner = (knots[:-1, None] + np.diff(knots)[:, None] * steps[None, :]).ravel()
    return np.r_[inner, knots[-1]]


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
