"""`slipless report`: one self-contained HTML page about a run, to open or send on.

Sections: the run, completeness (frame account, gaps, timeline, loss against
rotor angle), the board's health from its STATUS frames, the clock model and
its residuals, the pulse-averaged waveform per condition (and one raw pulse),
the per-condition table and the fit against the prediction, the noise of each
stream and the reach of the pulse fit, and the safety notes. Each
section is made from the same analyses as `loss`, `align`, `pulses` and
`noise`; a section whose analysis cannot run says why instead.
"""

from __future__ import annotations

import datetime as dt
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from slipless.errors import InputError
from slipless.pulses.fit import SE_NAMES
from slipless.report.html import esc, img_bytes, num, page, png, table, write_file
from slipless.report.plotting import pyplot
from slipless.version import __version__

SAFETY = (
    "Spinning platforms: secure every part, balance the rotor, guard it, limit its speed, "
    "and stop it before anyone handles it.",
    "Lithium batteries on a rotor take mechanical stress and can catch fire: fuse and "
    "protect them, and inspect them between runs.",
    "Coils kick back when switched off (use a flyback diode or TVS) and heat at long duty "
    "cycles; keep within the H-bridge's ratings. The board must leave the coil off at boot, "
    "on stop, on error and after a lost link.",
    "Defer to local codes, institutional safety rules and licensed practice.",
)


@dataclass
class ReportData:
    inputs: list[Path]
    mirrors: list[Path]
    loss_doc: dict[str, Any] | None = None
    loss_png: bytes | None = None
    clocks: dict[tuple[int, int], Any] = field(default_factory=dict)
    residuals: dict[tuple[int, int], tuple[np.ndarray, np.ndarray]] = field(default_factory=dict)
    pulses: Any = None  # pulses.Analysis
    runs: list[Any] = field(default_factory=list)  # pulses_data.RunData
    notes: dict[str, str] = field(default_factory=dict)  # section -> why it is empty
    idle: set[tuple[int, int]] = field(default_factory=set)  # (board, run) with no run started
    channels: tuple[str, str] = ("cap_amp", "coil_current")  # signal, current
    noise: Any = None  # noise.Noise
    status: dict[str, np.ndarray] = field(default_factory=dict)  # Run.status() columns
    unchecked: list[Path] = field(default_factory=list)  # from a decode folder, no SHA-256 kept
    sampled: set[tuple[int, int]] = field(default_factory=set)  # (board, run) holding samples


def collect(run: Any, prediction: Path | None = None,
            calibration: Path | None = None, streams: dict[str, Any] | None = None
            ) -> ReportData:
    """Every section's analysis from one decoded Run (run.open_run); a calibration
    file corrects the streams first. streams: the pulse analysis' stream names,
    as `slipless pulses` takes them (signal, current, rotation, rotation_rate)."""
    data = ReportData([s.path for s in run.sources if s.kind != "mirror"],
                      [s.path for s in run.sources if s.kind == "mirror"])
    if calibration is not None:
        run.calibrate(calibration)
    _loss(data, run)
    data.status = run.status()
    data.sampled = {k for k, state in run.runs.items() if state.samples}
    _clock(data, run)
    _pulses(data, run, prediction, calibration, streams or {})
    _noise(data, run, prediction)
    return data


def _noise(d: ReportData, run: Any, prediction: Path | None) -> None:
    from slipless.noise import analyse

    try:
        d.noise = analyse(run, analysis=d.pulses, pulses=False, prediction=prediction)
    except InputError as exc:
        d.notes["noise"] = f"no noise analysis: {exc}"


def _loss(d: ReportData, run: Any) -> None:
    from slipless.loss.account import analyse
    from slipless.loss.plot import plot
    from slipless.loss.report import document

    facts = run.facts
    accounts = analyse(facts)
    d.loss_doc = document(accounts, facts, None)
    d.idle = {(r["board"], r["run"]) for r in d.loss_doc["runs"] if r["idle"]}
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "loss.png"
        plot([a for a in accounts if (a.board, a.run) not in d.idle] or accounts, path)
        d.loss_png = path.read_bytes()


def _clock(d: ReportData, run: Any) -> None:
    from slipless.align.aligned import _extents, fit_run

    col = run.collected
    for key, extent in sorted(_extents(col).items()):
        c = fit_run(col, key, extent, 600.0)
        d.clocks[key] = c
        times = col.sink.times.get(key)
        if c.model is None or times is None:
            continue
        rows = times.rows()
        rows = rows[rows[:, 1] >= 0][:, :2]
        above = (rows[:, 1] - c.model.laptop_ns(rows[:, 0])) / 1e6
        d.residuals[key] = (rows[:, 0] / c.tick_hz, above)
    if not any(c.model is not None for c in d.clocks.values()):
        d.notes["clock"] = "no laptop receive times in the inputs: no clock model"


