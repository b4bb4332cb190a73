"""The overlapping Allan deviation of a sampled rate ("frequency") series, with
chi-square confidence intervals.

Sources (W. J. Riley, NIST SP 1065, "Handbook of Frequency Stability
Analysis", 2008; IEEE Std 1139):
- overlapping ADEV from phase x (the running sum of the rate times tau0):
  sigma^2(m tau0) = sum (x[i+2m] - 2 x[i+m] + x[i])^2 / (2 (N - 2m) (m tau0)^2),
  N phase points. Over several gap-free spans the sums and
  their term counts add: no difference ever reaches across a gap.
- equivalent degrees of freedom: the simple formulas of SP 1065 Table 5
  (Howe, Allan & Barnes 1981), one per power-law noise type, summed over spans
  (independent stretches of data add their degrees of freedom).
- the noise type per averaging time: lag-1 autocorrelation of the m-averaged,
  linearly detrended rates (Riley & Greenhall, "Power law noise identification
  using the lag 1 autocorrelation", 2004),
  where 32 or more averages exist; at longer tau the median of the last
  three types found is kept.
- interval: sigma^2 edf / chi2(p, edf) at p = (1 -+ level)/2, the handbook's
  chi-square interval.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
from scipy import stats

ONE_SIGMA = math.erf(1 / math.sqrt(2))  # 0.6827: the usual level of ADEV error bars
NOISE_NAMES = {2: "white PM", 1: "flicker PM", 0: "white FM", -1: "flicker FM", -2: "random walk FM"}
ID_MIN_POINTS = 32  # the lag-1 method wants about 30 averages or more (Riley & Greenhall)
ID_MAX_POINTS = 1 << 16  # averages used for it at most: plenty, and quick on long runs
DEFAULT_ALPHA = 0  # white FM until a type is identified


@dataclass
class AllanCurve:
    m: np.ndarray  # averaging factors
    tau_s: np.ndarray
    adev: np.ndarray
    lo: np.ndarray  # the interval at `level`
    hi: np.ndarray
    edf: np.ndarray
    terms: np.ndarray  # second differences summed
    alpha: np.ndarray  # power-law exponent of the rate's PSD used for the edf
    level: float
    rate_hz: float

    def __len__(self) -> int:
        return int(self.m.size)

    def at(self, tau_s: float) -> float | None:
        """The deviation at tau_s, interpolated on log-log axes (None outside the curve)."""
        if not len(self) or not self.tau_s[0] <= tau_s <= self.tau_s[-1]:
            return None
        return float(np.exp(np.interp(np.log(tau_s), np.log(self.tau_s), np.log(self.adev))))


def octave_ms(longest: int) -> np.ndarray:
    """m = 1, 2, 4, ... while the longest span (of rates) still gives one term."""
    top = int(math.log2(longest / 2)) if longest >= 2 else -1
    return 2 ** np.arange(top + 1, dtype=np.int64)


def phase(y: np.ndarray, rate_hz: float) -> np.ndarray:
    """Rates -> phase: x[0] = 0, x[i] = tau0 * sum(y[:i]) (N + 1 points for N rates).
    The mean is taken out first for precision; it cancels in every second difference."""
    return np.r_[0.0, np.cumsum(y - np.mean(y))] / rate_hz


def edf_simple(n_phase: int, m: int, alpha: int) -> float:
    """SP 1065 Table 5: edf of the overlapping Allan variance for N phase points,
    averaging factor m and noise exponent alpha (guarded to 1 where a formula
    breaks down on very short data)."""
    n, mf = float(n_phase), float(m)
    with np.errstate(all="ignore"):
        if alpha == 2:
            edf = (n + 1) * (n - 2 * mf) / (2 * (n - mf))
        elif alpha == 1:
            edf = math.exp(math.sqrt(max(math.log((n - 1) / (2 * mf)), 0.0)
                                     * max(math.log((2 * mf + 1) * (n - 1) / 4), 0.0)))
        elif alpha == 0:
            edf = (3 * (n - 1) / (2 * mf) - 2 * (n - 2) / n) * 4 * mf * mf / (4 * mf * mf + 5)
        elif alpha == -1:
            edf = (2 * (n - 2) ** 2 / (2.3 * n - 4.9) if m == 1
                   else 5 * n * n / (4 * mf * (n + 3 * mf)))
        else:
            edf = ((n - 2) / mf * ((n - 1) ** 2 - 3 * mf * (n - 1) + 4 * mf * mf) / (n - 3) ** 2
                   if n > 3 else 1.0)
    return edf if math.isfinite(edf) and edf > 0 else 1.0


def lag1(x: np.ndarray) -> float:
    d = x - np.mean(x)
    den = float(np.dot(d, d))
    return float(np.dot(d[:-1], d[1:])) / den if den > 0 else 0.0


def noise_id(y: np.ndarray, m: int, dmax: int = 2) -> int | None:
    """The power-law exponent alpha of the rates' PSD at averaging m (lag-1
    autocorrelation method); None with fewer than ID_MIN_POINTS averages."""
    k = min(y.size // m, ID_MAX_POINTS)
    if k < ID_MIN_POINTS:
        return None
    z = y[: k * m].reshape(k, m).mean(axis=1)
    t = np.arange(k, dtype=np.float64)
    z = z - np.polyval(np.polyfit(t, z, 1), t)
    for d in range(dmax + 1):
        r1 = lag1(z)
        rho = r1 / (1 + r1) if r1 > -1 else -math.inf
        if rho < 0.25 or d == dmax:
            return int(min(2, max(-2, -round(2 * rho) - 2 * d))) if math.isfinite(rho) else 2
        z = np.diff(z)
    return None  # pragma: no cover - the loop returns at d == dmax


def interval(adev: np.ndarray, edf: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
    """Chi-square interval of a deviation with edf degrees of freedom."""
    p = (1 - level) / 2
    lo = adev * np.sqrt(edf / stats.chi2.ppf(1 - p, edf))
    hi = adev * np.sqrt(edf / stats.chi2.ppf(p, edf))
    return lo, hi


def oadev(spans: Iterable[np.ndarray], rate_hz: float, ms: np.ndarray,
          level: float = ONE_SIGMA) -> AllanCurve:
    """The overlapping ADEV at averaging factors ms over gap-free spans of rates
    (read one at a time, so a long run is never held twice)."""
    ms = np.asarray(ms, dtype=np.int64)
    sums, terms = np.zeros(ms.size), np.zeros(ms.size, np.int64)
    lengths: list[int] = []
    ids: list[int | None] = [None] * ms.size
    longest = 0
    for y in spans:
        y = np.asarray(y, dtype=np.float64)
        x = phase(y, rate_hz)
        buf = np.empty(max(x.size - 2, 0))  # one buffer for every m: no temporaries
        for i, m in enumerate(ms):
            k = x.size - 2 * m
            if k >= 1:
                v = buf[:k]
                np.subtract(x[2 * m:], x[m:-m], out=v)
                np.subtract(v, x[m:-m], out=v)
                np.add(v, x[:k], out=v)
                sums[i] += float(np.dot(v, v))
                terms[i] += k
        lengths.append(x.size)
        if y.size > longest:  # the noise is identified on the longest span
            longest = y.size
            ids = [noise_id(y, int(m)) for m in ms]
    keep = terms > 0
    ms, sums, terms = ms[keep], sums[keep], terms[keep]
    ids = [a for a, k in zip(ids, keep) if k]
    alpha = np.array(_carried(ids), dtype=np.int64)
    tau = ms / rate_hz
    adev = np.sqrt(sums / (2 * terms * tau * tau))
    edf = np.array([sum(edf_simple(n, int(m), int(a)) for n in lengths if n - 2 * m >= 1)
                    for m, a in zip(ms, alpha)])
    lo, hi = interval(adev, edf, level)
    return AllanCurve(ms, tau, adev, lo, hi, edf, terms, alpha, level, rate_hz)


def _carried(ids: list[int | None]) -> list[int]:
    """An unidentified tau takes the median type of the last three identified
    before it (one chance misidentification on few averages is not carried on)."""
    out: list[int] = []
    found: list[int] = []
    first = next((a for a in ids if a is not None), DEFAULT_ALPHA)
    for a in ids:
        if a is not None:
            found.append(a)
            out.append(a)
        else:
            out.append(int(np.median(found[-3:])) if found else first)
    return out
