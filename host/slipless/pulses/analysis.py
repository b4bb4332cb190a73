"""`slipless pulses`: coil pulses -> responses -> conditions -> the factorial fit.

Steps: load runs (pulses_data), find pulses and windows (pulses_find), reduce
each pulse to a response (pulses_reduce), label by field sign and rotation
(pulses_group), fit response = a + b*s + c*w + d*s*w (pulses_fit), then write
tables and plots (pulses_report, pulses_plots). The field x rotation term d
is the induction signal; b (flips with the field, not with rotation) is the
artifact; stopped runs are the control.
"""

from __future__ import annotations

import json
import math
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from scipy import stats

from slipless.errors import InputError
from slipless.model.physics import rpm_to_rad_s
from slipless.pulses.data import RunData
from slipless.pulses.fit import (
    Fit,
    Ratio,
    Test,
    against_prediction,
    equal_slopes,
    factorial,
    linear_slopes,
    slope,
)
from slipless.pulses.group import (
    STOPPED_BELOW_RAD_S,
    RotationGroup,
    condition_label,
    mean_se,
    rotation_groups,
)
from slipless.pulses.reduce import PulseResult, RunPlan, Settings, plan_run, reduce_run, waveform_grid

SCATTER_P = 1e-3  # pulse-to-pulse scatter beyond the within-pulse noise at this p is flagged


@dataclass
class Options:
    by: str = "current"  # s = coil current in A, or "sign" (+1/-1)
    level: float = 0.95
    stopped_below: float = STOPPED_BELOW_RAD_S
    slope_model: float | None = None  # predicted V per (A rad/s), from `slipless predict --json`
    field_t_per_a: float | None = None


@dataclass
class Condition:
    label: str
    polarity: int
    rotation: str
    rate_rad_s: float
    current_a: float
    n: int
    mean_v: float
    se_v: float
    sd_v: float
    within_se_v: float
    wave: np.ndarray
    wave_se: np.ndarray
    wave_amps: np.ndarray


@dataclass
class Analysis:
    pulses: list[PulseResult]
    plans: list[RunPlan]
    grid_s: np.ndarray
    options: Options
    s: np.ndarray  # per used pulse
    w: np.ndarray
    y: np.ndarray
    used: list[PulseResult]
    groups: list[RotationGroup]
    conditions: list[Condition]
    fit: Fit
    predicted_d: float | None = None
    ratio: Ratio | None = None
    rotation_rows: list[dict[str, Any]] = field(default_factory=list)
    segments: list[dict[str, Any]] = field(default_factory=list)
    runs: list[dict[str, Any]] = field(default_factory=list)
    checks: list[Test] = field(default_factory=list)

    @property
    def s_unit(self) -> str:
        return "A" if self.options.by == "current" else "sign"

    def unit(self, term: str) -> str:
        per_s = "/A" if self.options.by == "current" else ""
        return {"a": "V", "b": f"V{per_s}", "c": "V/(rad/s)",
                "d": f"V/({'A ' if per_s else ''}rad/s)"}[term]


def analyse(runs: list[RunData], st: Settings, opt: Options) -> Analysis:
    plans = [p for p in (plan_run(rd, st) for rd in runs) if p is not None]
    if not plans:
        raise InputError("no coil pulses found in any run (check --current, --pulses-from, "
                         "--on-amps)")
    grid = waveform_grid(plans)
    pulses = [r for p in plans for r in reduce_run(p, st, grid)]
    used = [p for p in pulses if p.used]
    if not used:
        why = max({p.note for p in pulses}, key=[p.note for p in pulses].count)
        raise InputError(f"all {len(pulses)} pulses were left out (mostly: {why})")
    if opt.by == "current" and any(not math.isfinite(p.current_a) for p in used):
        raise InputError("no coil current in some run: use --by sign")
    s = np.array([p.current_a if opt.by == "current" else p.polarity for p in used], dtype=float)
    w = np.array([p.rotation_rad_s for p in used])
    y = np.array([p.response_v for p in used])
    groups = rotation_groups(w, opt.stopped_below)
    fit = factorial(s, w, y)
    a = Analysis(pulses, plans, grid, opt, s, w, y, used, groups, _conditions(used, groups), fit)
    _compare(a)
    _by_rotation(a)
    _segments(a)
    return a


