"""Clock-fit primitives against outside references.

Sources named beside each check:
- RFC 5905 sec. 8 on-wire formulas (offset and delay of one exchange); the
  worked numbers are our own arithmetic on them (shared/references.md 4b).
- The lower-envelope objective of Moon, Skelly and Towsley (1999), solved
  independently with scipy.optimize.linprog (HiGHS) on every point.
- scipy.spatial.ConvexHull (Qhull) as an independent convex hull.
- The feasible band and the least loosening, each posed again for
  scipy.optimize.linprog (HiGHS) with one row per point and every window.
The last test is a property test of our own: any stamps give a model or a FitError.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import linprog
from scipy.spatial import ConvexHull

from slipless.align.clockfit import (
    FitError,
    envelope_line,
    feasible_band,
    fit_envelope,
    least_loosening,
    lower_hull,
    onwire,
    piecewise,
    window_vertices,
)
from slipless.align.clockmodel import Exchanges, fit_clock


def test_onwire_rfc5905_worked_exchange() -> None:
    # RFC 5905 sec. 8: theta = ((T2 - T1) + (T3 - T4)) / 2, delta = (T4 - T1) - (T3 - T2).
    # T1 = 0, T2 = 0.120, T3 = 0.125, T4 = 0.055 s -> theta 0.095 s, delta 0.050 s
    # (true offset 0.095 s, 25 ms each way, 5 ms at the server).
    theta, delta = onwire(0.000, 0.120, 0.125, 0.055)
    assert theta == pytest.approx(0.095, abs=1e-12)
    assert delta == pytest.approx(0.050, abs=1e-12)


def test_onwire_asymmetric_paths_err_by_half_the_difference() -> None:
    # Same formulas; true offset 0.100 s, 40 ms out, 10 ms back, 5 ms hold:
    # T = (0, 0.140, 0.145, 0.055) -> theta 0.115 (off by (40 - 10) / 2 ms), delta 0.050.
    theta, delta = onwire(np.array([0.0]), np.array([0.140]), np.array([0.145]), np.array([0.055]))
    assert theta[0] == pytest.approx(0.115, abs=1e-12)
    assert delta[0] == pytest.approx(0.050, abs=1e-12)


def _qhull_lower(x: np.ndarray, y: np.ndarray) -> set[int]:
    """Vertices of the lower hull by Qhull: those on a facet whose outward normal points down."""
    h = ConvexHull(np.c_[x, y])
    return {int(i) for eq, simplex in zip(h.equations, h.simplices) if eq[1] < 0 for i in simplex}


@pytest.mark.parametrize("n", [5, 50, 3000])  # 3000 exercises the block prefilter
def test_lower_hull_matches_qhull(n: int) -> None:
    rng = np.random.default_rng(n)
    x = np.sort(rng.uniform(0, 100, n))
    y = 0.01 + 3e-5 * x + rng.exponential(0.015, n)
    ours = lower_hull(x, y).tolist()
    assert ours == sorted(ours, key=lambda i: x[i])
    assert set(ours) == _qhull_lower(x, y)


def _linprog_line(t: np.ndarray, d: np.ndarray) -> tuple[float, float, float]:
    """Moon-Skelly-Towsley as stated: minimise sum(d - a t - b) s.t. a t + b <= d."""
    res = linprog(c=[-t.sum(), -t.size], A_ub=np.c_[t, np.ones_like(t)], b_ub=d,
                  bounds=[(None, None), (None, None)], method="highs")
    assert res.status == 0
    a, b = res.x
    return float(a), float(b), float(np.sum(d - a * t - b))


def test_envelope_line_worked_examples() -> None:
    # shared/references.md 4a: values computed there with scipy.optimize.linprog (HiGHS);
    # the formulation is Moon, Skelly and Towsley's (stated from memory there).
    t = np.arange(10.0)
    d = np.array([0.01300, 0.01005, 0.01210, 0.01415, 0.01120, 0.01025, 0.01530, 0.01235, 0.01340,
                  0.01145])
    a, b = envelope_line(t, d)
    assert a == pytest.approx(5.0e-5, abs=1e-12)
    assert b == pytest.approx(0.010, abs=1e-12)
    assert np.sum(d - a * t - b) == pytest.approx(0.021, abs=1e-12)
    d2 = 0.020 - 30e-6 * t + np.array([0, .004, .003, .006, .005, .004, .006, .003, .002, 0])
    a2, b2 = envelope_line(t, d2)
    assert (a2, b2) == (pytest.approx(-3.0e-5, abs=1e-12), pytest.approx(0.020, abs=1e-12))


@pytest.mark.parametrize("seed", range(8))
def test_envelope_line_agrees_with_linprog(seed: int) -> None:
    # Independent reference: scipy.optimize.linprog on every point, same objective.
    rng = np.random.default_rng(seed)
    n = int(rng.integers(3, 4000))
    t = np.sort(rng.uniform(0, 1800, n))
    d = rng.uniform(-1, 1) + rng.uniform(-50e-6, 50e-6) * t + rng.exponential(0.015, n)
    a, b = envelope_line(t, d)
    ra, rb, robj = _linprog_line(t, d)
    assert np.sum(d - a * t - b) == pytest.approx(robj, rel=1e-9, abs=1e-9)
    assert a == pytest.approx(ra, abs=1e-9)
    assert b == pytest.approx(rb, abs=1e-6)
    assert np.all(d - (a * t + b) >= -1e-12)


def test_piecewise_envelope_agrees_with_linprog_on_every_point() -> None:
    # Reference: the same piecewise objective given to linprog with one row per
    # point (no hull reduction); our LP keeps only hull vertices.
    rng = np.random.default_rng(7)
    x = np.sort(rng.uniform(0, 1800, 6000))
    truth = 2e-5 * x + 3e-9 * (x - 900) ** 2
    y = truth + rng.exponential(0.015, x.size)
    knots = np.linspace(0, 1800, 4)
    ours = fit_envelope(x, y, knots)
    win = np.clip(np.searchsorted(knots, x, side="right") - 1, 0, 2)
    lam = (x - knots[win]) / (knots[win + 1] - knots[win])
    a = np.zeros((x.size, 4))
    a[np.arange(x.size), win] = 1 - lam
    a[np.arange(x.size), win + 1] = lam
    res = linprog(-a.sum(axis=0), A_ub=a * 1e3, b_ub=y * 1e3, bounds=(None, None), method="highs")
    assert res.status == 0
    assert ours == pytest.approx(res.x, abs=1e-8)
    assert np.all(y - piecewise(knots, ours, x) >= -1e-9)


def test_envelope_needs_two_distinct_times() -> None:
    with pytest.raises(FitError):
        envelope_line(np.array([1.0, 1.0]), np.array([0.2, 0.3]))


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 10**10), st.integers(0, 10**15)), min_size=0, max_size=300),
       st.lists(st.tuples(st.integers(0, 10**15), st.integers(0, 10**10), st.integers(0, 10**7),
                          st.integers(0, 10**15)), max_size=40))
def test_fit_clock_on_any_stamps_fits_or_says_why(pairs: list[tuple[int, int]],
                                                  ex: list[tuple[int, int, int, int]]) -> None:
    # Whatever the stamps (a foreign clock, garbage that passed a CRC): a model or a
    # FitError, never another exception.
    ticks = np.array([p[0] for p in pairs], dtype=np.int64)
    rx = np.array([p[1] for p in pairs], dtype=np.int64)
    e = np.array(ex, dtype=np.int64).reshape(-1, 4)
    exchanges = Exchanges(e[:, 0], e[:, 1], e[:, 1] + e[:, 2], e[:, 3])
    try:
        m = fit_clock(ticks, rx, exchanges)
    except FitError:
        return
    assert np.isfinite(m.uncertainty_s) and np.isfinite(m.skew_ppm)


def _band_problem(seed: int, windows: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray,
                                                   np.ndarray]:
    """A drifting curve with receive times above it and forward legs below."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0, 600 * windows, 300 * windows))
    xf = np.sort(rng.uniform(0, 600 * windows, 40 * windows))

    def truth(t: np.ndarray) -> np.ndarray:
        return 3e-5 * t + 1e-9 * (t - 300 * windows) ** 2

    return (x, truth(x) + rng.exponential(0.05, x.size), xf,
            truth(xf) - rng.exponential(0.01, xf.size), np.linspace(0, 600 * windows, windows + 1))


