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
- `feasible_band`: the lowest and highest value such a curve can take at
  given times while it stays on or under one point set (the ceiling) and on
  or over another (the floor), its slopes limited; `least_loosening`: how far
  the two sets must be moved apart before any such curve fits between them.
"""

from __future__ import annotations

import numpy as np
from scipy import sparse
from scipy.optimize import linprog

from slipless.errors import FitError  # noqa: F401

_BLOCK = 256  # prefilter block: its lowest point sits close to the envelope
_MIN_BLOCK = 16  # below this a block's lowest point is too far up to drop much
_LP_SCALE = 1e3  # solve in ms: the LP's absolute tolerances (~1e-7) are then sub-ns




def onwire(t1: np.ndarray | float, t2: np.ndarray | float, t3: np.ndarray | float,
           t4: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
    """(offset, delay) of exchanges: t1 client send, t2 server receive, t3 server
    send, t4 client receive. offset = server clock - client clock."""
    t1, t2, t3, t4 = (np.asarray(t, dtype=np.float64) for t in (t1, t2, t3, t4))
    return ((t2 - t1) + (t3 - t4)) / 2, (t4 - t1) - (t3 - t2)


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
    block = _BLOCK if n >= 8 * _BLOCK else max(_MIN_BLOCK, n // 8)  # small windows: small blocks
    nb = n // block
    keep = np.ones(n, dtype=bool)
    if nb < 3:
        return keep
    body = slice(0, nb * block)
    low = np.argmin(ys[body].reshape(nb, block), axis=1) + np.arange(nb) * block
    qx, qy = xs[low[:-2]], ys[low[:-2]]  # left neighbour's lowest point, per middle block
    rx, ry = xs[low[2:]], ys[low[2:]]
    mid = slice(block, (nb - 1) * block)
    px = xs[mid].reshape(nb - 2, block)
    py = ys[mid].reshape(nb - 2, block)
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
    return _line_at(x, y, float(np.mean(x)))


def _line_at(x: np.ndarray, y: np.ndarray, at: float) -> tuple[float, float]:
    """The lower hull's edge over `at` as (slope, intercept)."""
    h = lower_hull(x, y)
    if h.size < 2:
        raise FitError("a line needs points at two distinct times at least")
    hx, hy = np.asarray(x, dtype=np.float64)[h], np.asarray(y, dtype=np.float64)[h]
    k = int(np.clip(np.searchsorted(hx, at, side="right") - 1, 0, h.size - 2))
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
                 floor: tuple[np.ndarray, np.ndarray] | None = None,
                 hull_of: np.ndarray | None = None) -> np.ndarray:
    """Values at `knots` of the continuous piecewise-linear curve on or under
    every point (x, y) with the least summed gap above them (one window and no
    floor: the line of `envelope_line`). `floor` = (xf, yf): points the curve
    must stay on or above. Within a window the curve is a line, so only that
    window's hull vertices can bind: the LP has one row per vertex. hull_of:
    indices of points holding every window's hull vertices (`hull_candidates`
    on finer windows), so the hulls need not be taken over all points again."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    knots = np.asarray(knots, dtype=np.float64)
    hx, hy = (x, y) if hull_of is None else (x[hull_of], y[hull_of])
    if knots.size == 2 and (floor is None or floor[0].size == 0):
        slope, icpt = _line_at(hx, hy, float(np.mean(x)) if x.size else 0.0)  # none: FitError
        return icpt + slope * knots
    win, lam = windows_of(x, knots)
    nk = knots.size
    weight = np.bincount(win, 1 - lam, nk) + np.bincount(win + 1, lam, nk)
    base = float(np.min(y))  # solve for v - base: small numbers
    a_up, b_up = _hull_rows(hx, hy, knots, need_two=True)
    a, b = [a_up], [b_up - base]
    if floor is not None and floor[0].size:
        # curve >= yf  <=>  -curve <= -yf, on the upper hull of the floor points
        a_lo, b_lo = _hull_rows(np.asarray(floor[0], dtype=np.float64),
                                -np.asarray(floor[1], dtype=np.float64), knots, need_two=False)
        a.append(-a_lo)
        b.append(b_lo + base)
    res = linprog(-weight, A_ub=sparse.vstack(a, format="csr"), b_ub=np.concatenate(b) * _LP_SCALE,
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
    win, lam, yv = window_vertices(x, y, knots, need_two=need_two)
    return _sparse_rows(win, lam, knots.size), yv


def window_vertices(x: np.ndarray, y: np.ndarray, knots: np.ndarray, upper: bool = False,
                    need_two: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(window, position in it, y) of each window's lower hull vertices (upper:
    upper hull). Within a window the curve is one line, so a line on or under
    (over) these vertices is on or under (over) every point of the window."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    win, lam = windows_of(x, knots)
    sign = -1.0 if upper else 1.0
    verts = []
    for k, sel in enumerate(_by_window(win, knots.size - 1)):
        h = sel[lower_hull(x[sel], sign * y[sel])]
        if need_two and h.size < 2:
            raise FitError(f"window {k} needs points at two distinct times at least")
        verts.append(h)
    vert = np.concatenate(verts).astype(np.int64) if verts else np.zeros(0, dtype=np.int64)
    return win[vert], lam[vert], y[vert]


def hull_candidates(x: np.ndarray, y: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Indices of each window's lower hull vertices: they hold the hull
    vertices of any window made of whole windows of these knots."""
    win, _ = windows_of(np.asarray(x, dtype=np.float64), knots)
    parts = [sel[lower_hull(x[sel], y[sel])] for sel in _by_window(win, knots.size - 1)]
    return np.sort(np.concatenate(parts)).astype(np.int64) if parts else np.zeros(0, dtype=np.int64)


