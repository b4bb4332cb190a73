"""Clock-fit primitives: on-wire exchange arithmetic and lower envelopes.

Pure numpy/scipy, no I/O. Times are float seconds in a frame the caller
chose (small numbers: subtract a base first, float64 keeps ns then).

- `onwire`: offset and round-trip delay of one request/reply exchange
  (RFC 5905, sec. 8).
- `lower_hull`: the lower convex hull of a point set in O(n log n).
- `envelope_line`: the line on or under every point with the least total gap
  above it (the linear program of Moon, Skelly and Towsley, 1999). Its optimum
  is the hull edge over mean(x), so no LP solver is needed for one line.
- `fit_envelope`: the same objective for a continuous piecewise-linear curve
  (knots at window edges, for clocks that drift with temperature), as a small
  linear program over the knot values with one constraint per hull vertex.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import linprog

_BLOCK = 256  # prefilter block: its lowest point sits close to the envelope
_LP_SCALE = 1e3  # solve in ms: the LP's absolute tolerances (~1e-7) are then sub-ns


class FitError(ValueError):
    """Too few distinct points to fix a line or a knot."""


def onwire(t1: np.ndarray | float, t2: np.ndarray | float, t3: np.ndarray | float,
           t4: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
    """(offset, delay) of exchanges: t1 client send, t2 server receive, t3 server
    send, t4 client receive. offset = server clock - client clock."""
    t1, t2, t3, t4 = (np.asarray(t, dtype=np.float64) for t in (t1, t2, t3, t4))
    return ((t2 - t1) + (t3 - t4)) / 2, (t4 - t1) - (t3 - t2)


def smallest_round_trips(delay: np.ndarray, fraction: float = 0.1, at_least: int = 8) -> np.ndarray:
    """Indices (ascending) of the exchanges with the smallest delay: they bound
    the offset tightest, the others mostly add queueing noise."""
    n = len(delay)
    k = min(n, max(at_least, math.ceil(n * fraction)))
    return np.sort(np.argsort(delay, kind="stable")[:k])


def lower_hull(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Indices of the lower convex hull's vertices, by increasing x.

    A vectorised prefilter drops every point lying above a chord between two
    other points (it cannot be a vertex), then a monotone chain runs over the
    few survivors. Sorting dominates: O(n log n).
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.size == 0:
        return np.zeros(0, dtype=np.int64)
    order = np.lexsort((y, x))
    xs, ys = x[order], y[order]
    lowest = np.r_[True, xs[1:] != xs[:-1]]  # the lowest point of each distinct x
    order, xs, ys = order[lowest], xs[lowest], ys[lowest]
    keep = _prefilter(xs, ys)
    order, xs, ys = order[keep], xs[keep], ys[keep]
    return order[_chain(xs.tolist(), ys.tolist())]


def _prefilter(xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """Mask of points not strictly above the chord joining the lowest points
    of the neighbouring blocks (xs strictly increasing)."""
    n = xs.size
    nb = n // _BLOCK
    keep = np.ones(n, dtype=bool)
    if nb < 3:
        return keep
    body = slice(0, nb * _BLOCK)
    low = np.argmin(ys[body].reshape(nb, _BLOCK), axis=1) + np.arange(nb) * _BLOCK
    qx, qy = xs[low[:-2]], ys[low[:-2]]  # left neighbour's lowest point, per middle block
    rx, ry = xs[low[2:]], ys[low[2:]]
    mid = slice(_BLOCK, (nb - 1) * _BLOCK)
    px = xs[mid].reshape(nb - 2, _BLOCK)
    py = ys[mid].reshape(nb - 2, _BLOCK)
    above = ((rx - qx)[:, None] * (py - qy[:, None]) - (ry - qy)[:, None] * (px - qx[:, None])) > 0
    keep[mid] = ~above.ravel()
    return keep


def _chain(xs: list[float], ys: list[float]) -> list[int]:
    """Andrew's monotone chain, lower half (xs strictly increasing)."""
    h: list[int] = []
    for i in range(len(xs)):
        while len(h) >= 2:
            a, b = h[-2], h[-1]
            if (xs[b] - xs[a]) * (ys[i] - ys[a]) - (ys[b] - ys[a]) * (xs[i] - xs[a]) > 0:
                break  # a left turn: b stays a vertex
            h.pop()
        h.append(i)
    return h