def _pulses(d: ReportData, run: Any, prediction: Path | None,
            calibration: Path | None = None, streams: dict[str, Any] | None = None) -> None:
    from slipless.pulses.analysis import analyse, settings_from_args
    from slipless.pulses.options import namespace

    given = {k: v for k, v in (streams or {}).items() if v is not None}
    st, opt = settings_from_args(namespace(prediction=prediction, calibration=calibration,
                                           **given))
    d.channels = (st.signal, st.current)
    d.runs = run.pulse_runs()
    try:
        d.pulses = analyse(d.runs, st, opt)
    except InputError as exc:
        d.notes["pulses"] = f"no pulse analysis: {exc}"


# ---- sections ------------------------------------------------------------------------------
def _recorded(path: Path) -> str:
    """`: recorded <UTC date>, label "...", ...` from a capture's header ("" else)."""
    from slipless.io.capture_meta import capture_header

    meta = capture_header(path) or {}
    parts = []
    wall = meta.get("created_wall_ns")
    if isinstance(wall, int) and wall > 0:
        parts.append("recorded " + dt.datetime.fromtimestamp(wall / 1e9, dt.UTC)
                     .strftime("%Y-%m-%d %H:%M:%S UTC"))
    for key, what in (("label", "label"), ("operator", "by"), ("amplifier", "amplifier")):
        if meta.get(key):
            parts.append(f"{what} \"{meta[key]}\"")
    if isinstance(meta.get("rig"), dict):
        parts.append("rig prediction kept")
    return (": " + ", ".join(parts)) if parts else ""


def _summary(d: ReportData) -> str:
    doc = d.loss_doc or {}
    rows = [(r["board"], r["run"], r["frames_expected"], r["samples_expected"],
             "yes" if r["end_seen"] else "no", len(r.get("gaps") or [])) for r in doc.get("runs", [])]
    files = "".join(f"<li>{esc(p)}{esc(_recorded(p))}</li>" for p in d.inputs)
    files += "".join(f"<li>{esc(p)} (board mirror)</li>" for p in d.mirrors)
    pulses = "" if d.pulses is None else (
        f"<p>{len(d.pulses.pulses)} coil pulses found, {len(d.pulses.used)} used.</p>")
    if d.unchecked:
        files += ("<li class=\"note\">not checked against a SHA-256 (the decode folder's "
                  "inputs.json records none): " + ", ".join(esc(p) for p in d.unchecked)
                  + "</li>")
    return (f"<p>Inputs:</p><ul>{files}</ul>"
            + table(("board", "run", "frames", "samples", "end of run seen", "gaps"), rows)
            + pulses)


def _completeness(d: ReportData) -> str:
    doc = d.loss_doc or {}
    out = []
    idle = [r for r in doc.get("runs", []) if (r["board"], r["run"]) in d.idle]
    for r in doc.get("runs", []):
        if (r["board"], r["run"]) in d.idle:
            continue
        terms = (("received live", "frames_received"), ("recovered by resend", "frames_recovered_resend"),
                 ("recovered from the mirror", "frames_recovered_mirror"),
                 ("lost on the radio", "frames_lost"), ("dropped on the board", "frames_dropped_board"))
        exp = r["frames_expected"] or 1
        rows = [(name, r[k], f"{100 * r[k] / exp:.2f} %") for name, k in terms]
        closes = ('<span class="ok">the account closes</span>' if r["closes"]
                  else '<span class="bad">the account does not close</span>')
        out.append(f"<h3>board {r['board']} run {r['run']}: {r['frames_expected']:,} frames "
                   f"expected; {closes}</h3>" + table(("term", "frames", "share"), rows))
        out.append(_gaps(r.get("gaps") or []) + _angle(r.get("angle")))
    if idle:
        out.append("<p class=\"note\">Frames sent while no run was started (status while "
                   "idling), outside the accounts above: "
                   + "; ".join(f"board {r['board']} run {r['run']}: {r['frames_expected']:,} "
                               f"frame{'s' if r['frames_expected'] != 1 else ''}" for r in idle)
                   + ".</p>")
    if d.loss_png:
        out.append("<p>Timeline of the frames that did not arrive live (disconnections shaded) "
                   "and the share not received live per angle sector:</p>"
                   + img_bytes(d.loss_png, "loss timeline and loss against angle"))
    return "".join(out)