def _conditions(used: list[PulseResult], groups: list[RotationGroup]) -> list[Condition]:
    out = []
    for g in groups:
        for pol in (1, -1):
            members = [used[i] for i in g.members if used[i].polarity == pol]
            if not members:
                continue
            y = np.array([m.response_v for m in members])
            mean, se, sd = mean_se(y)
            waves, amps = _stacked_waves(members)
            with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
                warnings.simplefilter("ignore", RuntimeWarning)  # grid points no pulse reached
                wmean = np.nanmean(waves, axis=0)
                wse = np.nanstd(waves, axis=0, ddof=1) / np.sqrt(np.sum(np.isfinite(waves), axis=0))
                amean = np.nanmean(amps, axis=0)
            out.append(Condition(
                condition_label(pol, g.label), pol, g.label,
                float(np.median([m.rotation_rad_s for m in members])),
                float(np.mean([m.current_a for m in members])), len(members), mean, se, sd,
                float(np.median([m.se_v for m in members])), wmean, wse, amean))
    return out


def _stacked_waves(members: list[PulseResult]) -> tuple[np.ndarray, np.ndarray]:
    """Each member's signal and current waveform as rows (NaN: no current),
    made here one condition at a time rather than kept for every pulse."""
    waves = amps = np.zeros((0, 0))
    for i, m in enumerate(members):
        w, c = m.waves()
        assert w is not None  # a used pulse has a response, so a waveform
        if not i:
            waves, amps = np.empty((len(members), w.size)), np.empty((len(members), w.size))
        waves[i] = w
        amps[i] = np.nan if c is None else c
    return waves, amps


def _compare(a: Analysis) -> None:
    fit, opt = a.fit, a.options
    k = fit.index("d")
    d, se = float(fit.coef[k]), float(fit.se[k])
    p_zero = 2 * float(stats.t.sf(abs(d / se), fit.dof))
    a.checks.append(Test("d differs from zero", d / se, fit.dof, p_zero,
                         "small p: a field x rotation term is present"))
    if opt.slope_model is None:
        return
    pred = opt.slope_model
    if opt.by == "sign":
        pred *= float(np.mean(np.abs([p.current_a for p in a.used])))
    if not math.isfinite(pred) or pred == 0:
        return
    a.predicted_d = pred
    a.ratio = against_prediction(fit, pred, opt.level)
    t = (d - pred) / se
    a.checks.append(Test("d agrees with the model", t, fit.dof, 2 * float(stats.t.sf(abs(t), fit.dof)),
                         "small p: the measured term differs from the model's value"))


def _by_rotation(a: Analysis) -> None:
    """Field slope per rotation group: does the field response depend on rotation?"""
    fit = a.fit
    b, d = fit.coef[fit.index("b")], fit.coef[fit.index("d")]
    rates, slopes, ses = [], [], []
    for g in a.groups:
        idx = g.members
        if len(set(a.s[idx] > 0)) < 2 or idx.size < 3:
            continue
        k, se, _ = slope(a.s[idx], a.y[idx])
        a.rotation_rows.append({"rotation": g.label, "rotation_rad_s": g.rate_rad_s,
                                "n": int(idx.size), "field_slope": k, "se": se,
                                "model_slope": float(b + d * g.rate_rad_s)})
        rates.append(g.rate_rad_s)
        slopes.append(k)
        ses.append(se)
    if len(slopes) >= 2:
        a.checks.append(equal_slopes(np.array(slopes), np.array(ses)))
    if len(slopes) >= 3:
        a.checks.append(linear_slopes(np.array(slopes), np.array(ses), np.array(rates)))


def _segments(a: Analysis) -> None:
    """Per run and rotation group: does the artifact or the induction term dominate?"""
    d = float(a.fit.coef[a.fit.index("d")])
    run_of = [(p.board, p.run) for p in a.used]
    for board, run in sorted({(p.board, p.run) for p in a.pulses}):
        flags = []
        for g in a.groups:
            idx = np.array([i for i in g.members if run_of[i] == (board, run)], dtype=int)
            if idx.size:
                a.segments.append(_segment_row(a, board, run, g, idx, d))
                flags.append(a.segments[-1]["flag"])
        n_all = sum((p.board, p.run) == (board, run) for p in a.pulses)
        n_used = sum((p.board, p.run) == (board, run) for p in a.used)
        worst = next((f for f in ("artifact", "scatter", "ok", "control") if f in flags), "too few")
        a.runs.append({"board": board, "run": run, "pulses": n_all, "used": n_used,
                       "dropped": n_all - n_used, "flag": worst})


