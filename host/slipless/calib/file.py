"""Calibration files: what was measured on the rig, with its uncertainty.

A calibration is JSON (our own layout, `"format": "slipless-calibration"`):

  {"format": "slipless-calibration", "version": 1, "created_utc": "...",
   "source": "run1.slcap", "board": 1,
   "streams": {"cap_amp": {"offset": -0.0012, "offset_se": 4e-5, "offset_unit": "V",
                           "from": "zero 2-10 s"},
               "gyro_z": {"bias": 0.0031, "bias_se": 2e-4, "scale": 1.002,
                          "scale_se": 0.001, "from": "stopped 41 s; index marker 1, 57 turns"}},
   "amplifier": {"stream": "cap_amp", "gain_v_per_c": 9.9e10, "gain_se": 1.1e9,
                 "from": "step 1.000 V through 10.0 pF at 12.3 s"}}

A stream's corrected value is (value - offset - bias) x scale, in the stream's
own unit (missing terms: offset 0, bias 0, scale 1). The amplifier's charge
gain (output volts per coulomb at its input) replaces the assumed one in the
prediction of the output (see calib/apply.py).
"""

from __future__ import annotations

import json
import math
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from slipless.errors import InputError
from slipless.io.json_text import parse_json

FORMAT = "slipless-calibration"
VERSION = 1
_STREAM_KEYS = {"offset", "offset_se", "offset_unit", "bias", "bias_se", "scale", "scale_se",
                "from"}
_AMP_KEYS = {"stream", "gain_v_per_c", "gain_se", "from"}


@dataclass
class StreamCal:
    offset: float = 0.0
    offset_se: float = 0.0
    bias: float = 0.0
    bias_se: float = 0.0
    scale: float = 1.0
    scale_se: float = 0.0
    how: list[str] = field(default_factory=list)

    def as_json(self, unit: str = "") -> dict[str, Any]:
        out: dict[str, Any] = {}
        if self.offset or self.offset_se:
            out.update(offset=self.offset, offset_se=self.offset_se, offset_unit=unit)
        if self.bias or self.bias_se:
            out.update(bias=self.bias, bias_se=self.bias_se)
        if self.scale != 1.0 or self.scale_se:
            out.update(scale=self.scale, scale_se=self.scale_se)
        out["from"] = "; ".join(self.how)
        return out


@dataclass
class AmpCal:
    stream: str
    gain_v_per_c: float
    gain_se: float
    how: str = ""


@dataclass
class Calibration:
    streams: dict[str, StreamCal] = field(default_factory=dict)
    amplifier: AmpCal | None = None
    source: str = ""
    board: int | None = None
    units: dict[str, str] = field(default_factory=dict)  # stream -> unit, for the file

    def as_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "format": FORMAT, "version": VERSION,
            "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "source": self.source, "board": self.board,
            "streams": {k: v.as_json(self.units.get(k, "")) for k, v in sorted(self.streams.items())},
        }
        if self.amplifier is not None:
            a = self.amplifier
            out["amplifier"] = {"stream": a.stream, "gain_v_per_c": a.gain_v_per_c,
                                "gain_se": a.gain_se, "from": a.how}
        return out


def save(cal: Calibration, path: Path) -> None:
    try:
        path.write_text(json.dumps(cal.as_json(), indent=2, allow_nan=False) + "\n")
    except OSError as exc:
        raise InputError(f"{path}: cannot write ({exc.strerror})") from exc


def load(path: Path) -> Calibration:
    """A calibration file, checked: one-line errors naming the file, the line and the key."""
    try:
        text = path.read_text()
    except FileNotFoundError:
        raise InputError(f"{path}: no such calibration file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read ({getattr(exc, 'strerror', None) or exc})") from None
    doc = parse_json(text, path)
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise InputError(f"{path}: not a slipless calibration (want \"format\": \"{FORMAT}\")")
    if doc.get("version") != VERSION:
        raise InputError(f"{path}: calibration version {doc.get('version')!r}; this release "
                         f"reads version {VERSION}")
    cal = Calibration(source=str(doc.get("source", "")), board=doc.get("board"))
    streams = doc.get("streams", {})
    if not isinstance(streams, dict):
        raise InputError(f"{path}: \"streams\" must be an object of stream names")
    for name, entry in streams.items():
        if not isinstance(entry, dict):
            raise InputError(f"{path}: streams.{name} must be an object")
        unknown = set(entry) - _STREAM_KEYS
        if unknown:
            raise InputError(f"{path}: streams.{name}: unknown key {sorted(unknown)[0]!r}")
        sc = StreamCal(how=[str(entry.get("from", ""))] if entry.get("from") else [])
        for key in ("offset", "offset_se", "bias", "bias_se", "scale", "scale_se"):
            if key in entry:
                setattr(sc, key, _number(path, f"streams.{name}.{key}", entry[key]))
        if sc.scale == 0:
            raise InputError(f"{path}: streams.{name}.scale is 0")
        for key in ("offset_se", "bias_se", "scale_se"):
            if getattr(sc, key) < 0:
                raise InputError(f"{path}: streams.{name}.{key} is negative")
        cal.streams[str(name)] = sc
        cal.units[str(name)] = str(entry.get("offset_unit", ""))
    amp = doc.get("amplifier")
    if amp is not None:
        if not isinstance(amp, dict) or not _AMP_KEYS >= set(amp) or "gain_v_per_c" not in amp:
            raise InputError(f"{path}: \"amplifier\" needs stream and gain_v_per_c (and gain_se)")
        gain = _number(path, "amplifier.gain_v_per_c", amp["gain_v_per_c"])
        se = _number(path, "amplifier.gain_se", amp.get("gain_se", 0.0))
        if gain == 0 or se < 0:
            raise InputError(f"{path}: amplifier.gain_v_per_c must be non-zero, gain_se >= 0")
        cal.amplifier = AmpCal(str(amp.get("stream", "")), gain, se, str(amp.get("from", "")))
    return cal


def _number(path: Path, key: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise InputError(f"{path}: {key} must be a finite number, not {value!r}")
    return float(value)
