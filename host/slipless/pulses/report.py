"""Tables and a JSON summary of a pulse analysis (cli/pulses_text.py prints it).

Tables are written column-wise as CSV (UTF-8, header row) or Parquet, one file
per table, through the same writer as `slipless decode`'s (table_io).
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from slipless.errors import InputError
from slipless.io.table_files import open_table
from slipless.io.table_io import kind_of, spec
from slipless.pulses.analysis import Analysis
from slipless.pulses.fit import MEANING, TERMS, Errors
from slipless.pulses.group import field_label, rotation_label

SE_WHY = ("OLS coefficients; HC2 heteroskedasticity-consistent standard errors (noise differs "
          "between rotation conditions and the within-pulse errors miss pulse-to-pulse scatter, "
          "so the residuals are used; HC2 is unbiased when the noise is equal); intervals from "
          "Student's t with each term's Bell-McCaffrey degrees of freedom (Satterthwaite's for "
          "the error's own spread, nominal coverage down to 3 pulses per condition)")
BLOCK_WHY = ("OLS coefficients; block-level CR2 standard errors (pulses of one block share "
             "an error, e.g. a drifting artifact; for blocks of equal design this is the "
             "spread of the per-block estimates); intervals from Student's t with each "
             "term's Bell-McCaffrey degrees of freedom")


def write_table(out: Path, name: str, fmt: str, cols: dict[str, Sequence[Any]]) -> Path:
    """One table file; each column's kind comes from its values (NaN is written empty)."""
    writer = open_table(out, spec(name, [(k, kind_of(v)) for k, v in cols.items()]), fmt)
    writer.write(list(cols.values()))
    writer.close()
    return out / f"{name}.{fmt}"


def _columns(rows: list[dict[str, Any]], names: Sequence[str]) -> dict[str, list[Any]]:
    return {n: [r[n] for r in rows] for n in names}


def tables(a: Analysis) -> dict[str, dict[str, Any]]:
    label = {id(a.used[i]): g.label for g in a.groups for i in g.members}
    t_per_a = a.options.field_t_per_a
    pulses = {
        "board": [p.board for p in a.pulses], "run": [p.run for p in a.pulses],
        "pulse": [p.index for p in a.pulses], "onset_s": [p.onset_s for p in a.pulses],
        "end_s": [p.end_s for p in a.pulses],
        "field_sign": [field_label(p.polarity) for p in a.pulses],
        "current_A": [p.current_a for p in a.pulses],
        "field_T": [p.current_a * t_per_a if t_per_a else math.nan for p in a.pulses],
        "rotation_rad_s": [p.rotation_rad_s for p in a.pulses],
        "rotation": [label.get(id(p)) or (rotation_label(p.rotation_rad_s, a.options.stopped_below)
                                          if math.isfinite(p.rotation_rad_s) else "")
                     for p in a.pulses],
        "response_V": [p.response_v for p in a.pulses], "se_V": [p.se_v for p in a.pulses],
        "plateau_V": [p.plateau_v for p in a.pulses], "before_V": [p.before_v for p in a.pulses],
        "after_V": [p.after_v for p in a.pulses], "n_plateau": [p.n_plateau for p in a.pulses],
        "found_by": [p.found_by for p in a.pulses], "used": [int(p.used) for p in a.pulses],
        "note": [p.note for p in a.pulses],
    }
    conds = a.conditions
    conditions = {
        "condition": [c.label for c in conds], "field_sign": [field_label(c.polarity) for c in conds],
        "rotation": [c.rotation for c in conds], "rotation_rad_s": [c.rate_rad_s for c in conds],
        "current_A": [c.current_a for c in conds], "n": [c.n for c in conds],
        "mean_V": [c.mean_v for c in conds], "se_V": [c.se_v for c in conds],
        "sd_V": [c.sd_v for c in conds], "within_se_V": [c.within_se_v for c in conds],
    }
    g = a.grid_s
    waveforms = {
        "condition": [c.label for c in conds for _ in g], "t_s": np.tile(g, len(conds)),
        "signal_V": np.concatenate([c.wave for c in conds]),
        "signal_se_V": np.concatenate([c.wave_se for c in conds]),
        "current_A": np.concatenate([c.wave_amps for c in conds]),
        "n": [c.n for c in conds for _ in g],
    }
    return {"pulses": pulses, "conditions": conditions, "waveforms": waveforms, "fit": _fit_table(a),
            "rotation": _columns(a.rotation_rows, ("rotation", "rotation_rad_s", "n",
                                                    "field_slope", "se", "model_slope")),
            "segments": _columns(a.segments, ("board", "run", "rotation", "rotation_rad_s", "n",
                                              "field_slope", "se", "dof", "induction_part",
                                              "artifact_part", "p_artifact", "scatter", "flag",
                                              "se_kind")),
            "runs": _columns(a.runs, ("board", "run", "pulses", "used", "dropped", "flag",
                                      "p_artifact", "dof", "se_kind")),
            "checks": {"check": [c.name for c in a.checks],
                       "statistic": [c.statistic for c in a.checks],
                       "df": [float(c.df) for c in a.checks],
                       "df2": [math.nan if c.df2 is None else c.df2 for c in a.checks],
                       "p_value": [c.p_value for c in a.checks],
                       "meaning": [c.meaning for c in a.checks]}}


