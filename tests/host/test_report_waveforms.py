"""The report's pulse-averaged waveforms, on a simulated run of our own: per
condition, the mean over the aligned pulses and its standard error equal a
plain numpy mean and standard deviation / sqrt(n) over the same pulses'
windows (the standard error of a mean: common practice), the bins of the
figure are plain means of the points they hold, and the report's section
shows them in place of raw traces."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from slipless.report.page import collect, render
from slipless.report.waveforms import binned, condition_waves
from slipless.run import open_run
from slipless.sim.scenario import ScenarioConfig, build


@pytest.fixture(scope="module")
def data(tmp_path_factory: pytest.TempPathFactory) -> Any:
    folder = tmp_path_factory.mktemp("waves")
    sc = build(folder, ScenarioConfig(seed=3, seconds=60))
    return collect(open_run([sc.capture], [sc.mirror]))


def _members(a: Any, polarity: int, rotation: str) -> list[Any]:
    g = next(g for g in a.groups if g.label == rotation)
    return [a.used[int(i)] for i in g.members if a.used[int(i)].polarity == polarity]


def test_mean_and_band_are_numpy_over_the_same_windows(data: Any) -> None:
    a = data.pulses
    waves = condition_waves(a)
    assert {(w.polarity, w.rotation) for w in waves} == {
        (c.polarity, c.rotation) for c in a.conditions}
    assert len(waves) == 6  # field + and - at cw, stopped, ccw
    for w in waves:
        members = _members(a, w.polarity, w.rotation)
        assert w.n == len(members) >= 2
        rows = np.vstack([m.waves()[0] for m in members])  # each pulse's window, baseline removed
        full = np.all(np.isfinite(rows), axis=0)  # grid points every pulse reached
        assert full.sum() > 0.9 * full.size
        mean = rows[:, full].mean(axis=0)
        se = rows[:, full].std(axis=0, ddof=1) / np.sqrt(len(members))
        np.testing.assert_allclose(w.mean_v[full], mean, rtol=1e-9, atol=1e-15)
        np.testing.assert_allclose(w.se_v[full], se, rtol=1e-9, atol=1e-15)
        ends = [m.end_s - m.onset_s for m in members]
        assert w.end_s == pytest.approx(float(np.median(ends)))
        # the averaged current switches on at the onset and off at the median end
        on = (a.grid_s > 0.1 * w.end_s) & (a.grid_s < 0.9 * w.end_s)
        assert np.sign(np.nanmean(w.current_a[on])) == w.polarity


def test_bins_are_plain_means() -> None:
    t = np.arange(1000) * 1e-3
    y = np.sin(t * 7.0)
    se = np.full_like(t, 0.5)
    bt, by, be = binned(t, y, se, points=100)
    assert bt.size == by.size == be.size == 100
    np.testing.assert_allclose(by, y.reshape(100, 10).mean(axis=1), rtol=1e-12)
    np.testing.assert_allclose(bt, t.reshape(100, 10).mean(axis=1), rtol=1e-12)
    # the mean of 10 points each of error 0.5 (independent): 0.5 / sqrt(10)
    np.testing.assert_allclose(be, 0.5 / np.sqrt(10), rtol=1e-12)


def test_section_shows_averages_not_raw_traces(data: Any) -> None:
    page = render(data, "t", made="fixed")
    sec = page[page.index('<section id="traces">'):]
    sec = sec[:sec.index("</section>")]
    assert "Averaged pulse waveforms" in sec and "standard error" in sec
    assert "averaged over the aligned pulses" in sec
    assert sec.count("<img") == 2  # the averages, and one raw pulse
    assert re.search(r"One pulse as recorded", sec)


def test_no_pulses_says_why(tmp_path: Path) -> None:
    from slipless.report.page import ReportData, _traces

    d = ReportData([], [])
    d.notes["pulses"] = "no pulse analysis: because"
    assert "because" in _traces(d)
