"""How small a field x rotation term d, and how small a field term b, a run like
this one resolves after N pulses, from the Allan deviation of its per-pulse
residuals.

The fit's residuals in time order, run by run, are a series of one value a
pulse. Their overlapping Allan deviation at m pulses is the standard error of
an m-pulse mean while the scatter is white (sigma / sqrt(m)), and stops
falling where drift takes over. The power-law model
    sigma^2(m) = h / m + f + r m        (white, flicker floor, random walk)
is fitted to it (non-negative least squares, each point weighted by its edf,
since var(sigma^2) is about 2 sigma^4 / edf; the floor and the walk only where
each lowers the weighted squared residual by more than chi2(0.95, 1) = 3.84)
and carries the fitted term's error from the n pulses at hand to N:
    se(d; N) = se(d; n) sigma_model(N) / sigma_model(n),
se(d; n) as the pulse analysis gives it. The smallest d the run resolves is
z se with z the two-sided normal quantile at `level`: the |d| whose interval
just excludes zero (a 50 % chance of seeing a d of exactly that size).
With fewer than MODEL_MIN_POINTS Allan points, or no drift shown, only h is
fitted and the reach falls as 1/sqrt(N): optimistic if drift sets in later
than the run shows.

The Earth's rotation adds the same rate to the rotor in both field signs, so
its term lands in the field term b, not in d. Averaging brings se(b) down to
it after some N; telling it from the field artifact that b also holds needs
that artifact known to better than the Earth's part, which averaging alone
never gives.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from scipy import optimize, stats

from slipless.errors import InputError
from slipless.noise.allan import AllanCurve, oadev, octave_ms

MODEL_MIN_POINTS = 4  # Allan points needed to fit floor and walk beside the white part
DROP_CHI2 = float(stats.chi2.ppf(0.95, 1))  # 3.84: what one more term must explain
REACH_DECADES = 5  # rows: n, 10 n, ... pulses


@dataclass
class Reach:
    pulses: float
    run_s: float
    d_min: float
    b_min: float


@dataclass
class Sensitivity:
    pulses: int
    pulse_rate_hz: float  # pulses per second of run
    level: float
    z: float
    curve: AllanCurve  # of the residuals; tau in pulses
    model: tuple[float, float, float]  # h, f, r of sigma^2(m), response unit squared
    white_only: bool
    d: float
    se_d: float
    unit_d: str
    b: float
    se_b: float
    unit_b: str
    rows: list[Reach] = field(default_factory=list)
    predicted_d: float | None = None
    d_pulses: float | None = None  # pulses to resolve predicted_d (None: never)
    earth_b: float | None = None  # the Earth's part of b, from the prediction
    earth_pulses: float | None = None
    notes: list[str] = field(default_factory=list)

    def run_s(self, pulses: float | None) -> float | None:
        return None if pulses is None else pulses / self.pulse_rate_hz

    def sigma(self, m: float) -> float:
        h, f, r = self.model
        return math.sqrt(h / m + f + r * m)

    def scale(self, pulses: float) -> float:
        """sigma_model(N) / sigma_model(n) (1/sqrt(N/n) when the residuals are all zero)."""
        base = self.sigma(self.pulses)
        return self.sigma(pulses) / base if base > 0 else math.sqrt(self.pulses / pulses)


def read_prediction(path: Path | None) -> dict[str, Any] | None:
    """The results of `slipless predict --json`, or None."""
    if path is None:
        return None
    try:
        res = json.loads(Path(path).read_text())["results"]
        float(res["slope_V_per_A_rad_s"])
        float(res["earth_rate_rad_s"])
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from exc
    except (ValueError, KeyError, TypeError) as exc:
        raise InputError(f"{path}: not the output of `slipless predict --json`") from exc
    return dict(res)


def residual_series(a: Any) -> list[np.ndarray]:
    """The fit's residuals per used pulse, in time order, one array per run."""
    fit = a.fit
    c = {k: float(fit.coef[fit.index(k)]) for k in ("a", "b", "c", "d")}
    s, w, y = (np.asarray(v, dtype=np.float64) for v in (a.s, a.w, a.y))
    e = y - (c["a"] + c["b"] * s + c["c"] * w + c["d"] * s * w)
    keys = [(p.board, p.run) for p in a.used]
    t = np.array([p.onset_s for p in a.used], dtype=np.float64)
    out = []
    for key in sorted(set(keys)):
        idx = np.array([i for i, k in enumerate(keys) if k == key])
        out.append(e[idx[np.argsort(t[idx], kind="stable")]])
    return out


def pulse_rate(a: Any) -> float:
    """Pulses per second of run: spacing of the used pulses inside each run."""
    by_run: dict[tuple[int, int], list[float]] = {}
    for p in a.used:
        by_run.setdefault((p.board, p.run), []).append(float(p.onset_s))
    gaps = sum(len(t) - 1 for t in by_run.values())
    span = sum(max(t) - min(t) for t in by_run.values())
    if gaps < 1 or not span > 0:
        raise InputError("sensitivity: need two or more pulses in a run to know the pulse rate")
    return gaps / span