def _every_point_rows(x: np.ndarray, knots: np.ndarray) -> np.ndarray:
    win = np.clip(np.searchsorted(knots, x, side="right") - 1, 0, knots.size - 2)
    lam = (x - knots[win]) / (knots[win + 1] - knots[win])
    a = np.zeros((x.size, knots.size))
    a[np.arange(x.size), win] = 1 - lam
    a[np.arange(x.size), win + 1] = lam
    return a


def _linprog_band(x: np.ndarray, y: np.ndarray, xf: np.ndarray, yf: np.ndarray, knots: np.ndarray,
                  at: np.ndarray, slack: float, max_slope: float) -> np.ndarray:
    """Reference: min and max of the curve at each of `at` by linprog, one row
    per point (no hull reduction), every window at once."""
    nk = knots.size
    step = (np.eye(nk, k=1) - np.eye(nk))[:-1]
    run = max_slope * np.diff(knots)
    a = np.vstack([_every_point_rows(x, knots), -_every_point_rows(xf, knots), step, -step]) * 1e3
    b = np.r_[y + slack, -(yf - slack), run, run] * 1e3
    out = []
    for t in at:
        obj = _every_point_rows(np.array([t]), knots)[0]
        lo = linprog(obj, A_ub=a, b_ub=b, bounds=(None, None), method="highs")
        hi = linprog(-obj, A_ub=a, b_ub=b, bounds=(None, None), method="highs")
        assert lo.status == 0 and hi.status == 0
        out.append((lo.fun, -hi.fun))
    return np.array(out).T


