"""A calibration applied to decoded channels, and what it adds to d's uncertainty.

Correcting a stream is a change of its linear scaling: (raw x scale + offset
- zero - bias) x k = raw x (scale k) + (offset - zero - bias) k, so the
calibrated channel is the same ChannelStore with a new StreamInfo: every
analysis that reads values (align, pulses, the report) sees it.

What the calibration's own uncertainty does to d (the field x rotation term,
a contrast): zeros and biases drop out of it (a constant added to the
response moves a; one added to the rotation rate moves a and b, since
d s (w + e) = d s w + (d e) s), but scale factors carry through: d is in
signal units per (A x rad/s), so its relative error gains the signal's and the
rate's relative scale errors, in quadrature (independent calibrations; the GUM's
law of propagation for a product, JCGM 100:2008 5.1.6).
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

from slipless.calib.file import Calibration
from slipless.decode.store import ChannelStore


def apply(channels: dict[Any, ChannelStore], cal: Calibration) -> list[str]:
    """Calibrate the channels in place (each at most once); returns the stream
    names calibrated. Streams the calibration does not name are left as they are."""
    done = []
    for ch in channels.values():
        c = cal.streams.get(ch.info.name)
        if c is None or (cal.board is not None and ch.board != cal.board):
            continue
        if ch.calibrated:
            continue
        info = ch.info
        ch.info = replace(info, scale=info.scale * c.scale,
                          offset=(info.offset - c.offset - c.bias) * c.scale)
        ch.calibrated = True
        done.append(info.name)
    return sorted(set(done))


def d_relative_se(cal: Calibration | None, signal: str, rate: str | None) -> dict[str, float]:
    """The relative standard uncertainties of d that the calibration brings:
    the signal's scale, the rotation rate's scale (a rate given as a number
    by the user brings none here), the amplifier's gain when the prediction
    uses it; and their quadrature sum under "total"."""
    out: dict[str, float] = {}
    if cal is None:
        return {"total": 0.0}
    sig = cal.streams.get(signal)
    if sig is not None and sig.scale_se:
        out["signal_scale"] = sig.scale_se / abs(sig.scale)
    if rate is not None:
        r = cal.streams.get(rate)
        if r is not None and r.scale_se:
            out["rate_scale"] = r.scale_se / abs(r.scale)
    out["total"] = math.sqrt(sum(v * v for v in out.values()))
    return out


def model_relative_se(cal: Calibration | None) -> float:
    """Relative uncertainty of a prediction of the amplifier's output that uses
    the measured charge gain (0 without one)."""
    if cal is None or cal.amplifier is None:
        return 0.0
    return cal.amplifier.gain_se / abs(cal.amplifier.gain_v_per_c)


def ratio_se(ratio: float, ratio_se_fit: float, cal: Calibration | None, signal: str,
             rate: str | None) -> float:
    """se of d / d_model with the calibration's part added (quadrature, relative)."""
    rel = d_relative_se(cal, signal, rate)["total"]
    return math.hypot(ratio_se_fit, abs(ratio) * math.hypot(rel, model_relative_se(cal)))
