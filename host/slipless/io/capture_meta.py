"""A capture's header (its meta JSON: label, operator, amplifier, rig, recorder,
dates), read on its own without the records; and what each board said of itself
when `record` connected (its `board` events: CAPTURE.md), read from the start
of the records only."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from slipless.io import capture
from slipless.protocol import wire

# `record` writes its `board` events before START, a few records after connecting: the
# search ends there, and never reads further than this many records.
MAX_SCAN_RECORDS = 100_000
_OPENING = (wire.CMD_START, wire.CMD_PULL)  # the recorder asked its boards before these


def capture_header(path: Path) -> dict[str, Any] | None:
    """The header of the capture at `path`, or None if it is not a readable capture."""
    try:
        with path.open("rb") as f:
            return capture.read_header(f)
    except (OSError, capture.CaptureError):
        return None


def board_facts(path: Path) -> list[dict[str, Any]]:
    """The `board` events of the capture at `path`, each with its `source` (the link);
    [] for a capture without any (an older one, or no board answered)."""
    found: list[dict[str, Any]] = []
    try:
        with path.open("rb") as f:
            for k, r in enumerate(capture.CaptureReader(f)):
                if k >= MAX_SCAN_RECORDS:
                    break
                if r.type == capture.EVENT:
                    event = _event(r.payload)
                    if event.get("event") == "board":
                        found.append(dict({k: v for k, v in event.items() if k != "event"},
                                          source=r.source))
                elif r.type == capture.TX and (found or _opens_run(r.payload)):
                    break  # the recorder's next command after asking, or the run began
    except (OSError, capture.CaptureError):
        return []
    return found


def _event(payload: bytes) -> dict[str, Any]:
    try:
        event = json.loads(payload)
    except (ValueError, UnicodeDecodeError):
        return {}
    return event if isinstance(event, dict) else {}


def _opens_run(payload: bytes) -> bool:
    """A tx record carrying START or PULL (plain or sealed)."""
    for body in wire.Deframer().feed(payload):
        if (len(body) > wire.HEADER_SIZE and body[0] & 0x0F == wire.COMMAND
                and body[wire.HEADER_SIZE] & 0x7F in _OPENING):
            return True
    return False
