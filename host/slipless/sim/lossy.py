"""A run whose every frame has a chosen fate, written as a capture and a mirror,
with the truth a loss report must reproduce. For tests.

The run: a DESCRIPTOR at seq 0, SAMPLES frames of two int16 streams taking
turns (`per_frame` samples each, 1 kHz), a STATUS every `status_every` seqs
and END last. The board's queue model is firmware/ring.py's: a frame x
dropped from a queue of length Q is counted by every STATUS b with
x <= b - 1 - Q.

Fates of a frame sent live: arrives, lost, corrupt (one bit flipped, never
into a 0x00, so one damaged segment), duplicated (a second copy right after),
swapped (arrives after its successor). Frames the board dropped are never sent
live. A frame missing live may come back by resend (asked for with a RESEND
command written after END) or from the mirror file.
"""

from __future__ import annotations

import random
from dataclasses import dataclass, field
from pathlib import Path

from slipless.io import capture
from slipless.protocol import wire

BOARD, RUN = 3, 9
H = ord("h")
PERIOD_US = 1000
TERMS = ("received", "recovered_resend", "recovered_mirror", "lost", "dropped_board")


@dataclass
class Plan:
    n_frames: int
    queue: int = 3
    status_every: int = 5
    per_frame: int = 10
    lost: set[int] = field(default_factory=set)
    corrupt: set[int] = field(default_factory=set)
    duplicate: set[int] = field(default_factory=set)
    swap: set[int] = field(default_factory=set)  # s arrives after s + 1
    board_drop: set[int] = field(default_factory=set)
    resend: set[int] = field(default_factory=set)
    mirror: set[int] = field(default_factory=set)
    seed: int = 0

    def status_seqs(self) -> list[int]:
        return list(range(self.status_every, self.n_frames - 1, self.status_every))

    def kind(self, seq: int) -> str:
        if seq == 0:
            return "descriptor"
        if seq == self.n_frames - 1:
            return "end"
        if seq in self.status_seqs():
            return "status"
        return "samples"


def _samples_layout(plan: Plan) -> dict[int, tuple[int, int]]:
    """seq -> (stream, index of the frame within its stream)."""
    out: dict[int, tuple[int, int]] = {}
    counts = [0, 0]
    for seq in range(plan.n_frames):
        if plan.kind(seq) == "samples":
            s = len(out) % 2
            out[seq] = (s, counts[s])
            counts[s] += 1
    return out


def frames(plan: Plan) -> list[bytes]:
    enc = wire.Encoder(BOARD, RUN)
    layout = _samples_layout(plan)
    totals = [0, 0]
    for s, _ in layout.values():
        totals[s] += plan.per_frame
    streams = [(0, H, 0, PERIOD_US, 0.001, 0.0, "alpha", "V"),
               (1, H, 0, PERIOD_US, 0.001, 0.0, "beta", "V")]
    out = []
    for seq in range(plan.n_frames):
        kind = plan.kind(seq)
        tick = seq * 1000
        if kind == "descriptor":
            n = enc.descriptor(0, 1_000_000, (0, 9, 0), 5000, 2, streams)
        elif kind == "end":
            n = enc.end(tick, 1, [(0, totals[0]), (1, totals[1])])
        elif kind == "status":
            dropped = sum(1 for x in plan.board_drop if x <= seq - 1 - plan.queue)
            n = enc.status(tick, 3900, 2500, 50_000, plan.queue, dropped, 0, 30)
        else:
            s, k = layout[seq]
            values = [(seq * 7 + i) % 1000 for i in range(plan.per_frame)]
            n = enc.samples(s, k * plan.per_frame * PERIOD_US, H, values)
        out.append(enc.frame(n))
    return out


def _flip(frame: bytes, rng: random.Random) -> bytes:
    """One bit flipped inside the COBS part, never producing a 0x00."""
    b = bytearray(frame)
    while True:
        i = rng.randrange(len(b) - 1)
        bit = 1 << rng.randrange(8)
        if b[i] ^ bit:
            b[i] ^= bit
            return bytes(b)


def write(plan: Plan, folder: Path) -> tuple[Path, Path]:
    """The capture (live link, RESEND commands, resent frames) and the mirror file."""
    rng = random.Random(plan.seed)
    fr = frames(plan)
    live: list[bytes] = []
    order = list(range(plan.n_frames))
    for s in sorted(plan.swap):
        i = order.index(s)
        order[i], order[i + 1] = order[i + 1], order[i]
    for seq in order:
        if seq in plan.board_drop or seq in plan.lost:
            continue
        live.append(_flip(fr[seq], rng) if seq in plan.corrupt else fr[seq])
        if seq in plan.duplicate:
            live.append(fr[seq])
    path = folder / "run.slcap"
    w = capture.CaptureWriter(path, {"sources": [{}]}, sync_every_s=1e9)
    t = 1_000_000_000
    w.event(0, "connected", mtu=247)
    for data in live:
        t += 1_000_000
        w.write(capture.RX, 0, data, t, t + 10**18)
    laptop = wire.Encoder(0xFFFF, RUN)
    for i, seq in enumerate(sorted(plan.resend)):
        t += 1_000_000
        w.write(capture.TX, 0, laptop.frame(laptop.resend(i + 1, seq, seq)), t, t + 10**18)
    for seq in sorted(plan.resend):
        t += 1_000_000
        w.write(capture.RX, 0, fr[seq], t, t + 10**18)
    w.close()
    mirror = folder / "mirror.bin"
    mirror.write_bytes(b"".join(fr[s] for s in sorted(plan.mirror)))
    return path, mirror


def truth(plan: Plan) -> dict[str, object]:
    """The terms per frame and per stream's samples, from the plan alone."""
    layout = _samples_layout(plan)
    term: dict[int, str] = {}
    for seq in range(plan.n_frames):
        if seq not in plan.board_drop and seq not in plan.lost and seq not in plan.corrupt:
            term[seq] = "received"
        elif seq in plan.resend:
            term[seq] = "recovered_resend"
        elif seq in plan.mirror:
            term[seq] = "recovered_mirror"
        else:
            term[seq] = "dropped_board" if seq in plan.board_drop else "lost"
    frames_ = {t: sum(1 for v in term.values() if v == t) for t in TERMS}
    samples = {s: dict.fromkeys(TERMS, 0) for s in (0, 1)}
    for seq, (s, _) in layout.items():
        samples[s][term[seq]] += plan.per_frame
    obtained_before_mirror = {s for s, v in term.items() if v in ("received", "recovered_resend")}
    return {
        "term": term, "frames": frames_, "samples": samples,
        "corrupt": len(plan.corrupt),
        "duplicates": len(plan.duplicate),
        "out_of_order": len(plan.swap),
        "mirror_copies": len(plan.mirror & obtained_before_mirror),
    }
