"""Gaps explained by the rotor's angle: a sector of the turn where the link fails.

A rotating board's antenna can face away from the laptop, or behind metal, over
part of every turn. Losses there leave no trace in the board's counters or the
link's events, so such gaps would be `unknown`. This module names them
`rotor_angle`, and only where the angle data supports it:

- the gaps tested are those no other cause explains (`unknown`) and that have
  a place in the turn: the circular mean of their frames' angles (as the
  report gives), when their mean resultant length is at least MIN_RESULTANT
  (a gap spread over most of a turn, or several, has no place);
- per angle bin (the loss histogram's bins) k = such gaps in it, n = all such
  gaps, p0 = the bin's share of the frames received live (the run's loss-free
  angles: where the rotor spent its time when nothing was lost);
- if gaps came independently of the angle, k would follow Binomial(n, p0).
  The one-sided exact binomial test (Conover, Practical Nonparametric
  Statistics, 3rd ed., 1999, section 3.1; scipy.stats.binomtest) gives
  P(K >= k); a bin is part of a sector when that p-value times the number of
  bins (Bonferroni's correction, Dunn, JASA 56, 1961) is under ALPHA and it
  holds at least MIN_GAPS such gaps;
- neighbouring such bins (around 360 too) make one sector. Each `unknown` gap
  inside a sector gets the cause `rotor_angle`, with the sector, its share of
  frames not received live against the rest of the turn, and the test.

Gaps are the units tested, not frames: the frames of one gap are not
independent draws (a gap is one event of the link), so counting frames would
overstate the evidence.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

CAUSE = "rotor_angle"
ALPHA = 0.01  # family-wise error rate over the bins (common practice: 0.01 or 0.05)
MIN_GAPS = 3  # a sector needs at least this many unexplained gaps (common practice)
MIN_RESULTANT = 0.5  # our rule: a gap whose frames spread wider than about 120 deg has no place


@dataclass
class Sector:
    first_bin: int
    bins: int  # how many bins, counted on from first_bin (modulo the bin count)
    width_deg: float
    gaps: int  # unexplained gaps inside
    tested: int  # unexplained gaps with an angle, in the whole run
    live_share: float  # share of the frames received live sent inside (p0)
    p_value: float  # the largest Bonferroni-corrected p-value of its bins
    lost_inside: float  # share of the frames inside not received live
    lost_outside: float

    @property
    def from_deg(self) -> float:
        return self.first_bin * self.width_deg

    @property
    def to_deg(self) -> float:
        return self.from_deg + self.bins * self.width_deg

    def holds(self, deg: float, total: int) -> bool:
        k = int(deg // self.width_deg) % total
        return (k - self.first_bin) % total < self.bins

    def as_dict(self) -> dict[str, Any]:
        return {"from_deg": self.from_deg, "to_deg": self.to_deg, "gaps": self.gaps,
                "gaps_tested": self.tested, "live_share": self.live_share,
                "p_value": self.p_value, "test": "binomial, one-sided, Bonferroni-corrected",
                "loss_fraction_inside": self.lost_inside,
                "loss_fraction_outside": self.lost_outside}


def gap_angle_deg(angle_rad: np.ndarray | None, first: int, last: int) -> float | None:
    """Where in the turn frames first..last were sent: the circular mean of their
    angles, in [0, 360); None without angles or when they spread too wide."""
    if angle_rad is None:
        return None
    ang = angle_rad[first : last + 1]
    ang = ang[np.isfinite(ang)]
    if not ang.size:
        return None
    mean = np.exp(1j * ang).mean()
    if abs(mean) < MIN_RESULTANT:
        return None
    return float(np.degrees(np.angle(mean)) % 360)


def _bin_of(deg: np.ndarray, bins: int) -> np.ndarray:
    return np.minimum((np.mod(deg, 360.0) / 360.0 * bins).astype(np.int64), bins - 1)


def find_sectors(angle_rad: np.ndarray | None, received: np.ndarray, gaps: Sequence[Any],
                 bins: int) -> list[Sector]:
    """The sectors where the unexplained gaps gather beyond chance (none without angles).
    angle_rad: per seq (NaN unknown); received: per seq, arrived live; gaps: the
    run's gaps (first, last, cause)."""
    if angle_rad is None or bins < 2:
        return []
    angles = [gap_angle_deg(angle_rad, g.first, g.last) for g in gaps if g.cause == "unknown"]
    deg = np.array([a for a in angles if a is not None])
    ok = np.isfinite(angle_rad)
    live = ok & received
    if deg.size < MIN_GAPS or not live.any():
        return []
    from scipy.stats import binomtest  # here: importing the loss package stays light

    k = np.bincount(_bin_of(deg, bins), minlength=bins)
    frame_bin = _bin_of(np.degrees(angle_rad[ok]), bins)
    p0 = np.bincount(_bin_of(np.degrees(angle_rad[live]), bins), minlength=bins) / live.sum()
    p_adj = np.ones(bins)
    for i in np.flatnonzero(k >= 1):
        p = 1.0 if p0[i] >= 1.0 else binomtest(int(k[i]), int(deg.size), float(p0[i]),
                                               alternative="greater").pvalue
        p_adj[i] = min(1.0, float(p) * bins)
    hit = p_adj < ALPHA
    if not hit.any():
        return []
    lost = ~received[ok]
    out = []
    for first, n in _circular_runs(hit):
        members = [(first + j) % bins for j in range(n)]
        inside = np.isin(frame_bin, members)
        held = int(k[members].sum())
        if held < MIN_GAPS:
            continue
        out.append(Sector(first, n, 360.0 / bins, held, int(deg.size), float(p0[members].sum()),
                          float(p_adj[members].max()), _share(lost[inside]),
                          _share(lost[~inside])))
    return out


