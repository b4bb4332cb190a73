"""Loss against rotor angle: a link that is dead over a known sector of the turn
must show up as that sector, from the gyro stream alone."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from slipless.decode.decoder import RunState
from slipless.loss.account import LOST, analyse
from slipless.loss.angle import histogram, rotor_angle
from slipless.loss.collect import RunFacts, collect
from slipless.sim import rig
from slipless.sim.shadow import send_ticks, shadow

TWO_PI = 2 * math.pi


def test_dead_sector_found_from_the_gyro(tmp_path: Path) -> None:
    # 30 s at one turn per second; the link is dead from 200 to 240 degrees of the
    # true rotor angle and loses 1 % elsewhere.
    cfg = rig.RigConfig(blocks_rad_s=(TWO_PI,), block_s=30.0, seed=3)
    frames = list(rig.frames(cfg))
    kept, lost = shadow(frames, lambda t: np.degrees(TWO_PI * t), 200.0, 240.0, elsewhere=0.01,
                        seed=4)
    if lost and lost[-1] == len(frames) - 1:  # keep END: the run's length must be known
        kept.append(frames[-1])
        lost.pop()
    (tmp_path / "link.bin").write_bytes(b"".join(kept))
    (acc,) = analyse(collect([tmp_path / "link.bin"]), bins=12)
    assert acc.closes, acc.discrepancies
    assert acc.expected == len(frames)
    assert sorted(map(int, np.flatnonzero(acc.cls == LOST))) == lost  # the injected truth
    assert acc.angle is not None and "gyro_z" in acc.angle["source"]
    bins = acc.angle["bins"]
    # The gyro's bias (0.003 rad/s) and the Earth's rate shift the integrated angle
    # by about 5 degrees over the run: the 210-240 bin stays wholly inside the sector.
    assert acc.angle["worst_deg"] == 225.0
    assert bins[7]["loss_fraction"] > 0.95
    far = [b["loss_fraction"] for b in bins if not 150 <= b["from_deg"] < 270]
    assert max(far) < 0.06
    # Angle 0 is the rotor at the gyro's first sample even though the first gyro frame
    # was lost in the sector: the lossless record gives the same angles.
    (tmp_path / "all.bin").write_bytes(b"".join(frames))
    (full,) = analyse(collect([tmp_path / "all.bin"]), bins=12)
    assert full.angle_rad is not None and acc.angle_rad is not None
    both = np.isfinite(full.angle_rad) & np.isfinite(acc.angle_rad) & ~acc.live_lost
    assert both.sum() > 0.85 * acc.expected
    # (lost gyro samples are bridged linearly: their noise is missing from the sum)
    assert np.degrees(np.abs(full.angle_rad - acc.angle_rad)[both]).max() < 2.0
    # Gaps carry their angle too.
    dead = [g for g in acc.gaps if g.frames >= 3]
    assert dead and all(200 <= np.degrees(np.angle(np.exp(1j * acc.angle_rad[g.first : g.last + 1])
                                                    .mean())) % 360 <= 245 for g in dead)


def test_send_ticks_follow_the_frames() -> None:
    cfg = rig.RigConfig(blocks_rad_s=(TWO_PI,), block_s=2.0)
    ticks = send_ticks(list(rig.frames(cfg)))
    assert ticks == sorted(ticks) and ticks[-1] == 2_000_000


def _facts(markers: list[int]) -> RunFacts:
    f = RunFacts(RunState(1, 1))
    f.markers = [(t, 7) for t in markers] + [(123, 8)]  # another marker value is ignored
    return f


def test_angle_from_index_markers_bridges_a_lost_marker() -> None:
    # One marker per turn of 0.5 s; the marker at 1.0 s was lost with its frame.
    f = _facts([0, 500_000, 1_500_000, 2_000_000])
    at = np.array([250_000, 750_000, 1_250_000, 1_900_000, 2_100_000], dtype=np.float64)
    angle, source = rotor_angle(f, at, index_marker=7)
    assert source == "index marker 7"
    assert angle is not None
    assert np.degrees(angle[:4]) == pytest.approx([180, 540, 900, 1368])
    assert np.isnan(angle[4])  # after the last marker: unknown
    assert rotor_angle(_facts([0]), at, index_marker=7)[0] is None


def test_histogram_bins_and_worst() -> None:
    angle = np.radians(np.arange(0, 360, 10.0) + 5)
    lost = np.isin(np.arange(36), [9, 10, 11])  # 95, 105 and 115 degrees
    h = histogram(angle, lost, 4)
    assert [b["frames"] for b in h["bins"]] == [9, 9, 9, 9]
    assert [b["lost"] for b in h["bins"]] == [0, 3, 0, 0]
    assert h["worst_deg"] == 135.0 and h["frames_with_angle"] == 36


@pytest.mark.parametrize("still_first", [True, False])
def test_the_gyros_zero_is_taken_from_standstill(still_first: bool,
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    """A gyro reads its bias plus the Earth's vertical rate (Omega sin(latitude),
    Omega = 7.2921150e-5 rad/s, the WGS 84 defining constant, NIMA TR8350.2) while the
    turntable stands still; integrating that shifts the angle by tens of
    degrees over minutes. The standstill readings fix the zero."""
    from slipless.loss import angle as loss_angle
    from slipless.model.physics import EARTH_RATE_RAD_S, earth_vertical_rate

    assert EARTH_RATE_RAD_S == pytest.approx(7.292115e-5, rel=1e-6)
    rate_hz, bias = 200, 0.003
    t = np.arange(0, 180 * rate_hz) / rate_hz
    spinning = (t >= 20) & (t < 160) if still_first else (t >= 0) & (t < 140)
    true_w = np.where(spinning, TWO_PI, 0.0)
    rng = np.random.default_rng(1)
    read = true_w + bias + earth_vertical_rate(48.0) + rng.normal(0, 0.02, t.size)
    t_us = (t * 1e6).astype(np.int64)
    got = loss_angle._from_rate(t_us, read, t_us, None)
    truth = np.concatenate(([0.0], np.cumsum((true_w[1:] + true_w[:-1]) / 2 / rate_hz)))
    # left: the noise's random walk and the zero's uncertainty (0.02 rad/s / sqrt(8000
    # still readings) x 180 s, about 2 degrees each)
    assert np.max(np.abs(np.degrees(got - truth))) < 6.0
    monkeypatch.setattr(loss_angle, "STILL_SAMPLES", 10**9)  # no zero taken: the old drift
    drift = loss_angle._from_rate(t_us, read, t_us, None)
    assert np.degrees(drift[-1] - truth[-1]) > 25.0
