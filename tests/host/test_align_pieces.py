"""The clock model's pieces are chosen from the data (clockmodel.choose_knots).

Simulated scenario of our own: a board whose skew swings +-2 ppm as a sine
with a 20-minute period (a board warming and cooling), one hour, the usual
delays (exponential, mean 15 ms, 200 ms stalls) and a PING every second.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad

import slipless.align.clockmodel as clockmodel
from slipless.align.clockfit import _by_window, windows_of
from slipless.align.clockmodel import fit_clock
from slipless.sim.clocks import TICK_HZ, ClockSim, simulate_clock

STEP_TICKS = 10_000  # check the mapped time every 10 ms of board time
PHASES = (0.0, np.pi / 2, np.pi, 3 * np.pi / 2)


def _sine(phase: float, seed: int) -> ClockSim:
    return ClockSim(seconds=3600, skew_ppm=20.0, wander_ppm=2.0, wander_period_s=1200.0,
                    wander_phase=phase, seed=seed)


def _errors_ms(sim: ClockSim) -> tuple[np.ndarray, clockmodel.ClockModel]:
    run = simulate_clock(sim)
    m = fit_clock(run.ticks, run.rx_ns, run.exchanges)
    ticks = np.arange(run.ticks.min(), run.ticks.max(), STEP_TICKS)
    return np.abs(run.error_ns(m.laptop_ns(ticks), ticks)) * 1e-6, m


def test_the_simulated_clock_integrates_its_skew() -> None:
    # Outside reference: scipy.integrate.quad of the skew gives the lag the
    # simulation's closed form must equal (laptop time = offset + b - lag).
    sim = _sine(0.7, 1)
    b = 2345.6
    lag, _ = quad(lambda t: sim._skew(np.array([t]))[0] * 1e-6, 0.0, b, limit=200)
    closed = sim.offset_s + b - float(sim.laptop_s(np.array([b * TICK_HZ]))[0])
    assert closed == pytest.approx(lag, abs=1e-12)


def test_sine_drift_p99_under_half_a_millisecond() -> None:
    errs = []
    for seed, phase in enumerate(PHASES):
        err, m = _errors_ms(_sine(phase, seed))
        errs.append(err)
        assert m.knots_x.size - 1 > 6  # cut finer than the 10-minute windows
        assert err.max() <= m.uncertainty_s * 1e3  # the bound still holds
    assert np.percentile(np.concatenate(errs), 99) < 0.5  # issue 17's goal


def test_data_chosen_pieces_beat_fixed_ten_minutes(monkeypatch: pytest.MonkeyPatch) -> None:
    sim = _sine(np.pi / 2, 7)
    chosen, _ = _errors_ms(sim)
    monkeypatch.setattr(clockmodel, "PIECE_SPLITS", (1,))  # the old fixed 10-minute pieces
    fixed, m = _errors_ms(sim)
    assert m.knots_x.size - 1 == 6
    assert np.percentile(chosen, 99) < 0.5 * np.percentile(fixed, 99)


def test_a_steady_clock_keeps_its_long_pieces() -> None:
    _, m = _errors_ms(ClockSim(seconds=1800, skew_ppm=-30.0, seed=5))
    assert m.knots_x.size - 1 == 3  # nothing bends: the longest pieces pin the clock best


def test_short_runs_are_not_cut() -> None:
    _, m = _errors_ms(ClockSim(seconds=90, skew_ppm=12.0, seed=6))
    assert m.knots_x.size == 2  # a piece under MIN_PIECE_S would follow noise


def test_points_grouped_by_window_as_a_scan_would() -> None:
    # Reference: numpy's flatnonzero per window (the plain scan it replaces).
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 100, 5000)
    knots = np.array([0.0, 7.0, 7.5, 40.0, 99.0, 100.0])
    win, _ = windows_of(x, knots)
    got = _by_window(win, knots.size - 1)
    assert len(got) == knots.size - 1
    for k, sel in enumerate(got):
        assert np.array_equal(sel, np.flatnonzero(win == k))