def _gaps(gaps: list[dict[str, Any]]) -> str:
    """The gaps by cause and the largest few; a line saying so when there are none."""
    if not gaps:
        return "<p>No gaps in what arrived live.</p>"
    causes: dict[str, int] = {}
    for g in gaps:
        causes[g["cause"]] = causes.get(g["cause"], 0) + g["frames"]
    big = sorted(gaps, key=lambda g: -g["frames"])[:6]
    return ("<p>Gaps in what arrived live, by likely cause: "
            + ", ".join(f"{esc(k)} {v} frames" for k, v in sorted(causes.items()))
            + ". The largest:</p>"
            + table(("frames (seq)", "count", "board s", "lasted s", "cause", "by resend",
                     "from mirror", "lost", "dropped"),
                    [(f"{g['first_seq']}-{g['last_seq']}", g["frames"],
                      (g["board_start_us"] or 0) / 1e6, g["duration_s"], g["cause"],
                      g["recovered_resend"], g["recovered_mirror"], g["lost"],
                      g["dropped_board"]) for g in big]))


def _angle(angle: dict[str, Any] | None) -> str:
    """The worst angle sector, when the loss account names one (none: nothing missed)."""
    if not angle:
        return ""
    worst = angle.get("worst_deg")
    if not isinstance(worst, int | float) or isinstance(worst, bool):
        return "<p>Loss against rotor angle: no frame with an angle was missed, so no worst sector.</p>"
    return f"<p>Loss against rotor angle: the worst sector is around {worst:.0f} degrees.</p>"


def _clock_section(d: ReportData) -> str:
    if "clock" in d.notes:
        return f"<p class=\"note\">{esc(d.notes['clock'])}</p>"
    rows = []
    for (b, r), c in sorted(d.clocks.items()):
        m = c.model
        if m is None and (b, r) in d.idle:
            continue
        if m is None:
            rows.append((b, r, "-", "-", "-", "-", "-", "; ".join(c.notes)))
            continue
        rows.append((b, r, f"{m.skew_ppm:+.3f}", f"{m.offset_s():.6f}",
                     f"{m.delay_p50_s * 1e3:.2f} / {m.delay_p95_s * 1e3:.2f}",
                     f"{m.uncertainty_s * 1e3:.3f}", f"{m.kept}/{m.exchanges}", m.basis))
    out = ("<p>Board time mapped to the laptop's clock: skew (+ = board clock fast), offset at "
           "the first timed frame, the one-way delay of frames above the fit (median / 95th "
           "percentile) and a bound on the mapped time's error over the run.</p>"
           + table(("board", "run", "skew ppm", "offset s", "delay ms", "bound ± ms",
                    "syncs kept", "basis"), rows))
    if d.residuals:
        plt = pyplot()

        fig, ax = plt.subplots(figsize=(10, 3.2), layout="constrained")
        for (b, r), (t, above) in sorted(d.residuals.items()):
            ax.scatter(t, np.maximum(above, 1e-3), s=3, alpha=0.5, label=f"board {b} run {r}")
        ax.set_yscale("log")
        ax.set_xlabel("board time (s)")
        ax.set_ylabel("delay above the fit (ms)")
        ax.set_title("clock residuals: each frame's receive time above the fitted clock")
        ax.legend(fontsize=8)
        out += png(fig)
    return out


def _no_pulses(d: ReportData) -> str:
    return f"<p class=\"note\">{esc(d.notes.get('pulses', 'no pulses'))}</p>"


def _traces(d: ReportData) -> str:
    if d.pulses is None:
        return _no_pulses(d)
    from slipless.report.waveforms import section

    return section(d.pulses, d.runs, d.channels)


def _health(d: ReportData) -> str:
    from slipless.report.health import section

    return section(d.status, d.sampled or None)


