"""Labelling pulses by condition: field sign x rotation (stopped, ccw, cw at a rate).

Rotation rates are grouped by gaps between sorted rates, so 59.6 and 60.3 rpm
land together without fixed bins. Positive rates are counter-clockwise seen
from the +z axis of the rotation sensor (right-hand rule).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from slipless.model.physics import rad_s_to_rpm

STOPPED_BELOW_RAD_S = 0.05  # ~0.5 rpm: gyro bias and noise of a resting rotor [common practice]
SAME_RATE = 0.10  # rates within 10 % of each other are one condition


@dataclass
class RotationGroup:
    label: str
    rate_rad_s: float  # median of its pulses
    members: np.ndarray  # indices into the pulses

    @property
    def stopped(self) -> bool:
        return self.label == "stopped"


def rotation_groups(w: np.ndarray, stopped_below: float = STOPPED_BELOW_RAD_S) -> list[RotationGroup]:
    order = np.argsort(w, kind="stable")
    ws = w[order]
    cuts = [0]
    for i in range(1, ws.size):
        if ws[i] - ws[i - 1] > max(stopped_below, SAME_RATE * max(abs(ws[i]), abs(ws[i - 1]))):
            cuts.append(i)
    cuts.append(ws.size)
    groups = []
    for a, b in zip(cuts, cuts[1:]):
        rate = float(np.median(ws[a:b]))
        groups.append(RotationGroup(rotation_label(rate, stopped_below), rate, order[a:b]))
    _unique(groups)
    return groups


def rotation_label(rate_rad_s: float, stopped_below: float = STOPPED_BELOW_RAD_S) -> str:
    if abs(rate_rad_s) < stopped_below:
        return "stopped"
    way = "ccw" if rate_rad_s > 0 else "cw"
    return f"{way} {abs(rad_s_to_rpm(rate_rad_s)):.3g} rpm"


def _unique(groups: list[RotationGroup]) -> None:
    seen: dict[str, int] = {}
    for g in groups:
        n = seen.get(g.label, 0)
        seen[g.label] = n + 1
        if n:
            g.label = f"{g.label} ({n + 1})"


def field_label(polarity: int) -> str:
    return "+" if polarity > 0 else "-"


def condition_label(polarity: int, rotation: str) -> str:
    return f"{field_label(polarity)} / {rotation}"


def mean_se(y: np.ndarray) -> tuple[float, float, float]:
    """Mean, standard error of the mean (from the scatter) and standard deviation."""
    if y.size == 0:
        return math.nan, math.nan, math.nan
    sd = float(y.std(ddof=1)) if y.size > 1 else math.nan
    return float(y.mean()), sd / math.sqrt(y.size), sd
