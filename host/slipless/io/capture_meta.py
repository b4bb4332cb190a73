"""A capture's header (its meta JSON: label, operator, amplifier, rig, recorder,
dates), read on its own without the records."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from slipless.io import capture


def capture_header(path: Path) -> dict[str, Any] | None:
    """The header of the capture at `path`, or None if it is not a readable capture."""
    try:
        with path.open("rb") as f:
            return capture.read_header(f)
    except (OSError, capture.CaptureError):
        return None
