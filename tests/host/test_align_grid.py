"""Wide-table rules: interpolate analog, hold state, never cross a gap.

The rules are our own (README, align_grid.py); the expected numbers are
worked by hand here.
"""

from __future__ import annotations

import numpy as np
import pytest

from slipless.align.grid import column_name, gaps_after, grid_times, on_grid

T = np.array([0, 10, 20, 30, 60, 70], dtype=np.int64)  # ns; 30 -> 60 skips two samples
V = np.array([0.0, 1.0, 3.0, 2.0, 5.0, 7.0])
TICKS = T // 10  # one tick per sample period
GAP = gaps_after(TICKS, 1)


def test_gap_is_more_than_one_and_a_half_periods() -> None:
    assert GAP.tolist() == [False, False, False, True, False]
    assert gaps_after(np.array([0, 14, 30]), 10).tolist() == [False, True]  # 14 fine, 16 not


def test_analog_interpolates_and_leaves_gaps_empty() -> None:
    grid = np.array([-5, 0, 5, 15, 30, 35, 45, 55, 60, 65, 70, 75])
    got = on_grid(grid, T, V, GAP, hold_ns=10, state=False)
    want = [np.nan, 0.0, 0.5, 2.0, 2.0, np.nan, np.nan, np.nan, 5.0, 6.0, 7.0, np.nan]
    np.testing.assert_array_equal(got, np.array(want))


def test_state_holds_previous_value_for_one_period_at_a_gap() -> None:
    grid = np.array([-5, 0, 9, 15, 30, 35, 39, 40, 45, 60, 65, 79, 80])
    got = on_grid(grid, T, V, GAP, hold_ns=10, state=True)
    want = [np.nan, 0.0, 0.0, 1.0, 2.0, 2.0, 2.0, np.nan, np.nan, 5.0, 5.0, 7.0, np.nan]
    np.testing.assert_array_equal(got, np.array(want))


def test_grid_times_are_round_multiples_inside_the_span() -> None:
    assert grid_times(1_234, 5_001, 1_000).tolist() == [2_000, 3_000, 4_000, 5_000]
    assert grid_times(3_000, 2_000, 1_000).size == 0


@pytest.mark.parametrize("unit,name", [("V", "b1.cap_amp[V]"), ("", "b1.cap_amp")])
def test_column_names_carry_board_and_unit(unit: str, name: str) -> None:
    assert column_name(1, "cap_amp", unit) == name
