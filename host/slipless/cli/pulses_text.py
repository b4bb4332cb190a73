"""`slipless pulses` on the terminal (rich): the conditions and the fit."""

from __future__ import annotations

import math

from rich.console import Console
from rich.table import Table

from slipless.pulses.analysis import ARTIFACT_P, Analysis
from slipless.pulses.fit import MEANING, SE_NAMES, TERMS, Test


def _v(x: float) -> str:
    return f"{x:.4g}" if math.isfinite(x) else "-"


def _df(x: float) -> str:
    return f"{x:.3g}" if math.isfinite(x) else "-"


def _dfs(check: Test) -> str:
    return f"df {_df(check.df)}" + ("" if check.df2 is None else f", {_df(check.df2)}")


def _errors_line(a: Analysis) -> str:
    f = a.fit
    k = f.index("d")
    used = f"errors: {SE_NAMES[f.errors.kind]} (d: df {_df(f.dofs[k])})"
    if f.block is None:
        return f"{used}; {a.block_note}"
    other = f.pulse if f.use_block else f.block
    return (f"{used}; {'pulse' if f.use_block else 'block'}-level for comparison: se(d) "
            f"{_v(other.se[k])}, df {_df(other.dof[k])} ({f.block.clusters} blocks, "
            f"--blocks {a.options.blocks})")


def print_report(a: Analysis, console: Console) -> None:
    for p in a.plans:
        w = p.windows
        rise = f"rise {w.rise_s * 1e3:.3g} ms, " if w.rise_s else ""
        mended = sum(q.source != p.source for q in p.pulses)
        extra = f" ({mended} completed from the current)" if mended else ""
        console.print(f"board {p.data.board} run {p.data.run}: {len(p.pulses)} pulses from "
                      f"{p.source}{extra}, rotation from {p.rotation_from}; {rise}settle "
                      f"{w.settle_s * 1e3:.3g} ms, baselines {w.baseline_s * 1e3:.4g} ms")
    t = Table(title="responses by condition", title_justify="left")
    for col in ("condition", "n", "rad/s", "current A", "mean V", "se V"):
        t.add_column(col, justify="left" if col == "condition" else "right")
    for c in a.conditions:
        t.add_row(c.label, str(c.n), f"{c.rate_rad_s:.3f}", f"{c.current_a:.3f}", _v(c.mean_v),
                  _v(c.se_v))
    console.print(t)
    f = a.fit
    lo, hi = f.ci(a.options.level)
    t = Table(title=f"fit: response = a + b*s + c*w + d*s*w (s = {a.s_unit}, w = rad/s), "
                    f"{len(a.used)} pulses, {f.errors.kind} errors", title_justify="left")
    for col in ("term", "meaning", "estimate", "se", "df", f"{a.options.level:.0%} interval",
                "unit"):
        t.add_column(col, justify="left" if col in ("term", "meaning", "unit") else "right")
    for i, term in enumerate(TERMS):
        t.add_row(term, MEANING[term], _v(f.coef[i]), _v(f.se[i]), _df(f.dofs[i]),
                  f"{_v(lo[i])} .. {_v(hi[i])}", a.unit(term))
    if a.ratio is not None:
        q = a.ratio
        t.add_row("d/model", f"against the model's {q.predicted:.4g}", _v(q.ratio), _v(q.se),
                  _df(f.dofs[f.index("d")]), f"{_v(q.low)} .. {_v(q.high)}", "")
    console.print(t)
    console.print(_errors_line(a))
    if a.calibration is not None:
        cal = a.calibration
        console.print(f"calibration ({', '.join(cal['streams']) or 'no streams'}): d's se "
                      f"{_v(cal['d_se_fit'])} from the fit, {_v(cal['d_se'])} with the calibration's "
                      f"scale errors ({100 * cal['d_relative_se']['total']:.2g} %)"
                      + (f"; the model uses the measured amplifier gain "
                         f"({cal['amplifier_gain_v_per_c']:.4g} V/C)"
                         if cal["amplifier_gain_v_per_c"] else ""))
    for check in a.checks:
        console.print(f"check: {check.name}: statistic {check.statistic:.3g} "
                      f"({_dfs(check)}), p = {check.p_value:.3g}")
    flagged = [r for r in a.segments if r["flag"] in ("artifact", "scatter")]
    for r in flagged:
        why = (f"field slope off the induction term: p = {r['p_artifact']:.2g} < {ARTIFACT_P:g}, "
               f"{r['se_kind']} with df {_df(r['dof'])}" if r["flag"] == "artifact"
               else "pulse-to-pulse scatter beyond the within-pulse noise")
        console.print(f"flag: board {r['board']} run {r['run']} {r['rotation']}: {r['flag']} ({why})")
    dropped = len(a.pulses) - len(a.used)
    if dropped:
        console.print(f"note: {dropped} pulses left out (see the note column of the pulses table)")
