"""`slipless campaign report`: one self-contained HTML page across the runs of
a campaign: a table of the catalogued runs (UTC span, board, loss, clock
bound, fit) and d per run with its interval beside the value of all the runs'
pulses fitted together (the same reduction as `campaign pulses`).

Each run's interval is its own fit's (Bell-McCaffrey df, as `slipless pulses`);
the combined value is one fit over every selected pulse, not an average of
the runs' values.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from slipless.errors import InputError

Key = tuple[str, int, int]  # capture, board, run


@dataclass
class RunFit:
    """d of one run: its estimate and interval, or why there is none."""

    capture: str
    board: int
    run: int
    pulses: int = 0
    d: float = float("nan")
    low: float = float("nan")
    high: float = float("nan")
    note: str = ""


@dataclass
class CampaignReport:
    folder: Path
    where: str | None
    rows: list[dict[str, Any]]
    fits: list[RunFit] = field(default_factory=list)
    combined: Any = None  # pulses.Analysis over every selected run
    combined_note: str = ""
    level: float = 0.95
    unit: str = ""


def collect(folder: Path, rows: Sequence[dict[str, Any]], where: str | None = None,
            prediction: Path | None = None) -> CampaignReport:
    """Every run's own fit and the fit of all of them together (each capture decoded once)."""
    from slipless.campaign.together import pulse_runs_of
    from slipless.pulses.analysis import analyse
    from slipless.run import pulse_settings

    if not rows:
        raise InputError(f"{folder}: no catalogued runs chosen")
    st, opt = pulse_settings(prediction=prediction)
    rep = CampaignReport(folder, where, list(rows), level=opt.level)
    runs, names = pulse_runs_of(folder, rows)
    for rd, name in zip(runs, names):
        rep.fits.append(_run_fit(rd, name, st, opt))
    try:
        rep.combined = analyse(runs, st, opt)
        rep.unit = rep.combined.unit("d")
    except InputError as exc:
        rep.combined_note = f"no combined fit: {exc}"
    return rep


def _run_fit(rd: Any, name: dict[str, Any], st: Any, opt: Any) -> RunFit:
    from slipless.pulses.analysis import analyse

    f = RunFit(name["capture"], name["board"], name["run"])
    try:
        a = analyse([rd], st, opt)
    except InputError as exc:
        f.note = str(exc)
        return f
    k = a.fit.index("d")
    low, high = a.fit.ci(opt.level)
    f.pulses, f.d = len(a.used), float(a.fit.coef[k])
    f.low, f.high = float(low[k]), float(high[k])
    return f


def combined_d(rep: CampaignReport) -> tuple[float, float, float] | None:
    """(d, low, high) of the fit over every selected pulse."""
    a = rep.combined
    if a is None:
        return None
    k = a.fit.index("d")
    low, high = a.fit.ci(rep.level)
    return float(a.fit.coef[k]), float(low[k]), float(high[k])


def render(rep: CampaignReport, title: str, made: str | None = None) -> str:
    from slipless.report.html import esc, page

    if made is None:
        made = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    which = f" where {rep.where}" if rep.where else ""
    sections = [("runs", "The runs", _runs_table(rep)),
                ("d", "d per run and combined", _d_section(rep))]
    from slipless.report.page import SAFETY

    sections.append(("safety", "Safety notes", '<div class="safety"><ul>'
                     + "".join(f"<li>{esc(s)}</li>" for s in SAFETY) + "</ul></div>"))
    from slipless.version import __version__

    return page(title, f"{len(rep.rows)} runs of {rep.folder}{which}; made by slipless "
                f"{__version__}: {made}", sections,
                "slipless: every frame accounted for; numbers with their uncertainty.")


def _span(row: dict[str, Any]) -> str:
    first, last = row.get("first_utc"), row.get("last_utc")
    if not first:
        return "-"
    return f"{first[:19].replace('T', ' ')} to {(last or '?')[11:19]}"