def _by_window(win: np.ndarray, n: int) -> list[np.ndarray]:
    """Indices of the points in each of n windows, ascending (one stable sort,
    not a scan of every point per window)."""
    order = np.argsort(win, kind="stable")
    return np.split(order, np.searchsorted(win[order], np.arange(1, n)))


def _sparse_rows(win: np.ndarray, lam: np.ndarray, nk: int) -> sparse.csr_matrix:
    """`_rows` as a sparse matrix: two weights a row, however many knots
    (a day in short pieces would make the dense one tens of MB)."""
    n = win.size
    return sparse.csr_matrix((np.r_[1 - lam, lam], (np.r_[np.arange(n), np.arange(n)],
                                                     np.r_[win, win + 1])), shape=(n, nk))


def _rows(win: np.ndarray, lam: np.ndarray, nk: int, first: int = 0) -> np.ndarray:
    """The curve at points (window, position) as weights of knots first..first+nk-1."""
    a = np.zeros((win.size, nk))
    a[np.arange(win.size), win - first] = 1 - lam
    a[np.arange(win.size), win - first + 1] = lam
    return a


Vertices = tuple[np.ndarray, np.ndarray, np.ndarray]  # window_vertices' (window, position, y)


def _band_rows(ceiling: Vertices, floor: Vertices, knots: np.ndarray, lo: int, hi: int,
               slack: float, max_slope: float, base: float) -> tuple[np.ndarray, np.ndarray]:
    """A u <= b for the knot values u = v - base of windows lo..hi: the curve
    under the ceiling and over the floor (each loosened by slack), slopes
    within +-max_slope."""
    nk = hi - lo + 2
    a, b = [], []
    for (win, lam, y), sign in ((ceiling, 1.0), (floor, -1.0)):
        sel = (win >= lo) & (win <= hi)
        a.append(sign * _rows(win[sel], lam[sel], nk, lo))
        b.append(sign * (y[sel] - base) + slack)
    step = np.eye(nk, k=1)[:-1] - np.eye(nk)[:-1]  # u[k+1] - u[k]
    run = max_slope * np.diff(knots[lo:hi + 2])
    return np.vstack(a + [step, -step]), np.concatenate(b + [run, run])


def feasible_band(ceiling: Vertices, floor: Vertices, knots: np.ndarray, at: np.ndarray,
                  slack: float, max_slope: float, reach: int = 2) -> tuple[np.ndarray, np.ndarray]:
    """(lowest, highest) value at each of `at` of a continuous piecewise-linear
    curve through `knots` that stays on or under every ceiling vertex + slack,
    on or over every floor vertex - slack, with slopes within +-max_slope.

    Each time is solved with only the windows within `reach` of its own
    (widened until the answer is bounded): leaving constraints out can only
    widen the band, so it stays a bound, and a day of windows stays fast.
    Raises FitError when no curve fits between the sets (see `least_loosening`)."""
    at = np.asarray(at, dtype=np.float64)
    nw = knots.size - 1
    base = float(np.min(ceiling[2])) if ceiling[2].size else 0.0  # small numbers in the LP
    win, lam = windows_of(at, knots)
    low, high = np.empty(at.size), np.empty(at.size)
    for i in range(at.size):
        lo, hi = max(0, int(win[i]) - reach), min(nw - 1, int(win[i]) + reach)
        while True:
            a, b = _band_rows(ceiling, floor, knots, lo, hi, slack, max_slope, base)
            obj = _rows(win[i:i + 1], lam[i:i + 1], hi - lo + 2, lo)[0]
            ends = [linprog(sign * obj, A_ub=a, b_ub=b * _LP_SCALE, bounds=(None, None),
                            method="highs") for sign in (1.0, -1.0)]
            if all(r.status == 0 for r in ends):
                break
            # 3: unbounded, 4: unbounded or infeasible; anything else (2: infeasible) is final
            if (lo == 0 and hi == nw - 1) or any(r.status not in (0, 3, 4) for r in ends):
                raise FitError(f"feasible band LP: {next(r.message for r in ends if r.status)}")
            lo, hi = max(0, lo - 2 * reach - 1), min(nw - 1, hi + 2 * reach + 1)
        low[i] = ends[0].fun / _LP_SCALE + base
        high[i] = -ends[1].fun / _LP_SCALE + base
    return low, high


def least_loosening(ceiling: Vertices, floor: Vertices, knots: np.ndarray, slack: float,
                    max_slope: float) -> float:
    """The least extra slack on both sets that lets a curve (as in
    `feasible_band`) fit between them: how far they contradict that curve's form."""
    base = float(np.min(ceiling[2])) if ceiling[2].size else 0.0
    a, b = _band_rows(ceiling, floor, knots, 0, knots.size - 2, slack, max_slope, base)
    nc = ceiling[0].size + floor[0].size
    loosen = np.r_[-np.ones(nc), np.zeros(a.shape[0] - nc)]  # only the point rows loosen
    res = linprog(np.r_[np.zeros(knots.size), 1.0], A_ub=np.c_[a, loosen], b_ub=b * _LP_SCALE,
                  bounds=[(None, None)] * knots.size + [(0, None)], method="highs")
    if res.status != 0:
        raise FitError(f"loosening LP: {res.message}")
    return float(res.x[-1]) / _LP_SCALE