def _p_text(p: float) -> str:
    return f"p = {p:.2g}" if p > 0 else "p < 1e-300"  # below what a float holds


def _share(mask: np.ndarray) -> float:
    return float(mask.mean()) if mask.size else math.nan


def _circular_runs(hit: np.ndarray) -> list[tuple[int, int]]:
    """(first index, length) of the runs of True, joined around the end."""
    n = hit.size
    if hit.all():
        return [(0, n)]
    start = int(np.flatnonzero(~hit)[0]) + 1  # begin after a False: no run is cut at the end
    runs: list[tuple[int, int]] = []
    length = 0
    for j in range(n):
        i = (start + j) % n
        if hit[i]:
            length += 1
        elif length:
            runs.append(((i - length) % n, length))
            length = 0
    if length:
        runs.append(((start + n - length) % n, length))
    return runs


def explain(angle_rad: np.ndarray | None, received: np.ndarray, gaps: Sequence[Any],
            bins: int) -> list[Sector]:
    """Give the `unknown` gaps inside a sector the cause rotor_angle, with evidence
    (gaps: objects with first, last, cause, evidence, changed in place); return
    the sectors."""
    sectors = find_sectors(angle_rad, received, gaps, bins)
    for g in gaps:
        if g.cause != "unknown" or not sectors:
            continue
        deg = gap_angle_deg(angle_rad, g.first, g.last)
        s = next((s for s in sectors if deg is not None and s.holds(deg, bins)), None)
        if s is None:
            continue
        g.cause = CAUSE
        g.evidence.append(
            f"rotor at {deg:.0f} deg, inside the sector {s.from_deg:.0f}-{s.to_deg:.0f} deg: "
            f"{100 * s.lost_inside:.1f} % of the frames sent there not received live, "
            f"{100 * s.lost_outside:.1f} % elsewhere; {s.gaps} of the run's {s.tested} "
            f"unexplained gaps lie there, where {100 * s.live_share:.1f} % of the frames "
            f"received live were sent (one-sided binomial test, Bonferroni over {bins} "
            f"sectors: {_p_text(s.p_value)})")
    return sectors