@pytest.mark.parametrize("seed", range(3))
def test_feasible_band_agrees_with_linprog_on_every_point(seed: int) -> None:
    x, y, xf, yf, knots = _band_problem(seed, 3)
    at = np.r_[knots, -50.0, 1900.0]  # the knots and two extrapolated ends
    lo, hi = feasible_band(window_vertices(x, y, knots), window_vertices(xf, yf, knots, upper=True),
                           knots, at, 1e-4, 0.01)  # reach 2 covers all three windows
    ref_lo, ref_hi = _linprog_band(x, y, xf, yf, knots, at, 1e-4, 0.01)
    assert lo == pytest.approx(ref_lo, abs=1e-9)
    assert hi == pytest.approx(ref_hi, abs=1e-9)


def test_a_short_reach_only_widens_the_band() -> None:
    # Leaving far windows out relaxes the problem: the band can only grow.
    x, y, xf, yf, knots = _band_problem(5, 8)
    at = knots
    lo, hi = feasible_band(window_vertices(x, y, knots), window_vertices(xf, yf, knots, upper=True),
                           knots, at, 0.0, 0.01, reach=1)
    ref_lo, ref_hi = _linprog_band(x, y, xf, yf, knots, at, 0.0, 0.01)
    assert np.all(lo <= ref_lo + 1e-9) and np.all(hi >= ref_hi - 1e-9)
    assert np.all(hi - lo < 0.2)  # still a band, not the slope limit alone


def test_least_loosening_matches_linprog_and_opens_the_band() -> None:
    x, y, xf, yf, knots = _band_problem(9, 2)
    yf = yf.copy()
    yf[7] = y.max() + 0.03  # one forward leg from beyond every receive time
    ceiling, floor = window_vertices(x, y, knots), window_vertices(xf, yf, knots, upper=True)
    with pytest.raises(FitError):
        feasible_band(ceiling, floor, knots, knots, 0.0, 0.01)
    ours = least_loosening(ceiling, floor, knots, 0.0, 0.01)
    # Reference: min e s.t. curve <= y + e, curve >= yf - e, slopes limited, every point.
    nk = knots.size
    step = (np.eye(nk, k=1) - np.eye(nk))[:-1]
    run = 0.01 * np.diff(knots)
    a = np.vstack([np.c_[_every_point_rows(x, knots), -np.ones(x.size)],
                   np.c_[-_every_point_rows(xf, knots), -np.ones(xf.size)],
                   np.c_[step, np.zeros(nk - 1)], np.c_[-step, np.zeros(nk - 1)]])
    res = linprog(np.r_[np.zeros(nk), 1.0], A_ub=a * 1e3, b_ub=np.r_[y, -yf, run, run] * 1e3,
                  bounds=[(None, None)] * nk + [(0, None)], method="highs")
    assert res.status == 0
    assert ours == pytest.approx(res.x[-1], abs=1e-9) and ours > 0
    lo, hi = feasible_band(ceiling, floor, knots, knots, ours + 1e-9, 0.01)
    assert np.all(lo <= hi)
