"""Gaps explained by the rotor's angle (loss/sector.py): the cause `rotor_angle`
only where the angle data supports it.

Runs come from the simulated rig (slipless.sim.rig) and a link shadowed over a
chosen sector (slipless.sim.shadow): simulated scenarios of our own."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import binomtest

from slipless.loss.account import analyse
from slipless.loss.collect import collect
from slipless.loss.sector import CAUSE, _circular_runs, gap_angle_deg
from slipless.sim import rig
from slipless.sim.shadow import shadow

TWO_PI = 2 * math.pi


def _binomial_tail(k: int, n: int, p: float) -> float:
    """P(K >= k) for K ~ Binomial(n, p), summed term by term: the binomial
    distribution's definition (any statistics handbook, e.g. Conover 1999, 3.1)."""
    return sum(math.comb(n, j) * p**j * (1 - p) ** (n - j) for j in range(k, n + 1))


def test_the_test_is_the_exact_binomial_tail() -> None:
    # 7 heads or more in 10 fair tosses: (120 + 45 + 10 + 1) / 1024, by hand
    assert binomtest(7, 10, 0.5, alternative="greater").pvalue == pytest.approx(176 / 1024)
    for k, n, p in ((5, 20, 0.05), (12, 33, 0.1), (1, 4, 0.3)):
        assert binomtest(k, n, p, alternative="greater").pvalue == pytest.approx(
            _binomial_tail(k, n, p), rel=1e-9)


def _run(tmp_path: Path, dead: tuple[float, float], elsewhere: float, seed: int,
         seconds: float = 40.0):
    # one turn a second; frames sent while the true angle lies in the dead sector
    # are lost, and a share `elsewhere` of the others at random
    cfg = rig.RigConfig(blocks_rad_s=(TWO_PI,), block_s=seconds, seed=seed)
    frames = list(rig.frames(cfg))
    kept, lost = shadow(frames[:-1], lambda t: np.degrees(TWO_PI * t), *dead,
                        elsewhere=elsewhere, seed=seed + 1)
    (tmp_path / "link.bin").write_bytes(b"".join(kept + frames[-1:]))  # END arrives
    (acc,) = analyse(collect([tmp_path / "link.bin"]), bins=12)
    return acc, lost


def test_gaps_in_a_dead_sector_get_the_rotor_angle_cause(tmp_path: Path) -> None:
    acc, lost = _run(tmp_path, (200.0, 240.0), 0.005, seed=3)
    assert acc.closes and lost
    (sector,) = acc.angle["sectors"]
    # a gap's place is the mean angle of its frames: about 220 for a gap over 200-240
    # (the integrated gyro drifts a few degrees, loss/angle.py)
    assert sector["from_deg"] <= 220 < sector["to_deg"]
    assert sector["to_deg"] - sector["from_deg"] <= 60
    assert sector["p_value"] < 0.01 and sector["loss_fraction_inside"] > sector["loss_fraction_outside"]
    inside = [g for g in acc.gaps if g.cause == CAUSE]
    assert len(inside) >= 25  # about one a turn, over 40 turns (the rig spins up first)
    for g in inside:
        deg = gap_angle_deg(acc.angle_rad, g.first, g.last)
        assert deg is not None and sector["from_deg"] <= deg < sector["to_deg"]
        assert "one-sided binomial test" in g.evidence[-1] and "p " in g.evidence[-1]
    # the few random losses elsewhere keep `unknown`: nothing places them
    others = [g for g in acc.gaps if g.cause != CAUSE]
    assert all(g.cause == "unknown" for g in others)
    for g in others:
        deg = gap_angle_deg(acc.angle_rad, g.first, g.last)
        assert deg is None or not sector["from_deg"] <= deg < sector["to_deg"]


def test_losses_at_random_angles_stay_unknown(tmp_path: Path) -> None:
    # no dead sector at all (an empty one): 4 % lost anywhere in the turn
    acc, lost = _run(tmp_path, (0.0, 0.0), 0.04, seed=11)
    assert len(lost) > 20 and acc.angle is not None
    assert acc.angle["sectors"] == []
    assert {g.cause for g in acc.gaps} == {"unknown"}


def test_no_angle_no_rotor_cause(tmp_path: Path) -> None:
    # the same dead-sector run, its rate stream named wrongly: no angle, no such cause
    cfg = rig.RigConfig(blocks_rad_s=(TWO_PI,), block_s=20.0, seed=3)
    frames = list(rig.frames(cfg))
    kept, _ = shadow(frames[:-1], lambda t: np.degrees(TWO_PI * t), 200.0, 240.0, seed=4)
    (tmp_path / "link.bin").write_bytes(b"".join(kept + frames[-1:]))
    (acc,) = analyse(collect([tmp_path / "link.bin"], angle_stream="nothing"), "nothing")
    assert acc.angle is None and acc.gaps
    assert {g.cause for g in acc.gaps} == {"unknown"}


def test_sectors_join_around_360() -> None:
    hit = np.array([True, False, False, True, True, False, True, True])
    assert sorted(_circular_runs(hit)) == [(3, 2), (6, 3)]  # 6, 7 and 0 make one sector
    assert _circular_runs(np.ones(4, dtype=bool)) == [(0, 4)]


def test_a_gap_spread_over_the_turn_has_no_place() -> None:
    angle = np.linspace(0, 2 * TWO_PI, 40)  # two turns
    assert gap_angle_deg(angle, 0, 39) is None
    assert gap_angle_deg(angle, 5, 6) == pytest.approx(np.degrees(angle[5:7].mean()))
