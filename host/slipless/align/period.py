"""Grid periods as people write them: '1ms', '10ms', '0.5s', '250us' (no numpy
here: the command line parses them before anything heavy is imported)."""

from __future__ import annotations

import re

UNITS_NS = {"ns": 1, "us": 1_000, "ms": 1_000_000, "s": 1_000_000_000, "min": 60_000_000_000,
            "h": 3_600_000_000_000}
_PERIOD = re.compile(r"^\s*(\d+(?:\.\d*)?|\.\d+)\s*(ns|us|ms|s|min|h)\s*$")


_SIGNED = re.compile(r"^\s*([+-]?)\s*(\d+(?:\.\d*)?|\.\d+)\s*(ns|us|ms|s)\s*$")


def parse_signed_time(text: str) -> int:
    """A signed time like 1.4ms, -0.3ms or 0ms, in nanoseconds; ValueError saying what is wrong."""
    m = _SIGNED.match(text)
    if not m:
        raise ValueError(f"{text!r} is not a time like 1.4ms, -0.3ms or 0ms (units: ns, us, ms, s)")
    ns = round(float(m.group(2)) * UNITS_NS[m.group(3)])
    return -ns if m.group(1) == "-" else ns


def parse_period(text: str) -> int:
    """A period in nanoseconds; ValueError saying what is wrong."""
    m = _PERIOD.match(text)
    ns = round(float(m.group(1)) * UNITS_NS[m.group(2)]) if m else 0
    if ns <= 0:
        raise ValueError(
            f"{text!r} is not a period like 1ms, 10ms or 0.5s (units: {', '.join(UNITS_NS)})")
    return ns