def _runs_table(rep: CampaignReport) -> str:
    from slipless.report.html import table

    fits = {(f.capture, f.board, f.run): f for f in rep.fits}
    out = []
    for r in rep.rows:
        f = fits.get((r["capture"], r["board"], r["run"]))
        fit = "-" if f is None or f.note or not np.isfinite(f.d) else (
            f"{f.d:.4g} ({f.low:.4g} to {f.high:.4g}), {f.pulses} pulses")
        out.append((r["capture"], r["board"], r["run"], r.get("label") or "-", _span(r),
                    _opt(r.get("duration_s"), ".1f"), _opt(r.get("loss_percent"), ".3f"),
                    _opt(r.get("clock_bound_ms"), ".3g"), fit))
    unit = f" ({rep.unit})" if rep.unit else ""
    return ("<p>Each catalogued run (UTC span: the laptop's receive times of its first and "
            "last frame): the share of frames lost after recovery, the bound on the "
            f"board-to-laptop clock error and its own fit's d with its {rep.level:.0%} "
            "interval.</p>"
            + table(("capture", "board", "run", "label", "UTC span", "s", "loss %",
                     "clock bound ms", f"d{unit}, interval"), out))


def _opt(v: Any, fmt: str) -> str:
    return "-" if v is None else format(float(v), fmt)


def _d_section(rep: CampaignReport) -> str:
    from slipless.report.html import esc, num, png, table

    both = combined_d(rep)
    rows: list[tuple[Any, ...]] = [(f.capture, f.board, f.run, f.pulses or "-", f.d, f.low,
                                    f.high, f.note or "") for f in rep.fits]
    if both is not None:
        rows.append(("all together", "", "", len(rep.combined.used), *both, ""))
    out = (f"<p>d, the field x rotation term, per run with its {rep.level:.0%} interval "
           "(each run fitted alone), and the fit of every selected pulse together"
           + (f" (unit {esc(rep.unit)})" if rep.unit else "") + ":</p>"
           + table(("capture", "board", "run", "pulses", "d", "low", "high", "note"), rows))
    if rep.combined_note:
        out += f"<p class=\"note\">{esc(rep.combined_note)}</p>"
    ratio = getattr(rep.combined, "ratio", None)
    if ratio is not None:
        out += (f"<p>Against the prediction: d / model = <b>{num(ratio.ratio)}</b> "
                f"({num(ratio.low)} to {num(ratio.high)}) for all the runs together.</p>")
    if any(np.isfinite(f.d) for f in rep.fits):
        out += png(_forest(rep, both))
    return out


def _forest(rep: CampaignReport, both: tuple[float, float, float] | None) -> Any:
    from slipless.report.plotting import pyplot

    plt = pyplot()
    fits = [f for f in rep.fits if np.isfinite(f.d)]
    fig, ax = plt.subplots(figsize=(9, 0.45 * len(fits) + 1.6), layout="constrained")
    y = np.arange(len(fits))[::-1] + 1
    d = np.array([f.d for f in fits])
    err = np.vstack([d - [f.low for f in fits], [f.high for f in fits] - d])
    ax.errorbar(d, y, xerr=err, fmt="o", color="#38523a", capsize=3, ms=4)
    if both is not None:
        ax.axvspan(both[1], both[2], color="#a5482b", alpha=0.15, lw=0)
        ax.axvline(both[0], color="#a5482b", lw=1.2, label="all runs together")
        ax.legend(fontsize=8, loc="lower right")
    ax.axvline(0.0, color="0.4", lw=0.6)
    ax.set_ylim(0.4, len(fits) + 0.6)
    ax.set_yticks(y, [f"{f.capture} b{f.board} r{f.run}" for f in fits], fontsize=8)
    ax.set_xlabel(f"d ({rep.unit})" if rep.unit else "d")
    ax.set_title(f"d per run, {rep.level:.0%} intervals", fontsize=10)
    return fig


def write(rep: CampaignReport, out: Path, title: str = "slipless campaign report",
          made: str | None = None) -> Path:
    from slipless.report.html import write_file

    return write_file(out, render(rep, title, made))
