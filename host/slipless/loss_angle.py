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
from typing import Any

import numpy as np

from slipless.loss_collect import RunFacts, rate_factor

TWO_PI = 2 * math.pi
_PREFERRED = ("gyro_z", "rotation", "rot", "gyro", "rate")
STILL_RAD_S = 0.05  # a rate reading under this is the rotor standing still (common practice)
STILL_SAMPLES = 20  # still readings needed before their median is taken as the zero


def _rate_stream(f: RunFacts, name: str | None
                 ) -> tuple[np.ndarray, np.ndarray, str, int] | None:
    streams = list(f.rates.values())
    if name:
        streams = [r for r in streams if r.info.name == name]
    else:
        streams.sort(key=lambda r: next((i for i, k in enumerate(_PREFERRED) if k in r.info.name),
                                        len(_PREFERRED)))
    for r in streams:
        if not r.ticks:
            continue
        t = np.concatenate(r.ticks)
        v = np.concatenate(r.values) * (rate_factor(r.info) or 1.0)
        order = np.argsort(t, kind="stable")
        unit = r.info.unit if rate_factor(r.info) else f"{r.info.unit or 'no unit'}, read as rad/s"
        return t[order], v[order], f"rate stream {r.info.name} ({unit})", r.info.stream
    return None


def _from_rate(t_us: np.ndarray, w: np.ndarray, at_us: np.ndarray, start_us: int | None
               ) -> np.ndarray:
    still = w[np.abs(w) < STILL_RAD_S]
    if still.size >= STILL_SAMPLES:
        zero = float(np.median(still))
        zero = float(np.mean(w[np.abs(w - zero) < STILL_RAD_S]))  # centred: no clipping bias
        w = w - zero  # the gyro's zero (its bias and the Earth's rotation)
    if start_us is not None and start_us < t_us[0]:
        t_us, w = np.concatenate(([start_us], t_us)), np.concatenate((w[:1], w))
    dt = np.diff(t_us) / 1e6
    theta = np.concatenate(([0.0], np.cumsum((w[1:] + w[:-1]) / 2 * dt)))
    out = np.interp(at_us, t_us, theta)
    out[(at_us < t_us[0]) | (at_us > t_us[-1])] = np.nan
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
    t, w, what, sid = found
    if t.size < 2:
        return None, f"{what}: fewer than two samples"
    return _from_rate(t, w, at_us, (starts or {}).get(sid)), what


def histogram(angle_rad: np.ndarray, lost: np.ndarray, bins: int) -> dict[str, Any]:
    """Frames and frames not received live per angle bin; the worst bin."""
    ok = np.isfinite(angle_rad)
    a = np.mod(angle_rad[ok], TWO_PI)
    k = np.minimum((a / TWO_PI * bins).astype(np.int64), bins - 1)
    frames = np.bincount(k, minlength=bins)
    missed = np.bincount(k, weights=lost[ok].astype(np.float64), minlength=bins).astype(np.int64)
    frac = np.divide(missed, frames, out=np.zeros(bins), where=frames > 0)
    worst = int(np.argmax(frac))
    width = 360.0 / bins
    return {
        "frames_with_angle": int(ok.sum()),
        "bins": [{"from_deg": i * width, "to_deg": (i + 1) * width, "frames": int(frames[i]),
                  "lost": int(missed[i]), "loss_fraction": float(frac[i])} for i in range(bins)],
        "worst_deg": (worst + 0.5) * width,
        "worst_loss_fraction": float(frac[worst]),
    }
