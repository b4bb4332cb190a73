"""The artifact flag is a test: in each run and rotation segment, H0 "the field
slope is the induction term the whole fit gives (b = 0 here)", a t-test of the
segment's slope with its HC2-BM error, flagged at p < 0.01. Checked against
scipy's Welch t statistic, and on the simulated rig with and without leakage
(invented data, a scenario of our own).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from rig_runs import run_data
from scipy import stats

from slipless.pulses.analysis import ARTIFACT_P, Options, analyse
from slipless.pulses.reduce import Settings
from slipless.pulses.report import tables
from slipless.sim import rig

SHORT = {"blocks_rad_s": (0.0, 2 * math.pi, -2 * math.pi), "block_s": 20.0}


def test_the_segment_test_is_welchs_t_on_the_slope() -> None:
    # independent: scipy's Welch t-test of the + and - responses, each moved by the
    # induction term d w the whole fit gives (with s = field sign the slope is half
    # the difference of the means, so the two t statistics are the same)
    a = analyse([run_data(rig.signals(rig.RigConfig(seed=7, leak_v_per_a=2e-5)))], Settings(),
                Options(by="sign"))
    d = float(a.fit.coef[a.fit.index("d")])
    label = {i: g.label for g in a.groups for i in g.members}
    for row in a.segments:
        idx = [i for i in range(len(a.used)) if label[i] == row["rotation"]]
        y = np.array([a.used[i].response_v for i in idx])
        plus = np.array([a.used[i].polarity > 0 for i in idx])
        shift = d * row["rotation_rad_s"]
        welch = stats.ttest_ind(y[plus] - shift, y[~plus] + shift, equal_var=False)
        t = row["artifact_part"] / row["se"]
        assert t == pytest.approx(welch.statistic, rel=1e-9)
        # Bell-McCaffrey df of a difference of two means: Welch-Satterthwaite at equal
        # variances (Satterthwaite 1946), n1 + n2 - 2 for equal groups
        n1, n2 = int(plus.sum()), int((~plus).sum())
        df = (1 / n1 + 1 / n2) ** 2 / (1 / (n1**2 * (n1 - 1)) + 1 / (n2**2 * (n2 - 1)))
        assert row["dof"] == pytest.approx(df, rel=1e-9)
        assert row["p_artifact"] == pytest.approx(2 * stats.t.sf(abs(t), df), rel=1e-9)
        assert row["se_kind"] == "HC2-BM"


def test_no_leakage_no_flags() -> None:
    """Without leakage the flag is a false alarm at most ARTIFACT_P of the time
    (measured: no flag in 60 spinning segments; it leaves out d's own error,
    which makes it conservative when one run holds all the data)."""
    flags, ps = [], []
    for seed in range(30):
        cfg = rig.RigConfig(seed=seed, leak_v_per_a=0.0, **SHORT)
        a = analyse([run_data(rig.signals(cfg))], Settings(), Options())
        spinning = [r for r in a.segments if r["rotation"] != "stopped"]
        flags += [r["flag"] for r in spinning]
        ps += [r["p_artifact"] for r in spinning]
    assert flags.count("artifact") <= 2
    assert np.median(ps) > 0.2


def test_leakage_is_flagged_with_its_p_value() -> None:
    a = analyse([run_data(rig.signals(rig.RigConfig(seed=3, **SHORT)))], Settings(), Options())
    t = tables(a)
    seg = t["segments"]
    assert ARTIFACT_P == 0.01
    for rot, flag, p in zip(seg["rotation"], seg["flag"], seg["p_artifact"]):
        assert flag == ("control" if rot == "stopped" else "artifact") and p < 1e-4
    spinning = [p for r, p in zip(seg["rotation"], seg["p_artifact"]) if r != "stopped"]
    assert t["runs"]["flag"] == ["artifact"] and t["runs"]["p_artifact"] == [min(spinning)]
    assert t["runs"]["se_kind"] == ["HC2-BM"]


@pytest.mark.parametrize("leak, noise, flagged", [(3e-4, 5e-3, True), (6e-4, 0.1, False)])
def test_the_flag_follows_the_test_not_the_sizes(leak: float, noise: float,
                                                  flagged: bool) -> None:
    """A leak smaller than the induction term but well measured is an artifact; one
    larger than it but within the noise is not (the sizes alone said the reverse)."""
    cfg = rig.RigConfig(seed=1, leak_v_per_a=leak, noise_v=noise, **SHORT)
    a = analyse([run_data(rig.signals(cfg))], Settings(), Options())
    for r in (r for r in a.segments if r["rotation"] != "stopped"):
        assert (abs(r["artifact_part"]) > abs(r["induction_part"])) != flagged
        assert (r["flag"] == "artifact") == flagged == (r["p_artifact"] < ARTIFACT_P)
