"""The clock fit on links whose timing has structure (sim.clocks' options).

Simulated scenarios of our own:
- near lock: frames sent every 60 ms of the board's clock over a 7.5 ms
  connection interval, the board 1 ppm off the controller's clock: every
  frame waits about as long for its event, and that wait creeps by 1 us/s
  (a sawtooth's tooth longer than the run);
- a long air time: every notification spends 1.4 ms on the air, a PING
  write nothing extra, so the least latency is 1.4 ms longer board -> laptop;
- connection-interval links of 7.5, 15 and 30 ms, notifications and PING
  writes leaving only at connection events.
"""

from __future__ import annotations

import numpy as np
import pytest

from slipless.align.clockmodel import LEVEL_ASSUMPTION, ClockModel, fit_clock
from slipless.sim.clocks import ClockRun, ClockSim, simulate_clock

STEP_TICKS = 10_000


def _errors_ms(run: ClockRun, pings: bool = True, **kw: float) -> tuple[np.ndarray, ClockModel]:
    m = fit_clock(run.ticks, run.rx_ns, run.exchanges if pings else None, **kw)
    ticks = np.arange(run.ticks.min(), run.ticks.max(), STEP_TICKS)
    return run.error_ns(m.laptop_ns(ticks), ticks) * 1e-6, m


def _near_lock(seed: int) -> ClockSim:
    return ClockSim(seconds=3600, skew_ppm=1.0, interval_s=0.0075, frame_hz=1 / 0.06,
                    frame_jitter=0.0, delay_mean_s=0.0005, stall_every_s=0, seed=seed)


def test_connection_events_quantise_the_simulated_link() -> None:
    # Every arrival is a connection event plus the floor and a random wait.
    sim = ClockSim(seconds=60, interval_s=0.015, delay_mean_s=1e-9, stall_every_s=0, seed=2)
    run = simulate_clock(sim)
    phase = np.mod(run.rx_ns * 1e-9, 0.015)
    assert np.all((phase < 2e-6) | (phase > 0.015 - 2e-6))


def test_near_lock_the_least_delay_ramps_and_the_envelope_does_not_follow() -> None:
    sim = _near_lock(0)
    run = simulate_clock(sim)
    delay = (run.rx_ns - sim.laptop_ns(run.ticks)) * 1e-6
    first = delay[run.ticks < run.ticks.min() + 300e6].min()
    last = delay[run.ticks > run.ticks.max() - 300e6].min()
    assert last - first > 2.5  # the simulated sawtooth: about 1 us/s over the hour
    one_way, _ = _errors_ms(run, pings=False)
    ramp = np.ptp(one_way)  # receive times alone take the ramp for skew
    assert ramp > 2.5
    both, m = _errors_ms(run)
    assert np.ptp(both) < 0.2 * ramp  # the shape takes the pings' rate
    assert any("drifted" in n for n in m.notes)
    assert np.abs(both).max() <= m.uncertainty_s * 1e3


@pytest.mark.parametrize("seed", [1, 2])
def test_near_lock_error_falls(seed: int) -> None:
    run = simulate_clock(_near_lock(seed))
    one_way, _ = _errors_ms(run, pings=False)
    both, _ = _errors_ms(run)
    assert np.percentile(np.abs(both - both.mean()), 99) < 0.2 * np.percentile(
        np.abs(one_way - one_way.mean()), 99)


def test_long_air_time_biases_the_level_until_the_asymmetry_is_given() -> None:
    run = simulate_clock(ClockSim(seconds=1800, skew_ppm=20.0, air_s=0.0014, seed=4))
    err, m = _errors_ms(run)
    assert np.median(err) == pytest.approx(0.7, abs=0.05)  # half the 1.4 ms difference, late
    fixed, m2 = _errors_ms(run, asymmetry_s=0.0014)
    assert abs(np.median(fixed)) < 0.05
    level = m2.to_json()["level"]
    assert level["asymmetry_ms"] == pytest.approx(1.4)
    assert level["least_round_trip_ms"] > 1.3  # both ways summed hold the 1.4 ms
    assert level["assumption"] == LEVEL_ASSUMPTION and "only their sum" in LEVEL_ASSUMPTION


def test_an_impossible_asymmetry_is_capped_and_said() -> None:
    run = simulate_clock(ClockSim(seconds=600, skew_ppm=5.0, seed=8))
    _, m = _errors_ms(run, asymmetry_s=0.5)
    assert any("more than the least round trip" in n for n in m.notes)


@pytest.mark.parametrize("interval_ms", [7.5, 15.0, 30.0])
def test_connection_interval_links_stay_within_the_bound(interval_ms: float) -> None:
    run = simulate_clock(ClockSim(seconds=1800, skew_ppm=-25.0, interval_s=interval_ms / 1e3,
                                  link_ppm=-3.0, delay_mean_s=0.001, seed=9))
    err, m = _errors_ms(run)
    assert np.abs(err).max() <= m.uncertainty_s * 1e3
    assert np.percentile(np.abs(err), 99) < 0.5