def envelope_line(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """(slope, intercept) of the line under every point minimising the summed
    gaps sum(y - line(x)). That sum is n * (mean(y) - line(mean(x))), so the
    optimum is the highest feasible line at mean(x): the hull edge above it."""
    h = lower_hull(x, y)
    if h.size < 2:
        raise FitError("a line needs points at two distinct times at least")
    hx, hy = np.asarray(x, dtype=np.float64)[h], np.asarray(y, dtype=np.float64)[h]
    k = int(np.clip(np.searchsorted(hx, float(np.mean(x)), side="right") - 1, 0, h.size - 2))
    slope = (hy[k + 1] - hy[k]) / (hx[k + 1] - hx[k])
    return float(slope), float(hy[k] - slope * hx[k])


def windows_of(x: np.ndarray, knots: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Window index of each x and its position in the window (0 at the left
    knot, 1 at the right); x outside the knots falls in the end windows."""
    win = np.clip(np.searchsorted(knots, x, side="right") - 1, 0, knots.size - 2)
    return win, (x - knots[win]) / (knots[win + 1] - knots[win])


def piecewise(knots: np.ndarray, values: np.ndarray, x: np.ndarray) -> np.ndarray:
    """The continuous piecewise-linear curve through (knots, values) at x;
    the end segments extend beyond the knots."""
    win, lam = windows_of(np.asarray(x, dtype=np.float64), knots)
    return (1 - lam) * values[win] + lam * values[win + 1]


def fit_envelope(x: np.ndarray, y: np.ndarray, knots: np.ndarray,
                 floor: tuple[np.ndarray, np.ndarray] | None = None) -> np.ndarray:
    """Values at `knots` of the continuous piecewise-linear curve on or under
    every point (x, y) with the least summed gap above them (one window and no
    floor: the line of `envelope_line`). `floor` = (xf, yf): points the curve
    must stay on or above. Within a window the curve is a line, so only that
    window's hull vertices can bind: the LP has one row per vertex."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    knots = np.asarray(knots, dtype=np.float64)
    if knots.size == 2 and (floor is None or floor[0].size == 0):
        slope, icpt = envelope_line(x, y)
        return icpt + slope * knots
    win, lam = windows_of(x, knots)
    nk = knots.size
    weight = np.bincount(win, 1 - lam, nk) + np.bincount(win + 1, lam, nk)
    base = float(np.min(y))  # solve for v - base: small numbers
    a_up, b_up = _hull_rows(x, y, knots, need_two=True)
    a, b = [a_up], [b_up - base]
    if floor is not None and floor[0].size:
        # curve >= yf  <=>  -curve <= -yf, on the upper hull of the floor points
        a_lo, b_lo = _hull_rows(np.asarray(floor[0], dtype=np.float64),
                                -np.asarray(floor[1], dtype=np.float64), knots, need_two=False)
        a.append(-a_lo)
        b.append(b_lo + base)
    res = linprog(-weight, A_ub=np.vstack(a), b_ub=np.concatenate(b) * _LP_SCALE,
                  bounds=(None, None), method="highs")
    if res.status != 0:
        raise FitError(f"envelope LP: {res.message}")
    return np.asarray(res.x) / _LP_SCALE + base


def _hull_rows(x: np.ndarray, y: np.ndarray, knots: np.ndarray,
               need_two: bool) -> tuple[np.ndarray, np.ndarray]:
    """Rows (the curve at each vertex, as weights of the knot values) and
    right-hand sides for the lower hull vertices of each window's points.
    need_two: every window must have two distinct times (the points that hold
    the curve from above; with fewer it could tilt without bound)."""
    win, lam = windows_of(x, knots)
    verts = []
    for k in range(knots.size - 1):
        sel = np.flatnonzero(win == k)
        h = sel[lower_hull(x[sel], y[sel])]
        if need_two and h.size < 2:
            raise FitError(f"window {k} needs points at two distinct times at least")
        verts.append(h)
    vert = np.concatenate(verts).astype(np.int64)
    a = np.zeros((vert.size, knots.size))
    a[np.arange(vert.size), win[vert]] = 1 - lam[vert]
    a[np.arange(vert.size), win[vert] + 1] = lam[vert]
    return a, y[vert]
