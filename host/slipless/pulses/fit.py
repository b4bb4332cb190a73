"""Least squares for pulse responses, with honest standard errors.

The factorial model is response = a + b*s + c*w + d*s*w (s: field sign or
coil current, w: rotation rate). Coefficients are ordinary least squares.

Pulse-level errors (the default) are HC2, heteroskedasticity-consistent:
(X'X)^-1 X' diag(e_i^2 / (1 - h_i)) X (X'X)^-1, with h the leverages.
Why: the noise differs between conditions (a spinning rotor vibrates), which
breaks the classical formula's single variance, and the within-pulse errors
miss pulse-to-pulse scatter (drift that is not linear), so the residuals are
the honest measure. HC2 is unbiased when the noise happens to be equal, and
for two groups it is the unequal-variance (Welch) error of a difference of
means. On the simulated rig with 24-72 pulses, the classical errors came out
10-20 % too small once spinning added noise, HC3 about 13 % too large, HC2
within a few per cent.

Intervals use Student's t with the Bell-McCaffrey degrees of freedom of each
term (Bell & McCaffrey 2002; Imbens & Kolesar 2016): with normal noise of one
variance the estimate of l'V l is sum_j lambda_j chi2_1, lambda the
eigenvalues of G'G, column k of G = (I - H)[:, k] A_k X_k (X'X)^-1 l, and
the degrees of freedom are Satterthwaite's (sum lambda)^2 / sum lambda^2.
Why: with 3 pulses per condition, n - p degrees of freedom let the 95 %
interval of d cover about 0.93; these cover 0.94-0.95, and HC3 0.96-0.98
(too wide; tests/host/test_pulses_coverage.py).

Block-level errors (a drifting artifact: pulses close in time share an error)
are CR2, the same sandwich with blocks of pulses in place of single pulses and
A_k = (I - H_kk)^-1/2, with the same degrees of freedom. For blocks of equal
design they are the t interval of the per-block estimates (B - 1 df).
Classical and HC3 errors are kept alongside for comparison.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from slipless.errors import InputError

TERMS = ("a", "b", "c", "d")
MEANING = {"a": "offset (field-even)", "b": "field term (artifact: flips with field, not rotation)",
           "c": "rotation term (field-even)", "d": "field x rotation (induction)"}
SE_KIND = "HC2-BM"  # HC2 errors, Bell-McCaffrey degrees of freedom
BLOCK_KIND = "CR2-BM"  # the same over blocks of pulses
SE_NAMES = {SE_KIND: "HC2 errors with Bell-McCaffrey degrees of freedom",
            BLOCK_KIND: "block-level CR2 errors with Bell-McCaffrey degrees of freedom"}
SELF_FIT = 1e-12  # leverage this close to 1: the pulse (or block) fixes its own fit


@dataclass
class Errors:
    """One covariance estimate of the coefficients, with degrees of freedom per term."""

    kind: str  # SE_KIND or BLOCK_KIND
    cov: np.ndarray
    dof: np.ndarray
    clusters: int  # pulses, or blocks

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov))


@dataclass
class Weights:
    """What the robust variance takes from the design alone, so a simulation
    can reuse it for many draws of the noise. Rows are sorted by cluster."""

    order: np.ndarray  # pulse index of each row
    starts: np.ndarray  # first row of each cluster
    adjusted: np.ndarray  # rows of A_k X_k (X'X)^-1
    dof: np.ndarray  # Bell-McCaffrey, per term

    def variance(self, e: np.ndarray) -> np.ndarray:
        """Covariance (p, p) from residuals e (n,), or (..., p, p) from e (..., n)."""
        u = np.add.reduceat(self.adjusted * e[..., self.order, None], self.starts, axis=-2)
        return np.einsum("...kp,...kq->...pq", u, u)


def weights(x: np.ndarray, xtx_inv: np.ndarray, blocks: np.ndarray | None = None) -> Weights:
    """HC2 weights (blocks None: every pulse its own cluster) or CR2 weights over blocks."""
    n = x.shape[0]
    if blocks is None:
        h = np.einsum("ij,jk,ik->i", x, xtx_inv, x)
        room = np.where(h < 1.0 - SELF_FIT, 1.0 - h, np.nan)
        order, starts, adjusted = np.arange(n), np.arange(n), (x @ xtx_inv) / np.sqrt(room)[:, None]
    else:
        order = np.argsort(blocks, kind="stable")
        starts = np.flatnonzero(np.r_[True, np.diff(blocks[order]) != 0])
        ends = np.r_[starts[1:], n]
        adjusted = np.vstack([_cr2_rows(x[order[a:b]], xtx_inv) for a, b in zip(starts, ends)])
    return Weights(order, starts, adjusted, _bm_dof(x[order], xtx_inv, adjusted, starts))


def _cr2_rows(xk: np.ndarray, xtx_inv: np.ndarray) -> np.ndarray:
    """(I - H_kk)^-1/2 X_k (X'X)^-1 without the n_k x n_k matrix: H_kk = X_k (X'X)^-1 X_k'
    has rank <= p, so the inverse root acts only on the span of X_k."""
    q, r = np.linalg.qr(xk)
    mu, v = np.linalg.eigh(r @ xtx_inv @ r.T)
    b = xk @ xtx_inv
    if mu.size and mu.max() >= 1.0 - SELF_FIT:
        return np.full_like(b, np.nan)
    qv = q @ v
    return b + qv @ ((1.0 / np.sqrt(1.0 - mu) - 1.0)[:, None] * (qv.T @ b))


def _bm_dof(x: np.ndarray, xtx_inv: np.ndarray, adjusted: np.ndarray,
            starts: np.ndarray) -> np.ndarray:
    """Satterthwaite degrees of freedom of each coefficient's robust variance under
    equal normal noise. G'G = diag(z_k'z_k) - W M W' (z_k = rows of cluster k of
    `adjusted` for the term, w_k = X_k' z_k), so trace and squared norm need
    only p x p products."""
    out = np.empty(x.shape[1])
    for j in range(x.shape[1]):
        z = adjusted[:, j]
        zz = np.add.reduceat(z * z, starts)
        w = np.add.reduceat(x * z[:, None], starts, axis=0)
        q = np.einsum("kp,pq,kq->k", w, xtx_inv, w)
        ms = xtx_inv @ (w.T @ w)
        trace = zz.sum() - q.sum()
        square = float(zz @ zz - 2 * zz @ q + np.trace(ms @ ms))
        out[j] = trace**2 / square if square > 0 else math.nan
    return out


@dataclass
class Fit:
    names: tuple[str, ...]
    coef: np.ndarray
    pulse: Errors  # HC2-BM
    cov_classical: np.ndarray
    cov_hc3: np.ndarray
    n: int
    residuals: np.ndarray
    leverage: np.ndarray
    x: np.ndarray
    xtx_inv: np.ndarray
    block: Errors | None = None  # CR2-BM, once blocks are known
    use_block: bool = False

    @property
    def errors(self) -> Errors:
        """The errors intervals and tests use: pulse-level, or block-level when chosen."""
        return self.block if self.use_block and self.block is not None else self.pulse

    @property
    def cov(self) -> np.ndarray:
        return self.errors.cov

    @property
    def dof(self) -> int:
        """Residual degrees of freedom n - p (the classical errors')."""
        return self.n - len(self.names)

    @property
    def dofs(self) -> np.ndarray:
        """Degrees of freedom of each term's interval (Bell-McCaffrey)."""
        return self.errors.dof

    @property
    def se(self) -> np.ndarray:
        return self.errors.se

    @property
    def se_classical(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov_classical))

    @property
    def se_hc3(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov_hc3))

    def t_quantiles(self, level: float = 0.95) -> np.ndarray:
        dof = self.dofs
        return np.where(dof > 0, stats.t.ppf(0.5 + level / 2, np.where(dof > 0, dof, 1.0)), np.nan)

    def ci(self, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
        half = self.t_quantiles(level) * self.se
        return self.coef - half, self.coef + half

    def index(self, name: str) -> int:
        return self.names.index(name)


def ols(x: np.ndarray, y: np.ndarray, names: tuple[str, ...]) -> Fit:
    """OLS with HC2-BM, classical and HC3 covariances. Needs a full-rank design."""
    n, p = x.shape
    if n <= p or np.linalg.matrix_rank(x) < p:
        raise InputError(f"cannot fit {p} terms to {n} pulses: need both field signs and at "
                         "least two rotation rates, and more pulses than terms")
    xtx_inv = np.linalg.inv(x.T @ x)
    coef = xtx_inv @ x.T @ y
    e = y - x @ coef
    h = np.einsum("ij,jk,ik->i", x, xtx_inv, x)
    # undefined where a point fixes its own fit (h = 1)
    room = np.where(h < 1.0 - SELF_FIT, 1.0 - h, np.nan)
    sandwich = lambda u2: xtx_inv @ ((x * u2[:, None]).T @ x) @ xtx_inv  # noqa: E731
    pulse = Errors(SE_KIND, sandwich(e**2 / room), weights(x, xtx_inv).dof, n)
    cov_classical = xtx_inv * float(e @ e) / (n - p)
    return Fit(names, coef, pulse, cov_classical, sandwich(e**2 / room**2), n, e, h, x, xtx_inv)


def block_errors(fit: Fit, blocks: np.ndarray) -> Errors:
    """CR2-BM errors of the fit with pulses grouped by block (an int per pulse)."""
    w = weights(fit.x, fit.xtx_inv, blocks)
    return Errors(BLOCK_KIND, w.variance(fit.residuals), w.dof, int(w.starts.size))


def design(s: np.ndarray, w: np.ndarray) -> np.ndarray:
    return np.column_stack([np.ones_like(s), s, w, s * w])


def factorial(s: np.ndarray, w: np.ndarray, y: np.ndarray) -> Fit:
    return ols(design(s, w), y, TERMS)


def coefficients(s: np.ndarray, w: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The factorial coefficients alone (also for saturated designs, e.g. 2x2)."""
    return np.linalg.lstsq(design(s, w), y, rcond=None)[0]


@dataclass
class Slope:
    """Field slope within one condition of rotation, with HC2-BM and classical errors."""

    value: float
    se: float
    dof: float
    se_classical: float


def slope(s: np.ndarray, y: np.ndarray) -> Slope:
    fit = ols(np.column_stack([np.ones_like(s), s]), y, ("offset", "slope"))
    return Slope(float(fit.coef[1]), float(fit.se[1]), float(fit.dofs[1]),
                 float(fit.se_classical[1]))


@dataclass
class Test:
    name: str
    statistic: float
    df: float
    p_value: float
    meaning: str
    df2: float | None = None  # the denominator's, for an F statistic


def two_sided_p(t: float, dof: float) -> float:
    """Student's t, both tails (NaN without degrees of freedom)."""
    return 2 * float(stats.t.sf(abs(t), dof)) if dof > 0 else math.nan


def t_test(name: str, t: float, dof: float, meaning: str) -> Test:
    return Test(name, t, float(dof), two_sided_p(t, dof), meaning)


def block_excess(fit: Fit, term: str = "d") -> Test | None:
    """F = (block-level variance) / (pulse-level variance) of one term, against
    F(df block, df pulse). Both estimate the same variance when pulses are
    independent; the test ignores that both come from the same residuals,
    which makes it conservative (tests/host/test_pulses_blocks.py)."""
    if fit.block is None:
        return None
    k = fit.index(term)
    vb, vp = float(fit.block.cov[k, k]), float(fit.pulse.cov[k, k])
    d1, d2 = float(fit.block.dof[k]), float(fit.pulse.dof[k])
    if not (vp > 0 and d1 > 0 and d2 > 0 and math.isfinite(vb)):
        return None
    f = vb / vp
    return Test(f"{term}: block-level error no larger than the pulse-level", f, d1,
                float(stats.f.sf(f, d1, d2)),
                "small p: pulses close in time share an error (e.g. a drifting artifact), "
                "so the pulse-level interval is too narrow: use --errors block", d2)


def equal_slopes(slopes: np.ndarray, ses: np.ndarray) -> Test:
    """Wald chi-square test that independent slopes share one value."""
    wt = 1.0 / ses**2
    pooled = float(np.sum(wt * slopes) / np.sum(wt))
    chi2 = float(np.sum(wt * (slopes - pooled) ** 2))
    df = slopes.size - 1
    return Test("field slope same at every rotation", chi2, df, _sf(chi2, df),
                "small p: the field-odd response depends on rotation")


def linear_slopes(slopes: np.ndarray, ses: np.ndarray, w: np.ndarray) -> Test:
    """Do the per-rotation slopes follow b + d*w? (weighted line, residual chi-square)."""
    x = np.column_stack([np.ones_like(w), w]) / ses[:, None]
    coef = np.linalg.lstsq(x, slopes / ses, rcond=None)[0]
    chi2 = float(np.sum((slopes / ses - x @ coef) ** 2))
    df = slopes.size - 2
    return Test("field slope linear in rotation (b + d w)", chi2, df, _sf(chi2, df),
                "small p: rotation changes the field response in a way the model lacks "
                "(e.g. vibration-modulated leakage)")


def _sf(chi2: float, df: int) -> float:
    return float(stats.chi2.sf(chi2, df)) if df > 0 else float("nan")


@dataclass
class Ratio:
    predicted: float
    ratio: float
    se: float
    low: float
    high: float


def against_prediction(fit: Fit, predicted: float, level: float = 0.95) -> Ratio:
    """d / d_model with the fit's uncertainty (the prediction's own inputs are
    taken as exact: their uncertainty is the user's to add)."""
    k = fit.index("d")
    lo, hi = fit.ci(level)
    r = float(fit.coef[k] / predicted)
    ends = sorted((float(lo[k] / predicted), float(hi[k] / predicted)))
    return Ratio(predicted, r, float(fit.se[k] / abs(predicted)), ends[0], ends[1])
