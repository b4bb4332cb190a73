"""A Run's noise: every stream's spectrum and Allan deviation, and, when the run
has coil pulses, the sensitivity of its pulse fit against the number of pulses."""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from slipless.errors import InputError
from slipless.noise.allan import ONE_SIGMA
from slipless.noise.sensitivity import Sensitivity, read_prediction, sensitivity
from slipless.noise.streams import DEFAULT_BAND_HZ, StreamNoise, stream_noise


@dataclass
class Noise:
    streams: list[StreamNoise]
    sensitivity: Sensitivity | None
    sensitivity_note: str  # why there is none, or ""
    band_hz: tuple[float, float]
    level: float  # of the Allan intervals
    reach_level: float  # of the smallest resolvable d and b


def check_options(band_hz: tuple[float, float], level: float, reach_level: float,
                  window_s: tuple[float, float] | None) -> None:
    lo, hi = band_hz
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 <= lo < hi):
        raise InputError(f"band {lo:g}:{hi:g} Hz: need 0 <= LOW < HIGH")
    if not 0 < level < 1:
        raise InputError(f"interval level {level:g}: give a fraction such as 0.683")
    if not 0.5 <= reach_level < 1:
        raise InputError(f"level {reach_level:g}: give a confidence level such as 0.95")
    if window_s is not None and not (math.isfinite(window_s[0]) and math.isfinite(window_s[1])
                                     and window_s[0] < window_s[1]):
        raise InputError(f"window {window_s[0]:g}:{window_s[1]:g} s: need START < END")


def analyse(run: Any, streams: list[str] | None = None, nperseg: int | None = None,
            band_hz: tuple[float, float] = DEFAULT_BAND_HZ, level: float = ONE_SIGMA,
            window_s: tuple[float, float] | None = None, analysis: Any = None,
            pulses: bool = True, pulse_options: dict[str, Any] | None = None,
            prediction: Path | str | dict[str, Any] | None = None,
            reach_level: float = 0.95, pulses_required: bool = False) -> Noise:
    """The noise of a Run (slipless.run.Run). analysis: a pulses.Analysis already
    made from it (else made here with pulse_options, unless pulses=False);
    prediction: `slipless predict --json` output (a path, or its "results").
    A run whose pulses cannot be analysed gets a note instead of a sensitivity,
    unless pulses_required, when the reason is raised."""
    check_options(band_hz, level, reach_level, window_s)
    chosen = _channels(run, streams)
    out = [stream_noise(ch, run.runs[(b, r)].tick_hz, nperseg, band_hz, level, window_s)
           for (b, r, _), ch in chosen]
    pred = prediction if isinstance(prediction, dict) or prediction is None else \
        read_prediction(Path(prediction))
    sens, note = _sensitivity(run, analysis, pulses, pulse_options or {}, pred, reach_level,
                              pulses_required)
    return Noise(out, sens, note, band_hz, level, reach_level)


def _channels(run: Any, names: list[str] | None) -> list[tuple[tuple[int, int, int], Any]]:
    have = sorted(run.channels.items())
    if not have:
        raise InputError("no sample streams in the inputs")
    if not names:
        return have
    known = {ch.info.name for _, ch in have}
    unknown = [n for n in names if n not in known]
    if unknown:
        raise InputError(f"stream {unknown[0]!r} not found (streams: {', '.join(sorted(known))})")
    return [(k, ch) for k, ch in have if ch.info.name in names]


def _sensitivity(run: Any, analysis: Any, pulses: bool, options: dict[str, Any],
                 pred: dict[str, Any] | None, level: float, required: bool
                 ) -> tuple[Sensitivity | None, str]:
    if analysis is None and not pulses:
        return None, "not asked for"
    try:
        if analysis is None:
            analysis = run.pulses(**options)
        return sensitivity(analysis, pred, level), ""
    except InputError as exc:  # a run without usable pulses still has its noise
        if required:
            raise
        return None, str(exc)
