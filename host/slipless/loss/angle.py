"""Loss against rotor angle: where in the turn the link fails.

The angle comes from, in this order:
- index markers (--index-marker N): EVENTS markers with value N, one per
  revolution, angle 0 at each and linear in board time between them (a span
  of about k typical revolutions counts k, so a lost marker costs nothing);
- a rotation-rate stream (--angle-stream NAME, else the first stream whose
  unit is a rate: rad/s, deg/s, rpm, rev/s), integrated over board time with
  the trapezoid rule; samples lost from it are bridged linearly. Angle 0 is
  the rotor's position at the stream's first sample (when the first frames
  were lost, where END's sample count puts it, reached at the first rate
  obtained), so a run reads the same with or without the mirror.

A frame's angle is the rotor's at the board time the frame was sent (its
latest tick, interpolated by seq for frames that never arrived). A gyro's
bias adds bias x time to the angle (0.003 rad/s is 10 degrees a minute), and
so does the Earth's rotation, which a gyro feels and the turntable's angle
in the lab does not: when the rotor stands still for a while (STILL_SAMPLES
readings under STILL_RAD_S), the mean of those readings (in a window centred
on their median) is taken off the rate before integrating. What is left is
the noise's random walk and the zero's own uncertainty (0.02 rad/s of noise
and 40 s of standstill leave a few degrees over three minutes).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np

from slipless.loss.collect import RateStream, RunFacts, rate_factor

TWO_PI = 2 * math.pi
_PREFERRED = ("gyro_z", "rotation", "rot", "gyro", "rate")
STILL_RAD_S = 0.05  # a rate reading under this is the rotor standing still (common practice)
STILL_SAMPLES = 20  # still readings needed before their median is taken as the zero
PIECE = 1 << 18  # samples integrated at once: bounds the temporaries of long runs (8 MB)


def _rate_stream(f: RunFacts, name: str | None) -> tuple[RateStream, str] | None:
    streams = list(f.rates.values())
    if name:
        streams = [r for r in streams if r.info.name == name]
    else:
        streams.sort(key=lambda r: next((i for i, k in enumerate(_PREFERRED) if k in r.info.name),
                                        len(_PREFERRED)))
    for r in streams:
        if not r.parts:
            continue
        unit = r.info.unit if rate_factor(r.info) else f"{r.info.unit or 'no unit'}, read as rad/s"
        return r, f"rate stream {r.info.name} ({unit})"
    return None


# A rate stream in tick order, as (t_us, w) pieces; called once per pass over it.
Pieces = Callable[[], Iterator[tuple[np.ndarray, np.ndarray]]]


def _from_rate(t_us: np.ndarray, w: np.ndarray, at_us: np.ndarray, start_us: int | None
               ) -> np.ndarray:
    """The rotor angle at at_us from rate w at board times t_us (sorted)."""
    return _integrate(lambda: ((t_us[lo : lo + PIECE], w[lo : lo + PIECE])
                               for lo in range(0, t_us.size, PIECE)), at_us, start_us)


def _zero(pieces: Pieces, still: np.ndarray) -> float | None:
    """The gyro's zero (its bias and the Earth's rotation) from its still readings."""
    if still.size < STILL_SAMPLES:
        return None
    zero = float(np.median(still))
    near = np.concatenate([w[np.abs(w - zero) < STILL_RAD_S] for _, w in pieces()])
    return float(np.mean(near))  # centred: no clipping bias


def _integrate(pieces: Pieces, at_us: np.ndarray, start_us: int | None) -> np.ndarray:
    """The trapezoid integral of the rate less its zero, linear in between, at at_us
    (NaN outside the samples). With start_us before the first sample the integral
    starts there, at that sample's rate. Made a piece at a time: of the integral
    only the points np.interp reads around each of at_us are kept."""
    x = np.asarray(at_us, dtype=np.float64)
    every = bool(np.isnan(x).any())  # where np.interp puts a NaN depends on the point before
    below = np.zeros(x.shape, np.int64)  # samples at or before each point
    still: list[np.ndarray] = []
    n, first, last = 0, None, None
    for t, w in pieces():
        if first is None:
            first = t[0]
        last, n = t[-1], n + t.size
        still.append(w[np.abs(w) < STILL_RAD_S])
        if not every:
            below += np.searchsorted(t.astype(np.float64), x, side="right")
    zero = _zero(pieces, np.concatenate(still))
    del still
    if first is None:
        return np.full(x.shape, np.nan)
    start = start_us if start_us is not None and start_us < first else None
    lead = start is not None
    size = n + lead  # knots: the ticks with start_us in front
    if every:
        knots = np.arange(size)
    else:
        if start is not None:
            below += x >= np.float64(start)
        knots = np.unique(np.clip(np.concatenate(([0], below - 1, below)), 0, size - 1))
    xk, theta_k = np.empty(knots.size), np.empty(knots.size)
    pos, carry, prev = 0, np.float64(0.0), None  # knot of the piece's first tick, integral there
    for t, w in pieces():
        wz = w - zero if zero is not None else w
        if prev is not None:  # the step from the last sample before the piece
            tt, ww = np.concatenate(([prev[0]], t)), np.concatenate(([prev[1]], wz))
        elif start is not None:
            tt, ww = np.concatenate((np.array([start]), t)), np.concatenate((wz[:1], wz))
        else:
            tt, ww = t, wz
        steps = ww[1:] + ww[:-1]
        steps /= 2
        steps *= (tt[1:] - tt[:-1]) / 1e6
        # theta[k]: the integral at knot pos + k, summed one step after the other
        theta = (np.concatenate(([0.0], np.cumsum(steps))) if pos == 0
                 else np.cumsum(np.concatenate(([carry], steps))))
        lo, hi = np.searchsorted(knots, (pos if prev is None else pos + 1, pos + tt.size))
        at = knots[lo:hi] - pos
        xk[lo:hi] = tt[at]
        theta_k[lo:hi] = theta[at]
        carry, pos, prev = theta[-1], pos + tt.size - 1, (t[-1], wz[-1])
    out = np.interp(at_us, xk, theta_k)
    out[(at_us < (first if start is None else start)) | (at_us > last)] = np.nan
    return out


def _from_index(ticks: np.ndarray, at_us: np.ndarray) -> np.ndarray:
    span = np.diff(ticks)
    typical = float(np.median(span))
    turns = np.maximum(1, np.round(span / typical)) if typical > 0 else np.ones_like(span)
    theta = TWO_PI * np.concatenate(([0.0], np.cumsum(turns)))
    out = np.interp(at_us, ticks.astype(np.float64), theta)
    out[(at_us < ticks[0]) | (at_us > ticks[-1])] = np.nan
    return out


def rotor_angle(f: RunFacts, at_us: np.ndarray, stream: str | None = None,
                index_marker: int | None = None, starts: dict[int, int | None] | None = None
                ) -> tuple[np.ndarray | None, str]:
    """Angle (rad, unwrapped) at each board time, and where it came from; None if unknown.
    starts: stream id -> tick of its first sample (loss_streams)."""
    if index_marker is not None:
        ticks = np.unique(np.array([t for t, v in f.markers if v == index_marker], dtype=np.int64))
        if ticks.size >= 2:
            return _from_index(ticks, at_us), f"index marker {index_marker}"
        return None, f"fewer than two index markers with value {index_marker}"
    found = _rate_stream(f, stream)
    if found is None:
        return None, f"no rate stream named {stream}" if stream else "no rotation-rate stream"
    r, what = found
    if r.samples < 2:
        return None, f"{what}: fewer than two samples"
    factor = rate_factor(r.info) or 1.0
    return _integrate(lambda: r.pieces(PIECE, factor), at_us,
                      (starts or {}).get(r.info.stream)), what


def histogram(angle_rad: np.ndarray, lost: np.ndarray, bins: int) -> dict[str, Any]:
    """Frames and frames not received live per angle bin; the worst bin (its middle
    and share), both None when no frame with an angle was missed: no worst sector."""
    ok = np.isfinite(angle_rad)
    a = np.mod(angle_rad[ok], TWO_PI)
    k = np.minimum((a / TWO_PI * bins).astype(np.int64), bins - 1)
    frames = np.bincount(k, minlength=bins)
    missed = np.bincount(k, weights=lost[ok].astype(np.float64), minlength=bins).astype(np.int64)
    frac = np.divide(missed, frames, out=np.zeros(bins), where=frames > 0)
    worst = int(np.argmax(frac)) if missed.any() else None
    width = 360.0 / bins
    return {
        "frames_with_angle": int(ok.sum()),
        "bins": [{"from_deg": i * width, "to_deg": (i + 1) * width, "frames": int(frames[i]),
                  "lost": int(missed[i]), "loss_fraction": float(frac[i])} for i in range(bins)],
        "worst_deg": None if worst is None else (worst + 0.5) * width,
        "worst_loss_fraction": None if worst is None else float(frac[worst]),
    }
