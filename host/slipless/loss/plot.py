"""The loss figure: a timeline per run and, when the angle is known, a polar view.

Timeline: board time across; one row of ticks per fate of the frames that did
not arrive live, the running count of them on a second axis, and the spans of
gaps caused by a disconnection shaded. Polar: the share of frames not
received live per angle bin, so a dead angle of the antenna stands out.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slipless.loss.account import DROPPED, LOST, MIRROR, RESEND, RunAccount
from slipless.report.plotting import pyplot

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.projections.polar import PolarAxes

MAX_RUNS = 6  # rows in one figure: the runs with the most frames not received live
_ROWS = ((RESEND, "recovered by resend", "#2f6690"), (MIRROR, "recovered from mirror", "#3a7d44"),
         (LOST, "lost on the radio", "#b23a48"), (DROPPED, "dropped on the board", "#c98b1d"))


def _timeline(ax: Axes, a: RunAccount) -> None:
    t = a.times_us / 1e6
    for y, (k, label, colour) in enumerate(_ROWS):
        x = t[a.cls == k]
        ax.scatter(x, np.full(x.size, y), marker="|", s=120, color=colour,
                   label=f"{label} ({x.size})")
    for g in a.gaps:
        if g.cause == "disconnection" and g.board_start_us is not None and g.board_end_us is not None:
            ax.axvspan(g.board_start_us / 1e6, g.board_end_us / 1e6, color="0.85",
                       zorder=0)
    ax.set_yticks(range(len(_ROWS)), [r[1] for r in _ROWS])
    ax.set_ylim(-0.7, len(_ROWS) - 0.3)
    ax.set_xlabel("board time (s)")
    ax.set_title(f"board {a.board} run {a.run}: {int(a.live_lost.sum())} of {a.expected} "
                 "frames not received live")
    twin = ax.twinx()
    order = np.argsort(t, kind="stable")
    twin.plot(t[order], np.cumsum(a.live_lost[order]), color="0.3", lw=1)
    twin.set_ylabel("not live, cumulative")


def _polar(ax: PolarAxes, a: RunAccount) -> None:
    assert a.angle is not None
    bins = a.angle["bins"]
    n = len(bins)
    theta = np.radians([b["from_deg"] for b in bins]) + np.pi / n
    frac = np.array([b["loss_fraction"] for b in bins])
    worst = int(np.argmax(frac)) if a.angle["worst_deg"] is not None else -1
    colours = ["#b23a48" if i == worst else "#8d99ae" for i in range(n)]
    ax.bar(theta, frac, width=2 * np.pi / n, color=colours, edgecolor="white")
    ax.set_rticks([0.5, 1.0])
    ax.set_rlim(0, 1)
    ax.tick_params(labelsize=7)
    worst_deg = a.angle["worst_deg"]
    ax.set_title("not live by angle\n" + (f"(worst {worst_deg:.0f} deg)" if worst_deg is not None
                                          else "(none missed: no worst sector)"), fontsize=9)


def plot(accounts: Sequence[RunAccount], path: Path) -> None:
    plt = pyplot()

    shown = sorted(accounts, key=lambda a: -int(a.live_lost.sum()))[:MAX_RUNS]
    shown.sort(key=lambda a: (a.board, a.run))
    polar = any(a.angle for a in shown)
    fig = plt.figure(figsize=(13 if polar else 10, 3.2 * max(1, len(shown))), layout="constrained")
    grid = fig.add_gridspec(max(1, len(shown)), 2 if polar else 1,
                            width_ratios=[3, 1.2] if polar else [1])
    for i, a in enumerate(shown):
        ax = fig.add_subplot(grid[i, 0])
        _timeline(ax, a)
        if i == len(shown) - 1:
            ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.28), ncol=4, fontsize=8,
                      frameon=False)
        if a.angle:
            polar_ax = fig.add_subplot(grid[i, 1], projection="polar")
            _polar(polar_ax, a)  # type: ignore[arg-type]  # add_subplot is typed as plain Axes
    fig.savefig(path, dpi=110)
    plt.close(fig)
