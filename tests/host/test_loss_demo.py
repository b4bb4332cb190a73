"""`slipless loss` on the demo's link (the physics rig through the damaging
channel), with and without a dead sector of the turn: the report's numbers must
equal what the channel really did, frame by frame, and the angle view must
point at the dead sector.

The channel's truth is rebuilt from its output: the notifications it was given
are matched, in order, against the bytes it let through (intact, one bit
flipped, or missing)."""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest

from slipless.cli import main
from slipless.loss.account import RECEIVED, analyse
from slipless.loss.collect import collect
from slipless.sim import rig
from slipless.sim.channel import ChannelConfig, ChannelLog, notifications, transmit
from slipless.sim.shadow import shadow

TWO_PI = 2 * math.pi


def delivered(frames: list[bytes], out: bytes, payload: int) -> set[int]:
    """Indexes of the frames that came through the channel intact."""
    owner: list[list[int]] = []  # frame indexes per notification
    notes = list(notifications(frames, payload))
    i = 0
    for note in notes:
        idx, size = [], 0
        while size < len(note):
            idx.append(i)
            size += len(frames[i])
            i += 1
        owner.append(idx)
    ok: set[int] = set()
    pos = 0
    for note, idx in zip(notes, owner):
        got = out[pos : pos + len(note)]
        if got == note:
            ok.update(idx)
        elif len(got) == len(note) and sum(bin(a ^ b).count("1") for a, b in zip(got, note)) == 1:
            bad = next(k for k, (a, b) in enumerate(zip(got, note)) if a != b)
            start = 0
            for j in idx:  # the flipped frame is lost; a flipped delimiter glues its neighbour
                end = start + len(frames[j])
                if not start <= bad < end and not (bad == start - 1):
                    ok.add(j)
                start = end
        else:
            continue  # dropped: the output goes on with the next notification
        pos += len(note)
    assert pos == len(out)
    return ok


def run_link(frames: list[bytes], seed: int, path: Path) -> set[int]:
    cfg = ChannelConfig(seed=seed)
    out = b"".join(transmit(frames, cfg, ChannelLog()))
    path.write_bytes(out)
    return delivered(frames, out, cfg.mtu_payload)


def test_demo_link(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # The demo's own run for --seconds 60 --seed 1 (demo.py: block_s = 60 / 6, channel seed 2).
    frames = list(rig.frames(rig.RigConfig(seed=1, block_s=10.0)))
    ok = run_link(frames, 2, tmp_path / "link.bin")
    assert main(["loss", str(tmp_path / "link.bin"), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["closes"] and doc["end_seen"]
    assert doc["frames_expected"] == len(frames) == 1224  # as test_demo.py prints
    assert doc["frames_received"] == len(ok) == 1208
    assert doc["frames_lost"] == 16 and doc["frames_dropped_board"] == 0
    lost = {s for g in doc["gaps"] for s in range(g["first_seq"], g["last_seq"] + 1)}
    assert lost == set(range(len(frames))) - ok  # the very frames the channel lost


def rotor_angle_deg(cfg: rig.RigConfig) -> Callable[[np.ndarray], np.ndarray]:
    """The rig's true rotor angle (degrees) at board seconds, from its rate program."""
    t = np.linspace(0.0, cfg.seconds, int(cfg.seconds * 1000) + 1)
    theta = np.concatenate(([0.0], np.cumsum((rig.rotation(cfg, t[1:]) + rig.rotation(cfg, t[:-1]))
                                             / 2 * np.diff(t))))
    return lambda s: np.degrees(np.interp(s, t, theta))


def test_demo_run_with_a_dead_sector(tmp_path: Path) -> None:
    # The demo's rotor program (stopped, ccw, cw, stopped, cw, ccw; 10 s blocks) and
    # link, with the antenna dead from 200 to 240 degrees of the turn.
    cfg = rig.RigConfig(seed=1, block_s=10.0)
    frames = list(rig.frames(cfg))
    kept, shadowed = shadow(frames[:-1], rotor_angle_deg(cfg), 200.0, 240.0)
    kept.append(frames[-1])
    through = run_link(kept, 2, tmp_path / "link.bin")
    index = [i for i in range(len(frames)) if i not in set(shadowed)]  # kept -> run seq
    received = {index[k] for k in through}
    (acc,) = analyse(collect([tmp_path / "link.bin"]), bins=12)
    assert acc.closes and acc.expected == len(frames)
    assert set(map(int, np.flatnonzero(acc.cls == RECEIVED))) == received
    assert acc.terms["lost"] == len(frames) - len(received) > len(shadowed) > 50
    assert acc.angle is not None
    # Angle 0 is the rotor at the first gyro sample (t = 0, true angle 0). The gyro's
    # bias and the Earth's rate add under 11 degrees over the minute, and the gyro
    # frames lost in the sector are bridged linearly, which errs where the rotor
    # changes speed (up to about 15 degrees per speed change): the loss spreads over
    # the neighbouring bins, but the worst bin is the sector's and the far side is clean.
    bins = acc.angle["bins"]
    assert acc.angle["worst_deg"] == 225.0
    assert sum(b["lost"] for b in bins[6:9]) > 0.9 * len(shadowed)
    far = [b["loss_fraction"] for b in bins if not 150 <= b["from_deg"] < 300]
    assert max(far) < 0.06  # the channel's own 1 % elsewhere
