"""The Welch spectrum over gap-free spans of a real ChannelStore, against
scipy.signal.welch as the reference, Parseval's theorem and the white-noise
density; the spans themselves, and the segment length chosen."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from slipless.decode.decoder import StreamInfo
from slipless.decode.store import ChannelStore
from slipless.errors import InputError
from slipless.noise import psd
from slipless.noise.spans import gap_free

FRAME = 100  # samples a frame
PERIOD_US = 1000  # 1 kHz at the usual microsecond ticks


def store_of(spans: list[np.ndarray], gap_frames: int = 3) -> ChannelStore:
    """A sealed store holding the spans in frames of FRAME samples, gap_frames
    frames missing between spans (float32 samples, scale 1)."""
    st = ChannelStore(StreamInfo(0, 0x66, 0, PERIOD_US, 1.0, 0.0, "v", "V"), 1, 2)
    tick = seq = 0
    for values in spans:
        for k in range(0, values.size, FRAME):
            part = values[k : k + FRAME].astype(np.float32)
            st.add_frames(np.array([seq]), np.array([tick]), np.array([part.size]), part)
            seq, tick = seq + 1, tick + part.size * PERIOD_US
        seq, tick = seq + gap_frames, tick + gap_frames * FRAME * PERIOD_US
    st.seal()
    return st


def test_gap_free_spans_and_window() -> None:
    rng = np.random.default_rng(1)
    st = store_of([rng.standard_normal(n) for n in (5000, 2100, 450)])
    sp = gap_free(st, 1_000_000)
    assert sp.counts.tolist() == [5000, 2100, 450]
    assert sp.rate_hz == 1000.0 and sp.longest == 5000 and sp.samples == 7550
    assert np.array_equal(sp.values(1), st.values(5000, 7100))
    # board seconds 1.0 to 5.6: the first span's tail and the second's head (it starts
    # after 5.0 s + 300 lost samples = 5.3 s)
    win = gap_free(st, 1_000_000, (1.0, 5.6))
    assert win.counts.tolist() == [4000, 300]


def test_one_span_equals_scipy_welch() -> None:
    x = np.random.default_rng(2).standard_normal(8192)
    st = store_of([x])
    got = psd.welch_spans(gap_free(st, 1_000_000), 1024)
    assert got is not None
    f, p = signal.welch(st.values(), 1000.0, nperseg=1024)  # scipy's defaults: Hann, half overlap
    assert np.array_equal(got.freq_hz, f)
    assert got.density == pytest.approx(p, rel=1e-12)
    assert got.segments == (8192 - 1024) // 512 + 1


def test_spans_are_weighted_by_their_segments() -> None:
    rng = np.random.default_rng(3)
    parts = [rng.standard_normal(5000), 3 * rng.standard_normal(2100), rng.standard_normal(500)]
    sp = gap_free(store_of(parts), 1_000_000)
    got = psd.welch_spans(sp, 1024)
    assert got is not None
    total, count = 0.0, 0
    for k in range(2):  # the 500-sample span is shorter than a segment: left out
        x = sp.values(k)
        seg = (x.size - 1024) // 512 + 1
        total = total + seg * signal.welch(x, 1000.0, nperseg=1024)[1]
        count += seg
    assert got.segments == count and got.samples == 7100
    assert got.density == pytest.approx(total / count, rel=1e-12)
    assert psd.welch_spans(sp, 8192) is None  # no span holds one segment


def test_chunks_give_the_same_spectrum(monkeypatch: pytest.MonkeyPatch) -> None:
    sp = gap_free(store_of([np.random.default_rng(4).standard_normal(20_000)]), 1_000_000)
    whole = psd.welch_spans(sp, 512)
    monkeypatch.setattr(psd, "CHUNK", 1500)  # 5 segments a chunk
    chunked = psd.welch_spans(sp, 512)
    assert whole is not None and chunked is not None
    assert chunked.segments == whole.segments
    assert chunked.density == pytest.approx(whole.density, rel=1e-10)


def test_parseval_the_density_integrates_to_the_variance() -> None:
    # Parseval: the one-sided density integrated over 0..fs/2 is the variance. White
    # noise sd 0.5 plus a 37 Hz sine of amplitude 0.8: 0.25 + 0.8^2 / 2 = 0.57.
    rng = np.random.default_rng(5)
    t = np.arange(200_000) / 1000.0
    x = 0.5 * rng.standard_normal(t.size) + 0.8 * np.sin(2 * np.pi * 37 * t)
    got = psd.welch_spans(gap_free(store_of([x]), 1_000_000), 2048)
    assert got is not None
    assert got.variance() == pytest.approx(np.var(x), rel=0.02)
    assert got.variance() == pytest.approx(0.57, rel=0.02)


def test_white_floor_is_sigma_sqrt_two_over_fs() -> None:
    # one-sided density of white noise: 2 sigma^2 / fs, so the ASD floor is
    # sigma sqrt(2 / fs) [common practice]
    x = 0.2 * np.random.default_rng(6).standard_normal(100_000)
    got = psd.welch_spans(gap_free(store_of([x]), 1_000_000), 1024)
    assert got is not None
    assert got.floor((1.0, 100.0)) == pytest.approx(0.2 * np.sqrt(2 / 1000.0), rel=0.03)
    assert got.floor((600.0, 700.0)) is None  # above the Nyquist rate: no bins


def test_segment_length() -> None:
    assert psd.choose_nperseg(10**6, 1000.0) == 4096  # about 4 s: 2^12
    assert psd.choose_nperseg(10**6, 200.0) == 1024  # 800 samples -> nearest power of two
    assert psd.choose_nperseg(700, 1000.0) == 512  # no longer than the longest span
    assert psd.choose_nperseg(5, 1000.0) == psd.MIN_NPERSEG
    assert psd.choose_nperseg(700, 1000.0, 300) == 300
    with pytest.raises(InputError, match="--nperseg 8"):
        psd.choose_nperseg(700, 1000.0, 8)
