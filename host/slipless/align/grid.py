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
# The grid is written in chunks, so its length costs disk and time, not memory; beyond
# this (a day at 0.5 ms, some 15 GB of CSV) the period is most likely mistyped.
MAX_GRID_ROWS = 200_000_000


def grid_span(first_ns: int, last_ns: int, period_ns: int) -> tuple[int, int]:
    """(first grid time, number of grid times) of grid_times()."""
    start = -(-first_ns // period_ns) * period_ns
    return start, max(0, (last_ns - start) // period_ns + 1)


def grid_times(first_ns: int, last_ns: int, period_ns: int) -> np.ndarray:
    """Multiples of period_ns from first_ns to last_ns, both rounded inward."""
    start, n = grid_span(first_ns, last_ns, period_ns)
    return start + np.arange(n, dtype=np.int64) * period_ns


def grid_rows(start_ns: int, period_ns: int, lo: int, hi: int) -> np.ndarray:
    """Rows lo..hi of the grid starting at start_ns: grid_times(...)[lo:hi]."""
    return start_ns + np.arange(lo, hi, dtype=np.int64) * period_ns


def samples_needed(first_times: np.ndarray, first_index: np.ndarray, n: int, g0: int,
                   g1: int) -> tuple[int, int]:
    """Index range of the samples on_grid() needs for grid times g0..g1 (a
    chunk of the grid): from at or before the last sample at or before g0 to
    the first sample after g1, or the ends. Found from the time and index of
    each segment's first sample; sample times increase, so no other sample
    can change a value in the chunk."""
    s0 = int(np.searchsorted(first_times, g0, side="right")) - 1  # starts at or before g0
    s1 = int(np.searchsorted(first_times, g1, side="right"))  # first to start after g1
    lo = int(first_index[s0]) if s0 >= 0 else 0
    hi = int(first_index[s1]) + 1 if s1 < first_times.size else n
    return lo, hi


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
