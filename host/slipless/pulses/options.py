"""The pulse analysis' options and their defaults, in one place: the command
line declares them from here (cli/analysis_args.py), the report and the
Python API build them from here (no numpy, no argparse)."""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace
from typing import Any

from slipless.errors import InputError

DEFAULTS: dict[str, Any] = {
    "signal": "cap_amp", "current": "coil_current", "rotation": None, "rotation_rate": None,
    "pulses_from": "auto", "on_amps": None, "off_amps": None, "settle_ms": None,
    "baseline_ms": None, "plateau_ms": None, "by": "current", "prediction": None, "level": 0.95,
    "stopped_below": None, "calibration": None, "errors": "pulse", "blocks": "cycle",
}


def namespace(**given: Any) -> SimpleNamespace:
    """The options as the command's namespace: defaults, then what is given
    (named as the command's options, with _ for -)."""
    unknown = sorted(set(given) - set(DEFAULTS))
    if unknown:
        raise InputError(f"pulses: no option {', '.join(unknown)} (options: {', '.join(DEFAULTS)})")
    opts = {**DEFAULTS, **given}
    if opts["prediction"] is not None:
        opts["prediction"] = Path(opts["prediction"])
    if isinstance(opts["rotation_rate"], str):
        opts["rotation_rate"] = [opts["rotation_rate"]]
    return SimpleNamespace(**opts)
