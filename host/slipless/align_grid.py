"""Channels on a common time grid (the wide table), pure numpy.

Rules:
- analog channels: linear interpolation between the two samples around a
  grid time;
- state channels: the previous sample's value, held until the next sample;
- nothing across a gap: consecutive samples more than 1.5 periods apart (in
  board ticks) bound a gap, and grid times inside it stay empty (NaN). A state
  value then holds for its own period only; beyond the first and last sample
  a channel is empty too.
"""

from __future__ import annotations

import numpy as np

GAP_PERIODS = 1.5  # a sample step longer than this many periods means samples are missing
MAX_GRID_ROWS = 20_000_000  # one float64 column of this length is 160 MB


def grid_times(first_ns: int, last_ns: int, period_ns: int) -> np.ndarray:
    """Multiples of period_ns from first_ns to last_ns, both rounded inward."""
    start = -(-first_ns // period_ns) * period_ns
    n = (last_ns - start) // period_ns + 1
    return start + np.arange(max(0, n), dtype=np.int64) * period_ns


def gaps_after(ticks: np.ndarray, period_ticks: float) -> np.ndarray:
    """True at i when samples i and i+1 are separated by missing samples."""
    return np.diff(ticks) > GAP_PERIODS * period_ticks


def on_grid(grid: np.ndarray, t: np.ndarray, v: np.ndarray, gap: np.ndarray, hold_ns: float,
            state: bool) -> np.ndarray:
    """Values of one channel at the grid times (NaN where there is no data).

    t: sample times (ns, increasing) on the grid's clock, v: values, gap: from
    gaps_after(), hold_ns: one sample period on the grid's clock (how long a
    state value holds before a gap or after the last sample).
    """
    out = np.full(grid.size, np.nan)
    n = t.size
    if n == 0:
        return out
    j = np.searchsorted(t, grid, side="right") - 1  # last sample at or before each grid time
    have = j >= 0
    jj = np.where(have, j, 0)
    nxt = np.minimum(jj + 1, n - 1)
    joined = (jj < n - 1) & ~np.r_[gap, True][jj]  # the next sample follows without a gap
    if state:
        ok = have & (joined | (grid - t[jj] < hold_ns))
        out[ok] = v[jj[ok]]
        return out
    ok = have & joined
    span = (t[nxt] - t[jj]).astype(np.float64)
    frac = np.divide(grid - t[jj], span, out=np.zeros(grid.size), where=span > 0)
    out[ok] = (v[jj] + frac * (v[nxt] - v[jj]))[ok]
    exact = have & (t[jj] == grid)
    out[exact] = v[jj[exact]]
    return out


def column_name(board: int, name: str, unit: str) -> str:
    """Header of a channel's column: board, stream name and unit, e.g. b1.cap_amp[V]."""
    return f"b{board}.{name}[{unit}]" if unit else f"b{board}.{name}"
