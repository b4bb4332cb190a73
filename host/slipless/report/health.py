"""The board's health over the run, from its STATUS frames (Run.status()):
battery, temperature, free RAM, the send queue's high-water mark and the
frames it dropped, against board time, one line per board and run."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from slipless.report.html import png, table
from slipless.report.plotting import pyplot

Key = tuple[int, int]


@dataclass(frozen=True)
class Measure:
    field: str  # the STATUS field (protocol.wire.STATUS_FIELDS)
    label: str
    unit: str
    scale: float  # value = raw x scale
    unknown_zero: bool = False  # 0 means "not measured" (a board with no battery channel)


MEASURES = (
    Measure("battery_mv", "battery", "V", 1e-3, unknown_zero=True),
    Measure("temp_cdeg", "temperature", "°C", 1e-2),
    Measure("free_ram", "free RAM", "kB", 1e-3),
    Measure("queue_high", "queue high", "frames", 1.0),
    Measure("dropped", "dropped", "frames", 1.0),
)


def series(status: dict[str, np.ndarray]) -> dict[Key, dict[str, tuple[np.ndarray, np.ndarray]]]:
    """Per (board, run), per STATUS field: (board time s, value in the measure's
    unit) in time order; an unknown reading (battery 0) is NaN."""
    out: dict[Key, dict[str, tuple[np.ndarray, np.ndarray]]] = {}
    if not len(status.get("board", ())):
        return out
    b, r = status["board"], status["run"]
    for key in sorted({(int(x), int(y)) for x, y in zip(b, r)}):
        sel = (b == key[0]) & (r == key[1])
        t = np.asarray(status["board_time_s"][sel], dtype=float)
        order = np.argsort(t, kind="stable")
        per: dict[str, tuple[np.ndarray, np.ndarray]] = {}
        for m in MEASURES:
            raw = np.asarray(status[m.field][sel], dtype=float)[order]
            v = raw * m.scale
            if m.unknown_zero:
                v[raw == 0] = np.nan
            per[m.field] = (t[order], v)
        out[key] = per
    return out


def section(status: dict[str, np.ndarray], only: set[Key] | None = None) -> str:
    """The table and figure; with `only` (the runs that hold samples), other
    runs (status sent while idle) are left out when that leaves any."""
    every = series(status)
    data = {k: v for k, v in every.items() if only is None or k in only} or every
    if not data:
        return "<p class=\"note\">no STATUS frames in the inputs: no board health to show</p>"
    rows = []
    for (b, r), per in data.items():
        cells = []
        for m in MEASURES:
            v = per[m.field][1]
            ok = v[np.isfinite(v)]
            cells.append(_span(ok))
        rows.append((b, r, per[MEASURES[0].field][0].size, *cells))
    head = ("board", "run", "reports", *(f"{m.label} {m.unit}" for m in MEASURES))
    return ("<p>What the board reported of itself in its STATUS frames over the run "
            "(board time; lowest to highest): the send queue's high-water mark and the "
            "frames it dropped, both counted since the run started:</p>"
            + table(head, rows) + png(_figure(data)))


def _span(v: np.ndarray) -> str:
    if not v.size:
        return "unknown"
    lo, hi = f"{v.min():.4g}", f"{v.max():.4g}"
    return lo if lo == hi else f"{lo} to {hi}"


def _figure(data: dict[Key, dict[str, tuple[np.ndarray, np.ndarray]]]) -> Any:
    plt = pyplot()
    fig, axes = plt.subplots(len(MEASURES), 1, figsize=(10, 0.95 * len(MEASURES) + 0.7),
                             sharex=True, squeeze=False, layout="constrained")
    for (b, r), per in data.items():
        for k, m in enumerate(MEASURES):
            t, v = per[m.field]
            axes[k, 0].plot(t, v, lw=0.9, marker=".", ms=2, drawstyle="steps-post",
                            label=f"board {b} run {r}")
    for k, m in enumerate(MEASURES):
        axes[k, 0].set_ylabel(f"{m.label}\n({m.unit})", fontsize=7)
        axes[k, 0].tick_params(labelsize=7)
    if len(data) > 1:
        axes[0, 0].legend(fontsize=8)
    axes[-1, 0].set_xlabel("board time (s)")
    axes[0, 0].set_title("board health from its STATUS frames", fontsize=10)
    return fig
