"""The noise figure: per stream its amplitude spectrum and its Allan deviation
with the intervals, and, with pulses, the smallest resolvable d and b against
run time."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slipless.errors import InputError
from slipless.noise.analysis import Noise
from slipless.noise.gyro import B_FACTOR
from slipless.noise.sensitivity import Sensitivity
from slipless.noise.streams import StreamNoise
from slipless.report.plotting import pyplot

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

MAX_STREAMS = 6  # rows of one figure
MINOR_SUBS = (2.0, 5.0)  # minor ticks per decade: the full 2..9 set takes seconds to draw
REACH_SPAN = 1e6  # the reach is drawn out to this many times the pulses at hand (or to
# twice the pulses a target needs, up to REACH_SPAN^2 times)
_LINE, _BAND, _MARK = "#2f6690", "#9cc5e0", "#b23a48"


def figure(noise: Noise) -> Figure:
    shown = [s for s in noise.streams if s.psd is not None or s.allan is not None][:MAX_STREAMS]
    rows = len(shown) + (noise.sensitivity is not None)
    plt = pyplot()
    # fixed margins: constrained layout measures every tick label twice, seconds per figure
    fig = plt.figure(figsize=(11, 3.0 * max(rows, 1)))
    fig.subplots_adjust(left=0.08, right=0.98, bottom=0.35 / max(rows, 1) / 1.5,
                        top=1 - 0.25 / max(rows, 1) / 1.5, hspace=0.55, wspace=0.25)
    if not rows:
        fig.text(0.5, 0.5, "no stream long enough for a noise analysis", ha="center")
        return fig
    axes = fig.subplots(rows, 2, squeeze=False)
    for row, s in zip(axes, shown):
        _spectrum(row[0], s, noise.band_hz)
        _allan(row[1], s)
    if noise.sensitivity is not None:
        _reach(axes[-1][0], axes[-1][1], noise.sensitivity)
    for ax in fig.axes:
        _light_ticks(ax)
    return fig


def _light_ticks(ax: Axes) -> None:
    from matplotlib.ticker import LogLocator, NullFormatter

    for axis, scale in ((ax.xaxis, ax.get_xscale()), (ax.yaxis, ax.get_yscale())):
        if scale == "log":
            axis.set_minor_locator(LogLocator(subs=MINOR_SUBS))
            axis.set_minor_formatter(NullFormatter())


def save(noise: Noise, path: Path) -> None:
    fig = figure(noise)
    try:
        fig.savefig(path, dpi=110)
    except OSError as exc:
        raise InputError(f"{path}: cannot write the figure ({exc.strerror})") from exc
    finally:
        pyplot().close(fig)


def _spectrum(ax: Axes, s: StreamNoise, band: tuple[float, float]) -> None:
    ax.set_title(f"{s.name}: amplitude spectral density", fontsize=10, loc="left")
    if s.psd is None:
        ax.text(0.5, 0.5, s.note or "no spectrum", ha="center", transform=ax.transAxes)
        return
    f, a = s.psd.freq_hz[1:], s.psd.asd[1:]
    ax.loglog(f, a, color=_LINE, lw=0.8)
    if s.floor is not None:
        hi = min(band[1], s.rate_hz / 2)
        ax.hlines(s.floor, band[0], hi, color=_MARK, lw=1.5,
                  label=f"floor {s.floor:.3g} {s.unit}/sqrt(Hz), {band[0]:g}-{hi:g} Hz")
        ax.legend(fontsize=8, loc="upper right")
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel(f"{s.unit}/sqrt(Hz)")
    ax.grid(True, which="major", alpha=0.3)


def _allan(ax: Axes, s: StreamNoise) -> None:
    ax.set_title(f"{s.name}: overlapping Allan deviation", fontsize=10, loc="left")
    c = s.allan
    if c is None or not len(c):
        ax.text(0.5, 0.5, s.note or "too short", ha="center", transform=ax.transAxes)
        return
    ax.fill_between(c.tau_s, c.lo, c.hi, color=_BAND, alpha=0.6,
                    label=f"{c.level:.1%} interval")
    ax.loglog(c.tau_s, c.adev, "o-", color=_LINE, ms=3, lw=1)
    g = s.gyro
    if g is not None and g.arw.value is not None:
        t = c.tau_s
        ax.loglog(t, g.arw.value / np.sqrt(t), "--", color=_MARK, lw=0.8,
                  label=f"N {g.arw.value:.3g} {g.arw.unit}")
    if g is not None and g.bias.value is not None and g.bias.tau_s is not None:
        ax.plot(g.bias.tau_s[0], g.bias.value * B_FACTOR, "s", color=_MARK, ms=5,
                label=f"B {g.bias.value:.3g} {g.bias.unit}")
    ax.set_xlabel("averaging time tau (s)")
    ax.set_ylabel(s.unit)
    ax.grid(True, which="major", alpha=0.3)
    ax.legend(fontsize=8, loc="best")


def _reach(ax_d: Axes, ax_b: Axes, s: Sensitivity) -> None:
    needed = [p for p in (s.d_pulses, s.earth_pulses) if p is not None]
    top = min(max([s.pulses * REACH_SPAN, *(2 * p for p in needed)]), s.pulses * REACH_SPAN**2)
    n = np.geomspace(s.pulses, top, 60)
    t = n / s.pulse_rate_hz
    scale = np.array([s.scale(float(k)) for k in n])
    for ax, se, unit, name, target, label in (
            (ax_d, s.se_d, s.unit_d, "d", s.predicted_d, "predicted d"),
            (ax_b, s.se_b, s.unit_b, "b", s.earth_b, "Earth's part of b")):
        ax.loglog(t, s.z * se * scale, color=_LINE, label=f"smallest resolvable |{name}|")
        ax.plot(t[0], s.z * se, "o", color=_LINE, ms=4)
        if target is not None and target != 0:
            ax.axhline(abs(target), color=_MARK, ls="--", lw=1, label=label)
        ax.set_title(f"reach of {name} ({s.level:.0%}) against run time", fontsize=10, loc="left")
        ax.set_xlabel("run time (s)")
        ax.set_ylabel(unit)
        ax.grid(True, which="major", alpha=0.3)
        ax.legend(fontsize=8, loc="best")