def _conditions(d: ReportData) -> str:
    a = d.pulses
    if a is None:
        return _no_pulses(d)
    from slipless.pulses.plots import against_model, conditions
    from slipless.pulses.report import tables

    t = tables(a)
    c = t["conditions"]
    rows = list(zip(c["condition"], c["rotation_rad_s"], c["current_A"], c["n"],
                    [v * 1e6 for v in c["mean_V"]], [v * 1e6 for v in c["se_V"]]))
    f = t["fit"]
    fit_rows = list(zip(f["term"], f["meaning"], f["estimate"], f["unit"], f["se"], f["ci_low"],
                        f["ci_high"]))
    ck = t["checks"]
    out = ("<p>Mean pulse response per condition (baseline removed):</p>"
           + table(("condition", "rotation rad/s", "current A", "pulses", "mean µV", "se µV"), rows)
           + f"<p>Factorial fit (confidence level {a.options.level:.0%}, "
           f"{esc(SE_NAMES[a.fit.errors.kind])}); d is the field x "
           "rotation term the model predicts, b the part that flips with the field alone:</p>"
           + table(("term", "meaning", "estimate", "unit", "se", "low", "high"), fit_rows)
           + table(("check", "statistic", "df", "p", "meaning"),
                   list(zip(ck["check"], ck["statistic"], ck["df"], ck["p_value"], ck["meaning"]))))
    if a.ratio is not None:
        r = a.ratio
        out += (f"<p>Against the prediction: d / model = <b>{num(r.ratio)}</b> "
                f"({num(r.low)} to {num(r.high)}); the model's d is {num(r.predicted)} "
                f"V/(A rad/s). The model is a model, not a verdict: what a co-rotating amplifier "
                "sees depends on where its circuit closes.</p>")
    with tempfile.TemporaryDirectory() as tmp:
        out += img_bytes(conditions(a, Path(tmp) / "c.png").read_bytes(), "conditions")
        if a.predicted_d is not None:
            out += img_bytes(against_model(a, Path(tmp) / "m.png").read_bytes(), "against model")
    return out


def _noise_section(d: ReportData) -> str:
    if d.noise is None:
        return f"<p class=\"note\">{esc(d.notes.get('noise', 'no noise analysis'))}</p>"
    from slipless.noise import figure, summary

    doc = summary(d.noise)
    rows = []
    for st in doc["streams"]:
        t = st.get("terms") or {}
        cells = []
        for k in ("N", "B", "K"):
            term = t.get(k) or {}
            cells.append("-" if term.get("value") is None else
                         f"{num(term['value'])} {term.get('unit', '')}")
        rows.append((st["name"], st["unit"], st["rate_hz"], st["spans"], st["longest_s"],
                     st["floor_asd"], *cells))
    out = ("<p>Per stream, over its gap-free stretches only: the noise floor (median "
           "amplitude spectral density of a Welch spectrum, unit/&radic;Hz) and the terms of "
           "IEEE Std 952's Allan variance method read off the overlapping Allan deviation "
           "(N at slope &minus;1/2, B the minimum / 0.664, K at slope +1/2; meaningful on a "
           "quiet stretch: `slipless noise --window` picks one).</p>"
           + table(("stream", "unit", "rate Hz", "stretches", "longest s", "floor /\u221aHz",
                    "N", "B", "K"), rows))
    sens = doc.get("sensitivity") or {}
    notes = sens.get("notes") or []
    if sens.get("reach"):
        out += ("<p>Reach of the pulse fit: the smallest |d| and |b| told from zero at 95 % "
                "against the number of pulses, from the Allan deviation of the fit's residuals"
                + (", with the predicted d and the Earth's part of b (which lands in b, "
                   "beside the field artifact)" if sens.get("predicted_d") is not None else "")
                + ".</p>")
    out += "".join(f'<p class="note">{esc(n)}</p>' for n in notes)
    return out + png(figure(d.noise))


def _safety() -> str:
    items = "".join(f"<li>{esc(s)}</li>" for s in SAFETY)
    return f'<div class="safety"><ul>{items}</ul></div>'


def render(d: ReportData, title: str, made: str | None = None) -> str:
    """The page; `made` replaces the date line (the demo gives its seed, so the same
    seed gives the same page)."""
    sections = [("summary", "The run", _summary(d)),
                ("completeness", "Completeness", _completeness(d)),
                ("health", "Board health", _health(d)),
                ("clock", "Clock model", _clock_section(d)),
                ("traces", "Averaged pulse waveforms", _traces(d)),
                ("conditions", "Conditions and the prediction", _conditions(d)),
                ("noise", "Noise and sensitivity", _noise_section(d)),
                ("safety", "Safety notes", _safety())]
    if made is None:
        made = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    return page(title, f"made by slipless {__version__}: {made}", sections,
                "slipless: every frame accounted for; numbers with their uncertainty.")


def write(d: ReportData, out: Path, title: str = "slipless run report",
          made: str | None = None) -> Path:
    return write_file(out, render(d, title, made))