def _segment_row(a: Analysis, board: int, run: int, g: RotationGroup, idx: np.ndarray,
                 d: float) -> dict[str, Any]:
    row: dict[str, Any] = {"board": board, "run": run, "rotation": g.label,
                           "rotation_rad_s": float(np.median(a.w[idx])), "n": int(idx.size),
                           "field_slope": math.nan, "se": math.nan, "induction_part": math.nan,
                           "artifact_part": math.nan, "scatter": math.nan, "flag": "too few"}
    if len(set(a.s[idx] > 0)) < 2 or idx.size < 4:
        return row
    k, se, _ = slope(a.s[idx], a.y[idx])
    ind = d * row["rotation_rad_s"]
    art = k - ind
    x = np.column_stack([np.ones(idx.size), a.s[idx]])
    resid = a.y[idx] - x @ np.linalg.lstsq(x, a.y[idx], rcond=None)[0]
    within = np.array([a.used[i].se_v for i in idx])
    chi2 = float(np.sum((resid / within) ** 2))
    dof = idx.size - 2
    if g.stopped:
        flag = "control"
    elif abs(art) > abs(ind) and abs(art) > 2 * se:
        flag = "artifact"
    elif stats.chi2.sf(chi2, dof) < SCATTER_P:
        flag = "scatter"
    else:
        flag = "ok"
    row.update(field_slope=k, se=se, induction_part=ind, artifact_part=art,
               scatter=chi2 / dof, flag=flag)
    return row


# ---- command line -------------------------------------------------------------------------
_RATE = re.compile(r"^(?:(\d+):(\d+)=)?([-+]?[0-9.eE+-]+)(rpm)?$")


def parse_rates(values: list[str] | None) -> dict[tuple[int, int] | None, float]:
    """'[BOARD:RUN=]VALUE[rpm]' -> rad/s per run (None: every run without a stream)."""
    out: dict[tuple[int, int] | None, float] = {}
    for v in values or []:
        m = _RATE.match(v.strip())
        try:
            rate = float(m.group(3)) if m else math.nan
        except ValueError:
            rate = math.nan
        if m is None or not math.isfinite(rate):
            raise InputError(f"--rotation-rate {v!r}: expected [BOARD:RUN=]VALUE (rad/s) or "
                             "VALUErpm, e.g. 6.283 or 1:2=-60rpm")
        key = (int(m.group(1)), int(m.group(2))) if m.group(1) else None
        out[key] = rpm_to_rad_s(rate) if m.group(4) else rate
    return out


def read_prediction(path: Path | None) -> tuple[float | None, float | None]:
    if path is None:
        return None, None
    try:
        res = json.loads(path.read_text())["results"]
        return float(res["slope_V_per_A_rad_s"]), float(res["field_T_per_A"])
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from exc
    except (ValueError, KeyError, TypeError) as exc:
        raise InputError(f"{path}: not the output of `slipless predict --json`") from exc


def _ms(v: float | None) -> float | None:
    if v is not None and not v > 0:
        raise InputError("window lengths (--settle-ms, --baseline-ms, --plateau-ms) must be > 0")
    return None if v is None else v / 1000.0


def settings_from_args(args: Any) -> tuple[Settings, Options]:
    """From the command's options (an argparse namespace, or any object with them)."""
    st = Settings(signal=args.signal, current=args.current, rotation=args.rotation,
                  rotation_rate=parse_rates(args.rotation_rate), source=args.pulses_from,
                  on_amps=args.on_amps, off_amps=args.off_amps, settle_s=_ms(args.settle_ms),
                  baseline_s=_ms(args.baseline_ms), plateau_s=_ms(args.plateau_ms))
    if not 0.5 <= args.level < 1:
        raise InputError("--level is a confidence level such as 0.95")
    slope_model, t_per_a = read_prediction(args.prediction)
    stopped = STOPPED_BELOW_RAD_S if args.stopped_below is None else args.stopped_below
    if not stopped > 0:
        raise InputError("--stopped-below must be positive")
    return st, Options(by=args.by, level=args.level, stopped_below=stopped,
                       slope_model=slope_model, field_t_per_a=t_per_a)
