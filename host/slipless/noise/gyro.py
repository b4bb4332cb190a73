"""A rate stream's noise terms read off its Allan deviation, as IEEE Std 952
(Annex C, the Allan variance method) reads a gyro's:

- angle random walk N: sigma^2 = N^2 / tau, the slope -1/2 line read at tau = 1 s;
- bias instability B: the flat bottom, sigma = sqrt(2 ln 2 / pi) B = 0.664 B;
- rate random walk K: sigma^2 = K^2 tau / 3, the slope +1/2 line read at tau = 3 s.

(The three forms from memory of the standard's Annex C, which is not at hand
here; the tests check each on simulated noise of known N, B and K.)

Only points of MIN_EDF or more degrees of freedom are read. Each line goes
through the points whose local log-log slope is within SLOPE_TOL of the
line's own, so a quantization (-1) or drift (+1) stretch does not bend it;
the -1/2 line is looked for where the curve falls from its shortest tau to
its first minimum and the +1/2 line after that, where the standard's figure
places them (a signal in the stream, such as rotation steps, can fall at
-1/2 at long tau too, and is not white noise). Any stream gets the terms in
its own unit; one in rad/s or deg/s also in deg/sqrt(h), deg/h and
deg/h/sqrt(h).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from slipless.noise.allan import AllanCurve

SLOPE_TOL = 0.2  # how far a local slope may stray from -1/2 or +1/2 [common practice]
MIN_EDF = 5.0  # points read: fewer degrees of freedom leave sigma uncertain by a third or more
B_FACTOR = math.sqrt(2 * math.log(2) / math.pi)  # 0.6643
_DEG_PER = {"rad/s": 180 / math.pi, "deg/s": 1.0, "dps": 1.0, "°/s": 1.0}


@dataclass
class Term:
    name: str
    value: float | None  # in `unit`
    unit: str
    deg_value: float | None  # for a rate stream in angular units
    deg_unit: str
    tau_s: tuple[float, float] | None  # the averaging times it was read over
    note: str = ""  # why missing, or that it is a bound


@dataclass
class GyroTerms:
    arw: Term  # N
    bias: Term  # B
    rrw: Term  # K

    def all(self) -> tuple[Term, Term, Term]:
        return self.arw, self.bias, self.rrw


def local_slopes(c: AllanCurve) -> np.ndarray:
    return np.diff(np.log(c.adev)) / np.diff(np.log(c.tau_s))


def _on_line(c: AllanCurve, target: float, last: bool) -> np.ndarray | None:
    """Indices of the longest stretch of points joined by slopes near target:
    before the curve first turns up for the -1/2 line (the short-tau end),
    after that for the +1/2 line (the first or, when `last`, the last such stretch)."""
    if len(c) < 2:
        return None
    slopes = local_slopes(c)
    rising = np.flatnonzero(slopes > 0)
    bottom = int(rising[0]) if rising.size else slopes.size  # the first local minimum
    near = np.abs(slopes - target) <= SLOPE_TOL
    allowed = np.arange(near.size) < bottom if target < 0 else np.arange(near.size) >= bottom
    near &= allowed
    best: tuple[int, int] | None = None
    i = 0
    while i < near.size:
        if near[i]:
            j = i
            while j + 1 < near.size and near[j + 1]:
                j += 1
            if best is None or (j - i > best[1] - best[0]) or (last and j - i == best[1] - best[0]):
                best = (i, j)
            i = j + 1
        else:
            i += 1
    return None if best is None else np.arange(best[0], best[1] + 2)


def _line_value(c: AllanCurve, idx: np.ndarray, power: float, at_tau: float) -> float:
    """sigma = A tau^power through the points (log mean weighted by edf), read at at_tau."""
    w = c.edf[idx]
    log_a = np.sum(w * (np.log(c.adev[idx]) - power * np.log(c.tau_s[idx]))) / np.sum(w)
    return float(math.exp(log_a) * at_tau ** power)


def terms(c: AllanCurve, unit: str) -> GyroTerms:
    """The three terms from the points of at least MIN_EDF degrees of freedom."""
    deg = _DEG_PER.get(unit.strip().lower())
    c = reliable(c)
    return GyroTerms(_arw(c, unit, deg), _bias(c, unit, deg), _rrw(c, unit, deg))


def reliable(c: AllanCurve) -> AllanCurve:
    """The curve up to its last point of MIN_EDF or more degrees of freedom."""
    good = np.flatnonzero(c.edf >= MIN_EDF)
    end = int(good[-1]) + 1 if good.size else 0
    return AllanCurve(c.m[:end], c.tau_s[:end], c.adev[:end], c.lo[:end], c.hi[:end],
                      c.edf[:end], c.terms[:end], c.alpha[:end], c.level, c.rate_hz)


def _term(name: str, value: float | None, unit: str, per_deg: float | None, scale: float,
          deg_unit: str, span: tuple[float, float] | None, note: str = "") -> Term:
    deg_value = None if value is None or per_deg is None else value * per_deg * scale
    return Term(name, value, unit, deg_value, deg_unit if per_deg is not None else "", span, note)


def _span(c: AllanCurve, idx: np.ndarray) -> tuple[float, float]:
    return float(c.tau_s[idx[0]]), float(c.tau_s[idx[-1]])


def _arw(c: AllanCurve, unit: str, deg: float | None) -> Term:
    idx = _on_line(c, -0.5, last=False)
    if idx is None:
        return _term("N", None, f"{unit}/sqrt(Hz)", deg, 60.0, "deg/sqrt(h)", None,
                     "no stretch of slope -1/2 before the first minimum")
    value = _line_value(c, idx, -0.5, 1.0)  # sigma(1 s) = N
    return _term("N", value, f"{unit}/sqrt(Hz)", deg, 60.0, "deg/sqrt(h)", _span(c, idx))


def _rrw(c: AllanCurve, unit: str, deg: float | None) -> Term:
    idx = _on_line(c, 0.5, last=True)
    if idx is None:
        return _term("K", None, f"{unit}*sqrt(Hz)", deg, 3600.0 ** 1.5, "deg/h/sqrt(h)", None,
                     "no stretch of slope +1/2 after the first minimum (the run may be too short)")
    value = _line_value(c, idx, 0.5, 3.0)  # sigma(3 s) = K
    return _term("K", value, f"{unit}*sqrt(Hz)", deg, 3600.0 ** 1.5, "deg/h/sqrt(h)", _span(c, idx))


def _bias(c: AllanCurve, unit: str, deg: float | None) -> Term:
    if not len(c):
        return _term("B", None, unit, deg, 3600.0, "deg/h", None, "no Allan deviation")
    k = int(np.argmin(c.adev))
    value = float(c.adev[k] / B_FACTOR)
    note = ""
    if len(c) > 1 and k == len(c) - 1:
        note = "upper bound: the deviation still falls at the longest tau"
    elif len(c) > 1 and k == 0:
        note = "upper bound: the deviation rises from the shortest tau"
    tau = float(c.tau_s[k])
    return _term("B", value, unit, deg, 3600.0, "deg/h", (tau, tau), note)
