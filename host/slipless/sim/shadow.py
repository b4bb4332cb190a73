"""A link that loses the frames a board sends while its antenna faces a dead
sector of the turn, and a small share elsewhere. For tests and demos.

The moment a frame is sent is read from the frame itself: the tick of an
anchor frame (DESCRIPTOR, STATUS, END), the tick after the last sample of a
SAMPLES frame, the event's tick for EVENTS.
"""

from __future__ import annotations

import random
from collections.abc import Callable, Iterable

import numpy as np

from slipless.decode.frames import parse_body
from slipless.protocol import wire


def _body(frame: bytes) -> bytes:
    return wire.cobs_decode(frame[:-1])[: -wire.CRC_SIZE]


def send_ticks(frames: Iterable[bytes]) -> list[int]:
    """Board tick (us) at which each frame of a run was sent."""
    periods: dict[int, tuple[int, int]] = {}  # stream -> (period_us, sample size)
    out: list[int] = []
    last = 0
    for frame in frames:
        body = _body(frame)
        kind = body[0] & 0x0F
        f = parse_body(kind, body[wire.HEADER_SIZE :]) if kind in wire.KIND_NAMES else {}
        if kind == wire.DESCRIPTOR:
            for s in f["streams"]:
                periods[s["stream"]] = (s["period_us"], wire.SAMPLE_SIZES[s["type"]])
        if kind == wire.SAMPLES:
            period, size = periods[f["stream"]]
            tick = last - (last & 0xFFFFFFFF) + f["tick32"] + len(f["values"]) // size * period
        elif kind == wire.EVENTS and f["events"]:
            tick = last - (last & 0xFFFFFFFF) + f["events"][0]["tick32"]
        else:
            tick = f.get("tick", last)
        last = max(last, tick)
        out.append(last)
    return out


def shadow(frames: list[bytes], angle_deg: Callable[[np.ndarray], np.ndarray], dead_from: float,
           dead_to: float, elsewhere: float = 0.0, seed: int = 0) -> tuple[list[bytes], list[int]]:
    """(frames that get through, indexes of those lost): frames sent while the rotor
    angle (degrees, from board seconds) lies in [dead_from, dead_to) are lost, and
    a share `elsewhere` of the others at random."""
    rng = random.Random(seed)
    t_s = np.asarray(send_ticks(frames), dtype=np.float64) / 1e6
    a = np.mod(angle_deg(t_s), 360.0)
    dead = (a >= dead_from) & (a < dead_to)
    kept, lost = [], []
    for i, (frame, d) in enumerate(zip(frames, dead.tolist())):
        if d or rng.random() < elsewhere:
            lost.append(i)
        else:
            kept.append(frame)
    return kept, lost
