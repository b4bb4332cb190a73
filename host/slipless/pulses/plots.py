"""Plots of a pulse analysis (matplotlib, Agg: files only, no display needed)."""

from __future__ import annotations

import warnings
from pathlib import Path
from typing import Any

import numpy as np

from slipless.pulses.analysis import Analysis
from slipless.report.plotting import pyplot

plt = pyplot()  # this module is imported only to draw

DPI = 120
PLOT_POINTS = 400  # averaged waveforms are binned to about this many points


def plot_all(a: Analysis, out: Path) -> list[Path]:
    return [conditions(a, out / "conditions.png"), waveforms(a, out / "waveforms.png"),
            against_model(a, out / "response_vs_rotation_field.png")]


def conditions(a: Analysis, path: Path) -> Path:
    """Mean response per condition, +-1 standard error, grouped by rotation."""
    rotations = [g.label for g in a.groups]
    fig, ax = plt.subplots(figsize=(1.6 + 1.3 * len(rotations), 4))
    x = np.arange(len(rotations))
    for k, pol in enumerate((1, -1)):
        cs = {c.rotation: c for c in a.conditions if c.polarity == pol}
        mean = [cs[r].mean_v if r in cs else np.nan for r in rotations]
        se = [cs[r].se_v if r in cs else np.nan for r in rotations]
        ax.bar(x + (k - 0.5) * 0.38, mean, 0.36, yerr=se, capsize=3,
               label="field +" if pol > 0 else "field -")
    ax.axhline(0, color="0.4", lw=0.8)
    ax.set_xticks(x, rotations)
    ax.set_ylabel("response (V): mean, bars 1 se")
    ax.set_title("pulse response by condition")
    ax.legend()
    return _save(fig, path)


def waveforms(a: Analysis, path: Path) -> Path:
    """Pulse-averaged signal (baseline line removed) by condition, with the coil current."""
    rotations = [g.label for g in a.groups]
    fig, axes = plt.subplots(2, len(rotations), figsize=(3.2 * len(rotations), 5.5),
                             sharex=True, sharey="row", squeeze=False)
    for j, r in enumerate(rotations):
        top, bottom = axes[0][j], axes[1][j]
        for c in (c for c in a.conditions if c.rotation == r):
            lbl = f"field {'+' if c.polarity > 0 else '-'} (n={c.n})"
            t, mean, se = _binned(a.grid_s, c.wave, c.wave_se)
            top.plot(t, mean, lw=0.9, label=lbl)
            top.fill_between(t, mean - se, mean + se, alpha=0.25)
            bottom.plot(a.grid_s, c.wave_amps, lw=0.8)
        top.set_title(r)
        top.axhline(0, color="0.4", lw=0.6)
        top.legend(fontsize="small")
        bottom.set_xlabel("time from onset (s)")
    axes[0][0].set_ylabel("signal - baseline (V)")
    axes[1][0].set_ylabel("coil current (A)")
    return _save(fig, path)


def _binned(t: np.ndarray, y: np.ndarray, se: np.ndarray,
            points: int = PLOT_POINTS) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Means over bins, so a few hundred points show the shape through the noise
    (the switching spikes stay visible: they span several bins)."""
    k = max(1, t.size // points)
    n = t.size // k * k

    def fold(x: np.ndarray) -> np.ndarray:
        return x[:n].reshape(-1, k)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # bins with no samples stay NaN
        mean = np.nanmean(fold(y), axis=1) if k > 1 else y
        err = np.sqrt(np.nanmean(fold(se) ** 2, axis=1) / k) if k > 1 else se
    return fold(t).mean(axis=1) if k > 1 else t, mean, err


def against_model(a: Analysis, path: Path) -> Path:
    """The field x rotation part of each response against w*B (or w*s), with
    the fitted and predicted lines."""
    f = a.fit
    coef = f.coef
    part = a.y - (coef[0] + coef[1] * a.s + coef[2] * a.w)  # leaves d*s*w + noise
    t_per_a = a.options.field_t_per_a if a.options.by == "current" else None
    x = a.s * a.w * (t_per_a or 1.0)
    fig, ax = plt.subplots(figsize=(6, 4.2))
    ax.plot(x, part, ".", ms=4, alpha=0.6, label="pulses (a, b, c terms removed)")
    xs = np.linspace(min(x.min(), 0), max(x.max(), 0), 50)
    per_x = 1.0 / (t_per_a or 1.0)
    unit = a.unit("d")
    ax.plot(xs, coef[3] * per_x * xs, lw=1.5,
            label=f"fit d = {coef[3]:.4g} {unit} (se {f.se[3]:.2g})")
    if a.predicted_d is not None:
        ax.plot(xs, a.predicted_d * per_x * xs, "--", lw=1.5,
                label=f"model d = {a.predicted_d:.4g} {unit}")
    if t_per_a:
        ax.set_xlabel("w x B (rad/s x T)")
    else:
        ax.set_xlabel(f"w x s (rad/s x {a.s_unit})")
    ax.set_ylabel("response part (V)")
    ax.axhline(0, color="0.4", lw=0.6)
    ax.legend(fontsize="small")
    return _save(fig, path)


def _save(fig: Any, path: Path) -> Path:
    fig.tight_layout()
    fig.savefig(path, dpi=DPI)
    plt.close(fig)
    return path