def fit_model(c: AllanCurve) -> tuple[tuple[float, float, float], bool]:
    """(h, f, r) of sigma^2(m) = h/m + f + r m, and whether only h was fitted.
    The floor and the walk enter one at a time, each only when it lowers the
    weighted squared residual by more than DROP_CHI2 (the data must show drift
    before the reach is bent by it)."""
    var, m = c.adev ** 2, c.m.astype(np.float64)
    w = np.sqrt(c.edf / 2) / np.where(var > 0, var, np.inf)  # 1 / sd of each sigma^2 estimate
    basis = np.column_stack([1 / m, np.ones_like(m), m])
    chosen = [0]
    coef, chi2 = _nnls(basis, var, w, chosen)
    while len(c) >= MODEL_MIN_POINTS and len(chosen) < 3:
        trials = [(_nnls(basis, var, w, chosen + [k]), k) for k in (1, 2) if k not in chosen]
        (best, best_chi2), k = min(trials, key=lambda t: t[0][1])
        if chi2 - best_chi2 <= DROP_CHI2:
            break
        chosen.append(k)
        coef, chi2 = best, best_chi2
    return (float(coef[0]), float(coef[1]), float(coef[2])), chosen == [0]


def _nnls(basis: np.ndarray, var: np.ndarray, w: np.ndarray, cols: list[int]
          ) -> tuple[np.ndarray, float]:
    coef = np.zeros(3)
    sol, norm = optimize.nnls(basis[:, cols] * w[:, None], var * w)
    coef[cols] = sol
    return coef, float(norm * norm)


def pulses_needed(target: float, se_n: float, s: Sensitivity) -> float | None:
    """Pulses N at which z se(N) falls to |target|; None when the model's floor
    stays above it."""
    if not (math.isfinite(target) and target != 0 and se_n > 0):
        return None
    h, f, r = s.model
    q = (abs(target) / (s.z * se_n)) ** 2 * s.sigma(s.pulses) ** 2  # sigma_model(N)^2 wanted
    room = q - f
    if room <= 0:
        return None
    if r <= 0:
        return h / room if h > 0 else None
    disc = room * room - 4 * r * h
    return None if disc < 0 else (room - math.sqrt(disc)) / (2 * r)


def sensitivity(a: Any, prediction: dict[str, Any] | None = None, level: float = 0.95) -> Sensitivity:
    """The reach of a pulse analysis (pulses.Analysis) against the number of pulses."""
    if not 0.5 <= level < 1:
        raise InputError(f"level {level:g}: a confidence level such as 0.95")
    series = residual_series(a)
    n = sum(x.size for x in series)
    ms = octave_ms(max(x.size for x in series))
    if ms.size == 0:
        raise InputError(f"sensitivity: {n} pulses are too few for an Allan deviation")
    curve = oadev(series, 1.0, ms)
    model, white_only = fit_model(curve)
    fit = a.fit
    kd, kb = fit.index("d"), fit.index("b")
    s = Sensitivity(n, pulse_rate(a), level, float(stats.norm.ppf(0.5 + level / 2)), curve,
                    model, white_only, float(fit.coef[kd]), float(fit.se[kd]), a.unit("d"),
                    float(fit.coef[kb]), float(fit.se[kb]), a.unit("b"))
    for k in range(REACH_DECADES):
        big = n * 10.0 ** k
        g = s.scale(big)
        s.rows.append(Reach(big, big / s.pulse_rate_hz, s.z * s.se_d * g, s.z * s.se_b * g))
    if white_only:
        why = (f"{len(curve)} Allan points" if len(curve) < MODEL_MIN_POINTS
               else "no drift shown in the residuals")
        s.notes.append(f"{why}: only white scatter fitted, so the reach falls as 1/sqrt(N); "
                       "drift setting in later than this run shows would stop it sooner")
    for name, se in (("d", s.se_d), ("b", s.se_b)):
        if not (math.isfinite(se) and se > 0):
            s.notes.append(f"the fit gave no usable standard error for {name}: no reach for it")
    if prediction is not None:
        _predicted(a, s, prediction)
    return s


def _predicted(a: Any, s: Sensitivity, res: dict[str, Any]) -> None:
    per_sign = a.options.by == "sign"
    amps = float(np.mean(np.abs([p.current_a for p in a.used]))) if per_sign else 1.0
    slope = float(res["slope_V_per_A_rad_s"])
    earth = float(res.get("earth_b_V_per_A", slope * float(res["earth_rate_rad_s"])))
    s.predicted_d = slope * amps
    s.earth_b = earth * amps
    s.d_pulses = pulses_needed(s.predicted_d, s.se_d, s)
    s.earth_pulses = pulses_needed(s.earth_b, s.se_b, s)
    s.notes.append("the Earth's rotation adds one rate to both field signs: its term is in b, "
                   "not d; averaging resolves b to that size, but telling it from the field "
                   "artifact in b needs the artifact known better than that")
