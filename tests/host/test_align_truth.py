"""The clock model against simulated truth (slipless.sim.clocks).

The scenario is the one issue 6 sets: board skew of -50 to +50 ppm, a random
offset, one-sided delays exponential with mean 15 ms plus rare 200 ms stalls,
30 minutes, a PING every second. The delay figures are a test scenario, not
measurements [common practice for a BLE link's order of magnitude].
"""

from __future__ import annotations

import numpy as np
import pytest

import slipless.align.clockmodel as clockmodel
from slipless.align.clockmodel import fit_clock, least_squares_line
from slipless.sim.clocks import ClockSim, simulate_clock

STEP_TICKS = 10_000  # check the mapping every 10 ms of board time


def _errors(sim: ClockSim, exchanges: bool = True) -> tuple[np.ndarray, object]:
    run = simulate_clock(sim)
    m = fit_clock(run.ticks, run.rx_ns, run.exchanges if exchanges else None)
    ticks = np.arange(run.ticks.min(), run.ticks.max(), STEP_TICKS)
    return np.abs(run.error_ns(m.laptop_ns(ticks), ticks)) * 1e-9, m


@pytest.mark.parametrize("seed,skew_ppm", [(1, -50.0), (2, 50.0), (3, -17.3), (4, 33.1), (5, 0.4)])
def test_error_stays_inside_stated_uncertainty(seed: int, skew_ppm: float) -> None:
    rng = np.random.default_rng(seed)
    sim = ClockSim(seconds=1800, skew_ppm=skew_ppm, offset_s=float(rng.uniform(10, 1e5)), seed=seed)
    err, m = _errors(sim)
    assert err.max() <= m.uncertainty_s
    assert m.skew_ppm == pytest.approx(skew_ppm, abs=0.2)
    assert m.basis == "two-way + one-way" and m.kept >= 8


def test_one_way_only_stays_inside_and_says_so() -> None:
    err, m = _errors(ClockSim(seed=11, skew_ppm=-42.0), exchanges=False)
    assert err.max() <= m.uncertainty_s
    assert m.basis == "one-way only" and m.kept == 0


def test_temperature_drift_is_followed_by_the_pieces(monkeypatch: pytest.MonkeyPatch) -> None:
    # Skew wandering by 6 ppm over the run (a few degrees on a crystal, [common practice]).
    sim = ClockSim(seed=12, skew_ppm=20.0, drift_ppm_per_h=12.0)
    err, m = _errors(sim)
    assert err.max() <= m.uncertainty_s
    skews = m.window_skews_ppm
    # 10-min windows, cut in 1, 2, 4 or 8 pieces as the data ask (clockmodel.choose_knots)
    assert skews.size % 3 == 0 and np.all(np.diff(skews) > 0)  # rising as the simulated skew does
    monkeypatch.setattr(clockmodel, "PIECE_SPLITS", (1,))  # not cut by the data: one piece
    line = fit_clock(*_line_inputs(sim), window_s=1e9)  # one piece for the whole run
    ticks = np.arange(sim.start_tick, sim.start_tick + int(sim.seconds * 1e6), STEP_TICKS)
    one_piece = np.abs(line.laptop_ns(ticks) - sim.laptop_ns(ticks)).max() * 1e-9
    assert err.max() < one_piece / 3


def _line_inputs(sim: ClockSim) -> tuple[np.ndarray, np.ndarray]:
    run = simulate_clock(sim)
    return run.ticks, run.rx_ns


def test_exchanges_remove_a_latency_floor() -> None:
    # Notifications never faster than 5 ms, writes than 7.5 ms: one-way data alone
    # put the board 5 ms late; the exchanges bound it from both sides.
    sim = ClockSim(seed=13, skew_ppm=25.0, floor_s=0.005, write_floor_s=0.0075)
    with_ex, m = _errors(sim)
    one_way, _ = _errors(sim, exchanges=False)
    assert with_ex.max() <= m.uncertainty_s
    assert one_way.min() > 0.0045  # the floor shows up as offset
    assert with_ex.max() < 0.004  # at most half the write floor plus the fit's own error


def test_least_squares_is_biased_by_the_mean_delay() -> None:
    sim = ClockSim(seed=14, skew_ppm=-8.0)
    run = simulate_clock(sim)
    ls = least_squares_line(run.ticks, run.rx_ns)
    ticks = run.ticks
    bias = np.median(ls.laptop_ns(ticks) - sim.laptop_ns(ticks)) * 1e-9
    assert bias == pytest.approx(0.015, abs=0.004)  # the exponential delays' mean


def test_model_json_round_trips_the_mapping() -> None:
    run = simulate_clock(ClockSim(seed=15, seconds=600))
    m = fit_clock(run.ticks, run.rx_ns, run.exchanges)
    j = m.to_json()
    knots_t, knots_ns = np.array(j["knots_tick"]), np.array(j["knots_mono_ns"])
    assert np.abs(m.laptop_ns(knots_t) - knots_ns).max() <= 2
    assert j["uncertainty_ms"] == pytest.approx(m.uncertainty_s * 1e3)
