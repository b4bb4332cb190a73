"""Welch power spectral density over a stream's gap-free spans.

Every span long enough for one Welch segment goes through scipy.signal.welch
(Hann window, half overlap, each segment's mean removed, one-sided density in
unit^2/Hz: P. D. Welch, IEEE Trans. Audio Electroacoust. AU-15, 70-73, 1967);
the spans' spectra are joined weighted by their segment counts, which makes the
result the Welch average over every segment lying wholly inside a span. A long
span goes through in chunks that overlap by one segment less one step: each
segment is still used once, and memory stays at a chunk's.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from slipless.errors import InputError
from slipless.noise.spans import Spans

DEFAULT_SEGMENT_S = 4.0  # the Welch segment aimed at: 0.25 Hz bins [common practice]
MIN_NPERSEG = 16  # below this a spectrum has too few bins to say anything
CHUNK = 1 << 22  # samples per welch() call on a long span (32 MB of float64)


@dataclass
class Psd:
    freq_hz: np.ndarray
    density: np.ndarray  # one-sided, unit^2/Hz
    nperseg: int
    segments: int  # Welch segments averaged
    samples: int  # in the spans that gave segments
    rate_hz: float

    @property
    def asd(self) -> np.ndarray:
        """Amplitude spectral density, unit/sqrt(Hz)."""
        return np.sqrt(self.density)

    def floor(self, band_hz: tuple[float, float]) -> float | None:
        """Median amplitude spectral density over the band (DC left out), or None
        when no bin falls in it."""
        f = self.freq_hz
        pick = (f >= band_hz[0]) & (f <= band_hz[1]) & (f > 0)
        return float(np.median(self.asd[pick])) if pick.any() else None

    def variance(self) -> float:
        """The density integrated over frequency: the mean-removed variance (Parseval)."""
        return float(np.sum(self.density) * (self.rate_hz / self.nperseg))


def choose_nperseg(longest: int, rate_hz: float, nperseg: int | None = None) -> int:
    """The given segment length, checked; else the power of two nearest
    DEFAULT_SEGMENT_S of samples that fits the longest span."""
    if nperseg is not None:
        if nperseg < MIN_NPERSEG:
            raise InputError(f"--nperseg {nperseg}: give {MIN_NPERSEG} or more")
        return nperseg
    aim = 2 ** max(round(math.log2(max(rate_hz * DEFAULT_SEGMENT_S, 1.0))), 4)
    fits = 2 ** int(math.log2(longest)) if longest >= 1 else 0
    return max(min(aim, fits), MIN_NPERSEG)


def welch_spans(spans: Spans, nperseg: int) -> Psd | None:
    """The Welch PSD over every span of at least nperseg samples; None when none is."""
    step = nperseg - nperseg // 2
    total: np.ndarray | None = None
    freq = np.zeros(0)
    segments = samples = 0
    per_chunk = max(1, CHUNK // step)
    for k in spans.at_least(nperseg):
        lo, n = int(spans.lo[k]), int(spans.counts[k])
        count = (n - nperseg) // step + 1
        samples += n
        for j0 in range(0, count, per_chunk):
            j1 = min(count, j0 + per_chunk)
            x = spans.store.values(lo + j0 * step, lo + (j1 - 1) * step + nperseg)
            freq, pxx = signal.welch(x, spans.rate_hz, window="hann", nperseg=nperseg,
                                     noverlap=nperseg - step, detrend="constant")
            total = pxx * (j1 - j0) if total is None else total + pxx * (j1 - j0)
            segments += j1 - j0
    if total is None:
        return None
    return Psd(freq, total / segments, nperseg, segments, samples, spans.rate_hz)