def _fit_table(a: Analysis) -> dict[str, list[Any]]:
    f = a.fit
    lo, hi = f.ci(a.options.level)
    rows = [{"term": t, "meaning": MEANING[t], "estimate": float(f.coef[i]), "unit": a.unit(t),
             "se": float(f.se[i]), "se_classical": float(f.se_classical[i]),
             "se_hc3": float(f.se_hc3[i]), "ci_low": float(lo[i]), "ci_high": float(hi[i])}
            for i, t in enumerate(TERMS)]
    if a.ratio is not None:
        r = a.ratio
        rows.append({"term": "d/model", "meaning": f"d over the model's {r.predicted:.4g}",
                     "estimate": r.ratio, "unit": "", "se": r.se, "se_classical": math.nan,
                     "se_hc3": math.nan, "ci_low": r.low, "ci_high": r.high})
    return _columns(rows, ("term", "meaning", "estimate", "unit", "se", "se_classical",
                           "se_hc3", "ci_low", "ci_high"))


def _errors(e: Errors | None, **more: Any) -> dict[str, Any] | None:
    if e is None:
        return None
    return {"kind": e.kind, "clusters": e.clusters, **more,
            "se": {t: _num(e.se[i]) for i, t in enumerate(TERMS)},
            "dof": {t: _num(e.dof[i]) for i, t in enumerate(TERMS)}}


def _num(x: float) -> float | None:
    """A number for JSON (which has no NaN)."""
    return float(x) if math.isfinite(x) else None


def summary(a: Analysis) -> dict[str, Any]:
    f = a.fit
    lo, hi = f.ci(a.options.level)
    return {
        "pulses": len(a.pulses), "used": len(a.used), "s": a.s_unit, "level": a.options.level,
        "se_kind": f.errors.kind, "se_why": BLOCK_WHY if f.use_block else SE_WHY,
        "dof": {t: _num(f.dofs[i]) for i, t in enumerate(TERMS)}, "dof_residual": f.dof,
        "fit": {t: {"estimate": float(f.coef[i]), "se": float(f.se[i]), "dof": _num(f.dofs[i]),
                    "se_classical": float(f.se_classical[i]), "se_hc3": float(f.se_hc3[i]),
                    "ci": [float(lo[i]), float(hi[i])],
                    "unit": a.unit(t)} for i, t in enumerate(TERMS)},
        "errors": {"used": "block" if f.use_block else "pulse", "pulse": _errors(f.pulse),
                   "block": _errors(f.block, blocks=a.options.blocks),
                   "block_note": a.block_note or None},
        "calibration": a.calibration,
        "model": None if a.ratio is None else {
            "predicted_d": a.ratio.predicted, "ratio": a.ratio.ratio, "ratio_se": a.ratio.se,
            "ratio_ci": [a.ratio.low, a.ratio.high]},
        "checks": [{**vars(c), "p_value": _num(c.p_value)} for c in a.checks],
        "runs": [{k: _num(v) if isinstance(v, float) else v for k, v in r.items()}
                 for r in a.runs],
        "windows": [{"board": p.data.board, "run": p.data.run, "pulses_from": p.source,
                     "rotation_from": p.rotation_from, "rise_ms": _ms(p.windows.rise_s),
                     "settle_ms": _ms(p.windows.settle_s), "guard_ms": _ms(p.windows.guard_s),
                     "baseline_ms": _ms(p.windows.baseline_s),
                     "plateau_ms": _ms(p.windows.plateau_s)} for p in a.plans],
    }


def _ms(v: float | None) -> float | None:
    return None if v is None else round(v * 1e3, 3)


def write_outputs(a: Analysis, out: Path, fmt: str, plots: bool = True) -> list[Path]:
    if out.exists() and not out.is_dir():
        raise InputError(f"{out}: exists and is not a folder")
    out.mkdir(parents=True, exist_ok=True)
    paths = [write_table(out, name, fmt, cols) for name, cols in tables(a).items()]
    s = out / "summary.json"
    s.write_text(json.dumps(summary(a), indent=2, default=_plain) + "\n")
    paths.append(s)
    if plots:
        from slipless.pulses.plots import plot_all

        paths += plot_all(a, out)
    return paths


def _plain(x: Any) -> Any:
    return x.item() if isinstance(x, np.generic) else str(x)


# ---- console ------------------------------------------------------------------------------
