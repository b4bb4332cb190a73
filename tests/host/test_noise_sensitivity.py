"""The reach of the pulse fit: the smallest resolvable d and b against the number
of pulses, from the Allan deviation of the fit's residuals. Checked on the
simulated rig (a scenario of our own) through the real pulse analysis: a short
run's forecast against a long run's own errors; and on residual series with and
without drift."""

from __future__ import annotations

import math

import numpy as np
import pytest
from rig_runs import run_data

from slipless.errors import InputError
from slipless.noise import allan, sensitivity
from slipless.pulses.analysis import Analysis, Options, analyse
from slipless.pulses.reduce import Settings
from slipless.sim import rig

BLOCKS = (0.0, 2 * math.pi, -2 * math.pi)


def rig_analysis(seed: int, repeats: int, by: str = "current") -> tuple[Analysis, rig.RigConfig]:
    cfg = rig.RigConfig(seed=seed, blocks_rad_s=BLOCKS * repeats)
    sig = rig.signals(cfg)
    return analyse([run_data(sig)], Settings(), Options(by=by)), cfg


@pytest.mark.parametrize("seed", [0, 1])
def test_a_short_run_forecasts_a_long_runs_error(seed: int) -> None:
    # 180 s (72 pulses) forecast se(d) at the pulses of a 1440 s run of the same rig;
    # the long run's own fit gives its se(d). They agree within the short run's own
    # uncertainty (se estimated from 72 pulses: about 10 %; 25 % allowed).
    short, _ = rig_analysis(seed, 2)
    long, _ = rig_analysis(seed + 100, 16)
    s = sensitivity.sensitivity(short)
    n_long = len(long.used)
    forecast = s.se_d * s.scale(n_long)
    actual = float(long.fit.se[long.fit.index("d")])
    assert s.white_only  # the rig's residuals show no drift at these lengths
    assert 0.75 < forecast / actual < 1.25
    # the reach rows: z se, falling as 1/sqrt(N) on white scatter
    assert s.z == pytest.approx(1.959964, rel=1e-6)  # two-sided 95 %
    r0, r1 = s.rows[0], s.rows[1]
    assert r0.pulses == s.pulses and r0.d_min == pytest.approx(s.z * s.se_d)
    assert r1.d_min == pytest.approx(r0.d_min / math.sqrt(10))
    assert r1.run_s == pytest.approx(10 * r0.run_s)


def test_prediction_puts_the_earth_in_b() -> None:
    a, cfg = rig_analysis(3, 2)
    pred = cfg.prediction()
    s = sensitivity.sensitivity(a, pred)
    slope = pred["slope_V_per_A_rad_s"]
    assert s.predicted_d == pytest.approx(slope)
    # the Earth's vertical rate adds to w in both field signs: slope * Omega_E lands in b
    assert s.earth_b == pytest.approx(slope * pred["earth_rate_rad_s"])
    # white scatter: N = n (z se / target)^2 [the 1/sqrt(N) law]
    assert s.earth_pulses == pytest.approx(s.pulses * (s.z * s.se_b / s.earth_b) ** 2, rel=1e-9)
    assert s.run_s(s.earth_pulses) > 3.15e7  # more than a year of pulsing
    assert s.d_pulses is not None and s.d_pulses < s.pulses  # the rig's d is seen already
    assert any("in b, not d" in n for n in s.notes)
    # by field sign: b and d are per sign, so the Earth's part scales by the mean |I|
    a2, _ = rig_analysis(3, 2, by="sign")
    s2 = sensitivity.sensitivity(a2, pred)
    amps = float(np.mean([abs(p.current_a) for p in a2.used]))
    assert s2.earth_b == pytest.approx(slope * pred["earth_rate_rad_s"] * amps)


def test_drift_bends_the_reach() -> None:
    # Residuals that random-walk (our own simulation): the walk term is fitted, the
    # reach bottoms out, and a target below the bottom is never reached.
    rng = np.random.default_rng(6)
    e = rng.standard_normal(4096) + np.cumsum(0.05 * rng.standard_normal(4096))
    c = allan.oadev([e], 1.0, allan.octave_ms(e.size))
    (h, f, r), white_only = sensitivity.fit_model(c)
    assert not white_only and r > 0 and h == pytest.approx(1.0, rel=0.15)
    s = _bare(c, (h, f, r))
    best = min(s.sigma(m) for m in np.geomspace(1, 1e6, 400))
    per = s.z / s.sigma(1)  # se(N) = se(1) sigma(N) / sigma(1), se(1) = 1 here
    assert sensitivity.pulses_needed(0.5 * best * per, 1.0, s) is None
    n = sensitivity.pulses_needed(2 * best * per, 1.0, s)
    assert n is not None and s.sigma(n) == pytest.approx(2 * best, rel=1e-6)


def test_white_residuals_fit_white_only() -> None:
    e = np.random.default_rng(7).standard_normal(4096)
    c = allan.oadev([e], 1.0, allan.octave_ms(e.size))
    (h, f, r), white_only = sensitivity.fit_model(c)
    assert white_only and f == r == 0 and h == pytest.approx(1.0, rel=0.05)


def _bare(c: allan.AllanCurve, model: tuple[float, float, float]) -> sensitivity.Sensitivity:
    return sensitivity.Sensitivity(1, 1.0, 0.95, 1.959964, c, model, False, 0.0, 1.0, "V",
                                   0.0, 1.0, "V")


def test_bad_prediction_file(tmp_path) -> None:  # type: ignore[no-untyped-def]
    bad = tmp_path / "p.json"
    bad.write_text('{"results": {"field_T": 1}}')
    with pytest.raises(InputError, match="not the output of `slipless predict --json`"):
        sensitivity.read_prediction(bad)
    with pytest.raises(InputError, match="cannot read"):
        sensitivity.read_prediction(tmp_path / "missing.json")
