"""The report's pulse-averaged waveforms: per condition (field sign x rotation),
the signal with each pulse's baseline line removed, averaged over the aligned
pulses on the pulses package's common grid (time from onset), with its
standard-error band; the coil current averaged beside it. Before the onset and
after the switch-off the coil is off: that stretch is the field-0 reference.
One short raw excerpt of a single pulse follows, to show what was averaged.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from slipless.report.html import esc, png
from slipless.report.plotting import pyplot

PLOT_POINTS = 250  # the grid is binned to about this many points: the shape through the noise
FIELD_COLOURS = {1: "#2d5e8c", -1: "#a5482b"}
RAW_MARGIN_S = 0.3  # the raw excerpt: this much before the onset and after the switch-off


@dataclass
class ConditionWave:
    """One condition's averaged waveform, on Analysis.grid_s."""

    label: str
    polarity: int
    rotation: str
    n: int
    mean_v: np.ndarray
    se_v: np.ndarray
    current_a: np.ndarray
    end_s: float  # median switch-off time from onset


def condition_waves(a: Any) -> list[ConditionWave]:
    """Every condition of a pulses.Analysis with its averaged waveform and band."""
    lengths: dict[tuple[int, str], list[float]] = {}
    for g in a.groups:
        for i in g.members:
            p = a.used[int(i)]
            lengths.setdefault((p.polarity, g.label), []).append(p.end_s - p.onset_s)
    out = []
    for c in a.conditions:
        ends = lengths.get((c.polarity, c.rotation), [])
        out.append(ConditionWave(c.label, c.polarity, c.rotation, c.n, c.wave, c.wave_se,
                                 c.wave_amps, float(np.median(ends)) if ends else float("nan")))
    return out


def binned(t: np.ndarray, mean: np.ndarray, se: np.ndarray, points: int = PLOT_POINTS
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Bin means of the curve and the standard error of each bin's mean (the
    points' errors added in quadrature over k points, divided by k)."""
    k = max(1, t.size // points)
    if k == 1:
        return t, mean, se
    n = t.size // k * k
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # bins no pulse reached stay NaN
        m = np.nanmean(mean[:n].reshape(-1, k), axis=1)
        e = np.sqrt(np.nanmean(se[:n].reshape(-1, k) ** 2, axis=1) / k)
    return t[:n].reshape(-1, k).mean(axis=1), m, e


def section(a: Any, runs: list[Any], channels: tuple[str, str]) -> str:
    waves = condition_waves(a)
    if not waves:
        return "<p class=\"note\">no condition with used pulses to average</p>"
    rotations = list(dict.fromkeys(g.label for g in a.groups))
    sig, cur = channels
    out = (f"<p>The {esc(sig)} signal averaged over the aligned pulses of each condition "
           "(each pulse's baseline line removed, time from the coil's onset), the band "
           "&plusmn;1 standard error of that mean; below, the mean coil current. Before the "
           "onset and after the switch-off (dotted) the coil is off: the field-0 "
           "reference.</p>" + png(_figure(a.grid_s, waves, rotations, cur)))
    return out + _raw_excerpt(a, runs, channels)


def _figure(grid: np.ndarray, waves: list[ConditionWave], rotations: list[str], cur: str) -> Any:
    plt = pyplot()
    unit, per_v = _unit(waves)
    fig, axes = plt.subplots(2, len(rotations), figsize=(11, 5.2), sharex=True, sharey="row",
                             squeeze=False, layout="constrained", height_ratios=(3, 1.3))
    for j, r in enumerate(rotations):
        top, bottom = axes[0, j], axes[1, j]
        for w in (w for w in waves if w.rotation == r):
            colour = FIELD_COLOURS.get(w.polarity, "0.3")
            t, m, e = binned(grid, w.mean_v * per_v, w.se_v * per_v)
            top.fill_between(t, m - e, m + e, color=colour, alpha=0.3, lw=0)
            top.plot(t, m, lw=0.9, color=colour,
                     label=f"field {'+' if w.polarity > 0 else '-'} (n={w.n})")
            if np.any(np.isfinite(w.current_a)):
                bottom.plot(grid, w.current_a, lw=0.8, color=colour)
            for ax in (top, bottom):
                ax.axvline(w.end_s, color=colour, lw=0.6, ls=":")
        for ax in (top, bottom):
            ax.axvline(0.0, color="0.4", lw=0.6, ls=":")
        top.axhline(0.0, color="0.4", lw=0.6)
        top.set_title(f"rotation {r}", fontsize=10)
        top.legend(fontsize=8)
        bottom.set_xlabel("time from onset (s)")
    axes[0, 0].set_ylabel(f"signal - baseline ({unit})")
    axes[1, 0].set_ylabel(f"{cur} (A)", fontsize=8)
    return fig


def _unit(waves: list[ConditionWave]) -> tuple[str, float]:
    """µV for responses under a millivolt, else mV (readable tick labels)."""
    top = max((float(np.nanmax(np.abs(w.mean_v))) for w in waves
               if np.any(np.isfinite(w.mean_v))), default=0.0)
    return ("µV", 1e6) if top < 1e-3 else ("mV", 1e3)


def _raw_excerpt(a: Any, runs: list[Any], channels: tuple[str, str]) -> str:
    """One used pulse's raw samples (the first of the run that has it)."""
    if not a.used:
        return ""
    p = a.used[0]
    rd = next((r for r in runs if (r.board, r.run) == (p.board, p.run)), None)
    if rd is None:
        return ""
    plt = pyplot()
    fig, axes = plt.subplots(2, 1, figsize=(11, 2.8), sharex=True, squeeze=False,
                             layout="constrained")
    lo, hi = p.onset_s - RAW_MARGIN_S, p.end_s + RAW_MARGIN_S
    for row, name, colour in ((0, channels[0], "#38523a"), (1, channels[1], "#8a4b2a")):
        s = rd.streams.get(name)
        if s is None:
            continue
        t, v = s.window(lo, hi)
        axes[row, 0].plot(t, v, lw=0.7, color=colour)
        axes[row, 0].set_ylabel(f"{name} ({s.unit})", fontsize=8)
    axes[1, 0].set_xlabel("board time (s)")
    axes[0, 0].set_title(f"raw samples of pulse {p.index} (board {p.board} run {p.run}): "
                         f"field {'+' if p.polarity > 0 else '-'}, {p.rotation_rad_s:+.2f} rad/s",
                         fontsize=9)
    return "<p>One pulse as recorded (raw samples, board time):</p>" + png(fig)
