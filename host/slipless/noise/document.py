"""The noise analysis as one JSON-ready dict (`slipless noise --json`, the report):
plain numbers, null wherever a value is missing or not finite."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from slipless.noise.allan import NOISE_NAMES, AllanCurve
from slipless.noise.analysis import Noise
from slipless.noise.gyro import Term
from slipless.noise.sensitivity import Sensitivity
from slipless.noise.streams import StreamNoise

METHODS = {
    "psd": "Welch, Hann window, half overlap, one-sided, over gap-free spans weighted by "
           "segment count",
    "floor": "median amplitude spectral density over the band",
    "allan": "overlapping Allan deviation (NIST SP 1065) over gap-free spans",
    "interval": "chi-square with the edf of SP 1065 Table 5; noise type by lag-1 "
                "autocorrelation",
    "terms": "IEEE Std 952 Annex C: N on the slope -1/2 line at 1 s, B = minimum / 0.664, "
             "K on the slope +1/2 line at 3 s",
    "sensitivity": "Allan deviation of the fit's per-pulse residuals, power-law model, "
                   "se(N) = se(n) sigma(N) / sigma(n); smallest resolvable = z se",
}


def finite(v: Any) -> Any:
    """Floats that are not finite become None; containers are walked."""
    if isinstance(v, dict):
        return {k: finite(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [finite(x) for x in v]
    if isinstance(v, np.ndarray):
        return finite(v.tolist())
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        return float(v) if math.isfinite(v) else None
    return v


def to_dict(noise: Noise) -> dict[str, Any]:
    return finite({
        "band_hz": list(noise.band_hz), "interval_level": noise.level,
        "reach_level": noise.reach_level, "methods": METHODS,
        "streams": [_stream(s) for s in noise.streams],
        "sensitivity": None if noise.sensitivity is None else _sensitivity(noise.sensitivity),
        "sensitivity_note": noise.sensitivity_note,
    })


def _stream(s: StreamNoise) -> dict[str, Any]:
    out: dict[str, Any] = {
        "board": s.board, "run": s.run, "stream": s.stream, "name": s.name, "unit": s.unit,
        "rate_hz": s.rate_hz, "samples": s.samples, "spans": s.spans, "longest_s": s.longest_s,
        "note": s.note, "psd": None, "floor_asd": s.floor, "floor_unit": f"{s.unit}/sqrt(Hz)",
        "allan": None, "terms": None}
    if s.psd is not None:
        out["psd"] = {"nperseg": s.psd.nperseg, "segments": s.psd.segments,
                      "resolution_hz": s.rate_hz / s.psd.nperseg, "variance": s.psd.variance()}
    if s.allan is not None:
        out["allan"] = curve(s.allan)
    if s.gyro is not None:
        out["terms"] = {t.name: _term(t) for t in s.gyro.all()}
    return out


def curve(c: AllanCurve) -> dict[str, Any]:
    return {"tau": c.tau_s.tolist(), "m": c.m.tolist(), "adev": c.adev.tolist(),
            "lo": c.lo.tolist(), "hi": c.hi.tolist(), "edf": c.edf.tolist(),
            "terms": c.terms.tolist(), "noise": [NOISE_NAMES[int(a)] for a in c.alpha],
            "level": c.level}


def _term(t: Term) -> dict[str, Any]:
    return {"value": t.value, "unit": t.unit, "deg_value": t.deg_value, "deg_unit": t.deg_unit,
            "tau_s": None if t.tau_s is None else list(t.tau_s), "note": t.note}


def _sensitivity(s: Sensitivity) -> dict[str, Any]:
    return {
        "pulses": s.pulses, "pulse_rate_hz": s.pulse_rate_hz, "level": s.level, "z": s.z,
        "residual_allan": curve(s.curve),  # tau in pulses
        "model": {"white": s.model[0], "floor": s.model[1], "walk": s.model[2],
                  "white_only": s.white_only},
        "d": s.d, "se_d": s.se_d, "unit_d": s.unit_d, "b": s.b, "se_b": s.se_b, "unit_b": s.unit_b,
        "reach": [{"pulses": r.pulses, "run_s": r.run_s, "d_min": r.d_min, "b_min": r.b_min}
                  for r in s.rows],
        "predicted_d": s.predicted_d, "d_pulses": s.d_pulses, "d_run_s": s.run_s(s.d_pulses),
        "earth_b": s.earth_b, "earth_pulses": s.earth_pulses,
        "earth_run_s": s.run_s(s.earth_pulses), "notes": list(s.notes),
    }
