"""One catalogue row per (board, run) of a decoded capture."""

from __future__ import annotations

import datetime as dt
import json
import math
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from slipless.errors import InputError

Key = tuple[int, int]


def utc(ns: int | None) -> str | None:
    if ns is None or ns <= 0:
        return None
    return dt.datetime.fromtimestamp(ns / 1e9, dt.UTC).isoformat(timespec="milliseconds")


def run_rows(run: Any, capture: str, sha: str, mirror: str | None,
             prediction: Path | None = None) -> list[dict[str, Any]]:
    """Rows for every run that holds samples (idle runs are left out)."""
    header = (run.metadata()[0].get("header") or {}) if run.sources else {}
    loss = {(r["board"], r["run"]): r for r in run.loss_document().get("runs", [])}
    clocks = run.clocks()
    spans = _wall_spans(run.frames())
    pulse_runs = run.pulse_runs()
    rig = header.get("rig") if prediction is None else None
    now = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
    rows = []
    for key, state in sorted(run.runs.items()):
        if not state.samples:
            continue
        first, last = spans.get(key, (None, None))
        row: dict[str, Any] = {
            "capture": capture, "sha256": sha, "mirror": mirror, "board": key[0], "run": key[1],
            "label": _text(header.get("label")), "operator": _text(header.get("operator")),
            "amplifier": _text(header.get("amplifier")),
            "first_utc": utc(first), "last_utc": utc(last),
            "duration_s": None if first is None or last is None else (last - first) / 1e9,
            "streams": _streams(state), "tick_hz": float(state.tick_hz) or None,
            "samples": int(state.samples), "scanned_utc": now,
            **_loss(loss.get(key)), **_clock(clocks.get(key)),
            **_fit([rd for rd in pulse_runs if (rd.board, rd.run) == key], prediction,
                   rig if isinstance(rig, dict) else None)}
        rows.append(row)
    return rows


def _text(v: Any) -> str | None:
    return None if v in (None, "") else str(v)


def _wall_spans(frames: dict[str, np.ndarray]) -> dict[Key, tuple[int, int]]:
    """First and last laptop receive time of each run (frames with no receive
    time, as the mirror's, carry none)."""
    ok = frames["rx_wall_ns"] > 0
    b, r, ns = frames["board"][ok], frames["run"][ok], frames["rx_wall_ns"][ok]
    spans = {}
    for key in {(int(x), int(y)) for x, y in zip(b, r)}:
        sel = ns[(b == key[0]) & (r == key[1])]
        spans[key] = (int(sel.min()), int(sel.max()))
    return spans


def _streams(state: Any) -> str:
    """name:rate per stream, the rate from the descriptor's period in board ticks."""
    hz = state.tick_hz or 1_000_000
    return ", ".join(f"{s.name}:{hz / s.period_us:g}" if s.period_us else f"{s.name}:?"
                     for _, s in sorted(state.streams.items()))


def _loss(doc: dict[str, Any] | None) -> dict[str, Any]:
    if doc is None:
        return {}
    frac = doc.get("loss_fraction")
    return {"frames_expected": doc.get("frames_expected"),
            "frames_received": doc.get("frames_received"),
            "frames_recovered": doc.get("frames_recovered"), "frames_lost": doc.get("frames_lost"),
            "loss_percent": None if frac is None else 100.0 * float(frac)}


def _clock(clock: Any) -> dict[str, Any]:
    model = getattr(clock, "model", None)
    if model is None:
        return {}
    return {"clock_bound_ms": 1e3 * float(model.uncertainty_s), "clock_basis": model.basis}


def _fit(pulse_runs: list[Any], prediction: Path | None,
         rig: dict[str, Any] | None) -> dict[str, Any]:
    """This run's own pulse fit; nothing when it has no usable pulses. The
    prediction: the file given, else the rig the capture's header keeps."""
    if not pulse_runs:
        return {}
    if prediction is None and rig is not None:
        with tempfile.TemporaryDirectory() as tmp:  # the analysis reads a prediction file
            kept = Path(tmp) / "rig.json"
            kept.write_text(json.dumps(rig))
            return _fit(pulse_runs, kept, None)
    from slipless.pulses.analysis import analyse
    from slipless.run import pulse_settings

    try:
        a = analyse(pulse_runs, *pulse_settings(prediction=prediction))
    except InputError:  # no pulses, or too few to fit
        return {}
    k = a.fit.index("d")
    out = {"pulses": len(a.used), "d": _num(a.fit.coef[k]), "d_se": _num(a.fit.se[k]),
           "d_unit": a.unit("d")}
    if a.ratio is not None:
        out |= {"ratio": _num(a.ratio.ratio), "ratio_se": _num(a.ratio.se)}
    return out


def _num(x: Any) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None
