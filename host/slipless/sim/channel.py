"""A damaging byte channel: packs frames into notifications, then loses,
flips and re-chunks bytes the way a radio link and a serial port do."""

from __future__ import annotations

import random
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field

from slipless.protocol import wire


@dataclass
class ChannelConfig:
    seed: int = 2
    mtu_payload: int = wire.MAX_WIRE  # bytes per notification (244 after an MTU exchange)
    drop_chunk: float = 0.01  # probability a notification is lost
    flip_bit: float = 0.002  # probability a notification gets one flipped bit
    max_read: int = 512  # the reader sees random-size reads up to this


@dataclass
class ChannelLog:
    """What the channel did, so tests can check the decoder against the truth."""

    notifications: int = 0
    dropped: int = 0
    flipped: int = 0
    dropped_frames: list[int] = field(default_factory=list)


def notifications(frames: Iterable[bytes], payload: int) -> Iterator[bytes]:
    """Pack whole frames into notifications of at most `payload` bytes."""
    buf = bytearray()
    for f in frames:
        if len(buf) + len(f) > payload and buf:
            yield bytes(buf)
            buf.clear()
        if len(f) > payload:  # small MTU: split the frame
            for i in range(0, len(f), payload):
                yield f[i : i + payload]
            continue
        buf += f
    if buf:
        yield bytes(buf)


def transmit(frames: Iterable[bytes], cfg: ChannelConfig, log: ChannelLog) -> Iterator[bytes]:
    """Yield reads as a laptop would see them after a damaging link."""
    rng = random.Random(cfg.seed)
    pending = bytearray()
    for note in notifications(frames, cfg.mtu_payload):
        log.notifications += 1
        if rng.random() < cfg.drop_chunk:
            log.dropped += 1
            continue
        if rng.random() < cfg.flip_bit:
            log.flipped += 1
            b = bytearray(note)
            i = rng.randrange(len(b) * 8)
            b[i // 8] ^= 1 << (i % 8)
            note = bytes(b)
        pending += note
        while len(pending) > cfg.max_read:
            n = rng.randint(1, cfg.max_read)
            yield bytes(pending[:n])
            del pending[:n]
    if pending:
        yield bytes(pending)
