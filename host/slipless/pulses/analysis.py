"""`slipless pulses`: coil pulses -> responses -> conditions -> the factorial fit.

Steps: load runs (pulses_data), find pulses and windows (pulses_find), reduce
each pulse to a response (pulses_reduce), label by field sign and rotation
(pulses_group), fit response = a + b*s + c*w + d*s*w (pulses_fit), then write
tables and plots (pulses_report, pulses_plots). The field x rotation term d
is the induction signal; b (flips with the field, not with rotation) is the
artifact; stopped runs are the control. Errors are pulse-level (HC2-BM) or,
with errors="block", block-level (CR2-BM over complete cycles of the
conditions, or over runs); both are computed when there are blocks, and a
check says when the block-level error is the larger.
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
    SE_KIND,
    Fit,
    Ratio,
    Test,
    against_prediction,
    block_errors,
    block_excess,
    equal_slopes,
    factorial,
    linear_slopes,
    slope,
    t_test,
    two_sided_p,
)
from slipless.pulses.group import (
    STOPPED_BELOW_RAD_S,
    RotationGroup,
    condition_label,
    mean_se,
    rotation_groups,
)
from slipless.pulses.reduce import (
    ROTATION_NAMES,
    PulseResult,
    RunPlan,
    Settings,
    plan_run,
    reduce_run,
    waveform_grid,
)

SCATTER_P = 1e-3  # pulse-to-pulse scatter beyond the within-pulse noise at this p is flagged
ARTIFACT_P = 0.01  # a segment's field slope off the induction term at this p is flagged
# [common practice: 1 % for a flag raised on every segment of every run]
ERRORS = ("pulse", "block")
BLOCKS = ("cycle", "run")


@dataclass
class Options:
    by: str = "current"  # s = coil current in A, or "sign" (+1/-1)
    level: float = 0.95
    stopped_below: float = STOPPED_BELOW_RAD_S
    slope_model: float | None = None  # predicted V per (A rad/s), from `slipless predict --json`
    field_t_per_a: float | None = None
    errors: str = "pulse"  # or "block": intervals and tests from the block-level errors
    blocks: str = "cycle"  # a block: one complete cycle of the conditions, or one run
    calibration: Any = None  # calib.file.Calibration: its scale errors join d's (and d/model's)
    calibrated: tuple[str, str | None] = ("cap_amp", None)  # its signal and rate streams
    assumed_v_per_c: float | None = None  # the prediction's amplifier gain, V per C at its input


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
    blocks: np.ndarray | None = None  # block number per used pulse
    block_note: str = ""  # why there are no block-level errors
    calibration: dict[str, Any] | None = None  # d's error with the calibration's added

    @property
    def s_unit(self) -> str:
        return "A" if self.options.by == "current" else "sign"

    def unit(self, term: str) -> str:
        per_s = "/A" if self.options.by == "current" else ""
        return {"a": "V", "b": f"V{per_s}", "c": "V/(rad/s)",
                "d": f"V/({'A ' if per_s else ''}rad/s)"}[term]


def _check_choices(errors: str, blocks: str) -> None:
    if errors not in ERRORS or blocks not in BLOCKS:
        raise InputError(f"--errors is one of {', '.join(ERRORS)}; --blocks one of "
                         f"{', '.join(BLOCKS)}")


def analyse(runs: list[RunData], st: Settings, opt: Options) -> Analysis:
    _check_choices(opt.errors, opt.blocks)
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
    _block_errors(a)
    _compare(a)
    _by_rotation(a)
    excess = block_excess(fit)
    if excess is not None:
        a.checks.append(excess)
    _segments(a)
    return a


def block_numbers(a: Analysis, how: str) -> np.ndarray:
    """Block of each used pulse. "run": one block per board and run. "cycle": in time
    order, stretches of consecutive pulses at one rotation in one run, gathered until
    every condition (field sign x rotation) is in; a last incomplete cycle joins the
    one before, so every block holds every condition."""
    runs = [(p.board, p.run) for p in a.used]
    if how == "run":
        keys = sorted(set(runs))
        return np.array([keys.index(r) for r in runs], dtype=int)
    group = np.zeros(len(a.used), dtype=int)
    for k, g in enumerate(a.groups):
        group[g.members] = k
    order = sorted(range(len(a.used)), key=lambda i: (runs[i], a.used[i].onset_s))
    every = {(int(group[i]), a.used[i].polarity) for i in order}
    out = np.zeros(len(a.used), dtype=int)
    block, stretch = 0, None
    seen: set[tuple[int, int]] = set()
    for i in order:
        if (runs[i], group[i]) != stretch and seen >= every:
            block, seen = block + 1, set()
        stretch = (runs[i], group[i])
        seen.add((int(group[i]), a.used[i].polarity))
        out[i] = block
    if block and seen != every:
        out[out == block] = block - 1
    return out


def _block_errors(a: Analysis) -> None:
    opt, fit = a.options, a.fit
    a.blocks = block_numbers(a, opt.blocks)
    count = int(a.blocks.max()) + 1
    what = "complete cycles of the conditions" if opt.blocks == "cycle" else "runs"
    if count < 2:
        a.block_note = f"block-level errors need at least two blocks ({what}); found {count}"
    else:
        fit.block = block_errors(fit, a.blocks)
        if not np.all(np.isfinite(fit.block.se)):
            fit.block = None
            a.block_note = (f"block-level errors undefined: a block ({opt.blocks}) holds all "
                            "the pulses that fix some term")
    if opt.errors == "block":
        if fit.block is None:
            raise InputError(f"--errors block: {a.block_note}")
        fit.use_block = True


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
    d, se, dof = float(fit.coef[k]), float(fit.se[k]), float(fit.dofs[k])
    a.checks.append(t_test("d differs from zero", d / se, dof,
                           "small p: a field x rotation term is present"))
    _calibration(a)
    if opt.slope_model is None:
        return
    pred = opt.slope_model
    amp = None if opt.calibration is None else opt.calibration.amplifier
    if amp is not None and opt.assumed_v_per_c:
        # the measured charge gain replaces the gain the prediction assumed
        pred *= amp.gain_v_per_c / opt.assumed_v_per_c
    if opt.by == "sign":
        pred *= float(np.mean(np.abs([p.current_a for p in a.used])))
    if not math.isfinite(pred) or pred == 0:
        return
    a.predicted_d = pred
    a.ratio = against_prediction(fit, pred, opt.level)
    if opt.calibration is not None:  # the calibration's own uncertainty widens d / model
        from slipless.calib.apply import ratio_se

        r = a.ratio
        se_r = ratio_se(r.ratio, r.se, opt.calibration, *opt.calibrated)
        half = (r.high - r.low) / 2 * (se_r / r.se if r.se > 0 else 1.0)
        a.ratio = Ratio(r.predicted, r.ratio, se_r, r.ratio - half, r.ratio + half)
    a.checks.append(t_test("d agrees with the model", (d - pred) / se, dof,
                           "small p: the measured term differs from the model's value"))


def _calibration(a: Analysis) -> None:
    """d's standard error with the calibration's scale errors added (quadrature)."""
    cal = a.options.calibration
    if cal is None:
        return
    from slipless.calib.apply import d_relative_se, model_relative_se

    k = a.fit.index("d")
    d, se = float(a.fit.coef[k]), float(a.fit.se[k])
    rel = d_relative_se(cal, *a.options.calibrated)
    a.calibration = {"d_se_fit": se, "d_se": math.hypot(se, abs(d) * rel["total"]),
                     "d_relative_se": rel, "model_relative_se": model_relative_se(cal),
                     "streams": sorted(cal.streams), "source": cal.source,
                     "amplifier_gain_v_per_c": None if cal.amplifier is None
                     else cal.amplifier.gain_v_per_c}


def _by_rotation(a: Analysis) -> None:
    """Field slope per rotation group: does the field response depend on rotation?"""
    fit = a.fit
    b, d = fit.coef[fit.index("b")], fit.coef[fit.index("d")]
    rates, slopes, ses = [], [], []
    for g in a.groups:
        idx = g.members
        if len(set(a.s[idx] > 0)) < 2 or idx.size < 3:
            continue
        sl = slope(a.s[idx], a.y[idx])
        a.rotation_rows.append({"rotation": g.label, "rotation_rad_s": g.rate_rad_s,
                                "n": int(idx.size), "field_slope": sl.value, "se": sl.se,
                                "model_slope": float(b + d * g.rate_rad_s)})
        rates.append(g.rate_rad_s)
        slopes.append(sl.value)
        ses.append(sl.se)
    if len(slopes) >= 2:
        a.checks.append(equal_slopes(np.array(slopes), np.array(ses)))
    if len(slopes) >= 3:
        a.checks.append(linear_slopes(np.array(slopes), np.array(ses), np.array(rates)))


def _segments(a: Analysis) -> None:
    """Per run and rotation group: is there a field response beyond the induction term?"""
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
        tested = [r for r in a.segments[len(a.segments) - len(flags):]
                  if r["flag"] != "control" and math.isfinite(r["p_artifact"])]
        low = min(tested, key=lambda r: r["p_artifact"], default=None)
        a.runs.append({"board": board, "run": run, "pulses": n_all, "used": n_used,
                       "dropped": n_all - n_used, "flag": worst,
                       "p_artifact": math.nan if low is None else low["p_artifact"],
                       "dof": math.nan if low is None else low["dof"], "se_kind": SE_KIND})


def _segment_row(a: Analysis, board: int, run: int, g: RotationGroup, idx: np.ndarray,
                 d: float) -> dict[str, Any]:
    """The segment's field slope k against H0 k = d w (b = 0 here, d from the whole
    fit): t = (k - d w) / se(k) with the slope's HC2-BM error and degrees of freedom
    (d's own error is common to every segment and left out); flagged at ARTIFACT_P."""
    row: dict[str, Any] = {"board": board, "run": run, "rotation": g.label,
                           "rotation_rad_s": float(np.median(a.w[idx])), "n": int(idx.size),
                           "field_slope": math.nan, "se": math.nan, "dof": math.nan,
                           "induction_part": math.nan, "artifact_part": math.nan,
                           "p_artifact": math.nan, "scatter": math.nan, "flag": "too few",
                           "se_kind": SE_KIND}
    if len(set(a.s[idx] > 0)) < 2 or idx.size < 4:
        return row
    sl = slope(a.s[idx], a.y[idx])
    ind = d * row["rotation_rad_s"]
    art = sl.value - ind
    p_art = two_sided_p(art / sl.se, sl.dof)
    x = np.column_stack([np.ones(idx.size), a.s[idx]])
    resid = a.y[idx] - x @ np.linalg.lstsq(x, a.y[idx], rcond=None)[0]
    within = np.array([a.used[i].se_v for i in idx])
    chi2 = float(np.sum((resid / within) ** 2))
    dof = idx.size - 2
    if g.stopped:
        flag = "control"
    elif p_art < ARTIFACT_P:
        flag = "artifact"
    elif stats.chi2.sf(chi2, dof) < SCATTER_P:
        flag = "scatter"
    else:
        flag = "ok"
    row.update(field_slope=sl.value, se=sl.se, dof=sl.dof, induction_part=ind, artifact_part=art,
               p_artifact=p_art, scatter=chi2 / dof, flag=flag)
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
    return read_prediction_gain(path)[:2]


def read_prediction_gain(path: Path | None) -> tuple[float | None, float | None, float | None]:
    """(d per (A rad/s), field per A, the amplifier's assumed V per C at its input)
    from `slipless predict --json`: gain x 1/Cf for a charge amplifier, gain x
    1/(C + Cin) for a voltage amplifier (the charge C x EMF shared with its input)."""
    if path is None:
        return None, None, None
    try:
        doc = json.loads(path.read_text())
        res, inp = doc["results"], doc.get("inputs", {})
        gain = float(inp.get("gain", 1.0) or 1.0)
        per_c: float | None = None
        if inp.get("feedback_f"):
            per_c = gain / float(inp["feedback_f"])
        else:
            c = float(res.get("capacitance_F") or 0.0) + float(inp.get("input_f") or 0.0)
            per_c = gain / c if c > 0 else None
        return float(res["slope_V_per_A_rad_s"]), float(res["field_T_per_A"]), per_c
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
    slope_model, t_per_a, per_c = read_prediction_gain(args.prediction)
    cal = getattr(args, "calibration", None)
    if cal is not None and not hasattr(cal, "streams"):  # a path: the file, checked
        from slipless.calib.file import load

        cal = load(Path(cal))
    stopped = STOPPED_BELOW_RAD_S if args.stopped_below is None else args.stopped_below
    if not stopped > 0:
        raise InputError("--stopped-below must be positive")
    _check_choices(args.errors, args.blocks)
    return st, Options(by=args.by, level=args.level, stopped_below=stopped,
                       slope_model=slope_model, field_t_per_a=t_per_a, errors=args.errors,
                       blocks=args.blocks, calibration=cal, assumed_v_per_c=per_c,
                       calibrated=(st.signal, st.rotation or next(
                           (n for n in ROTATION_NAMES if cal is not None and n in cal.streams),
                           None)))
