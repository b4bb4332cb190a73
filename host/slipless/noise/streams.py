"""One stream's noise: its Welch spectrum and floor, its overlapping Allan
deviation and the IEEE Std 952 terms read off it, all over gap-free spans."""

from __future__ import annotations

from dataclasses import dataclass

from slipless.decode.store import ChannelStore
from slipless.noise.allan import ONE_SIGMA, AllanCurve, oadev, octave_ms
from slipless.noise.gyro import GyroTerms, terms
from slipless.noise.psd import Psd, choose_nperseg, welch_spans
from slipless.noise.spans import gap_free

DEFAULT_BAND_HZ = (1.0, 100.0)  # where the noise floor is read [common practice]
MIN_SAMPLES = 16  # a span shorter than this says nothing about noise


@dataclass
class StreamNoise:
    board: int
    run: int
    stream: int
    name: str
    unit: str
    rate_hz: float
    samples: int  # in gap-free spans (inside the window, when one is given)
    spans: int
    longest: int  # samples in the longest span
    band_hz: tuple[float, float]
    psd: Psd | None = None
    floor: float | None = None  # median ASD over band_hz, unit/sqrt(Hz)
    allan: AllanCurve | None = None
    gyro: GyroTerms | None = None
    note: str = ""  # why something is missing

    @property
    def longest_s(self) -> float:
        return self.longest / self.rate_hz


def stream_noise(store: ChannelStore, tick_hz: int, nperseg: int | None = None,
                 band_hz: tuple[float, float] = DEFAULT_BAND_HZ, level: float = ONE_SIGMA,
                 window_s: tuple[float, float] | None = None) -> StreamNoise:
    info = store.info
    spans = gap_free(store, tick_hz, window_s)
    out = StreamNoise(store.board, store.run, info.stream, info.name, info.unit, spans.rate_hz,
                      spans.samples, int(spans.lo.size), spans.longest, band_hz)
    if info.is_state:
        out.note = "a state stream (levels that change), not a signal with noise"
        return out
    if spans.longest < MIN_SAMPLES:
        out.note = f"no gap-free span of {MIN_SAMPLES} samples or more"
        return out
    out.psd = welch_spans(spans, choose_nperseg(spans.longest, spans.rate_hz, nperseg))
    if out.psd is None:
        out.note = "no gap-free span as long as --nperseg: no spectrum"
    else:
        nyquist = spans.rate_hz / 2
        out.floor = out.psd.floor((band_hz[0], min(band_hz[1], nyquist)))
    ms = octave_ms(spans.longest)
    out.allan = oadev((spans.values(k) for k in spans.at_least(2)), spans.rate_hz, ms, level)
    out.gyro = terms(out.allan, info.unit)
    return out
