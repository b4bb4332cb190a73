"""A mirror that holds every frame closes its account, and a run with no loss
says so: no gaps, no worst sector.

The board's `dropped` counter counts frames that left its live send queue
unsent (firmware/ring.py); its file mirror is written before that queue, so
it holds them. Runs come from slipless.sim.lossy (every frame's fate chosen)
and the simulated rig: simulated scenarios of our own."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from slipless.cli import main
from slipless.io import capture
from slipless.loss.account import analyse
from slipless.loss.angle import histogram
from slipless.loss.collect import collect
from slipless.protocol import wire
from slipless.sim import rig
from slipless.sim.lossy import RUN, Plan, frames, write

DROPS = {14, 15, 16, 31, 32}


def _plan() -> Plan:
    return Plan(45, queue=2, status_every=5, board_drop=set(DROPS), mirror=set(range(45)))


def test_a_complete_mirror_as_the_input_closes(tmp_path: Path) -> None:
    _, mirror = write(_plan(), tmp_path)
    (acc,) = analyse(collect([mirror]))
    assert acc.closes, acc.discrepancies
    assert acc.terms == {"received": 45, "recovered_resend": 0, "recovered_mirror": 0,
                         "lost": 0, "dropped_board": 0}
    assert acc.gaps == []
    assert any(f"board counted {len(DROPS)} frame(s) dropped from its live send queue" in n
               for n in acc.notes)


def test_the_live_link_still_shows_what_the_queue_dropped(tmp_path: Path) -> None:
    # the same run over the radio, then with the mirror: the counter is placed on
    # the frames the link missed, and the mirror recovers them
    cap, mirror = write(_plan(), tmp_path)
    (radio,) = analyse(collect([cap]))
    assert radio.closes and radio.terms["dropped_board"] == len(DROPS)
    (both,) = analyse(collect([cap], [mirror]))
    assert both.closes and both.terms["recovered_mirror"] == len(DROPS)
    assert [g.cause for g in both.gaps] == ["board_overflow", "board_overflow"]


def test_a_capture_of_a_mirror_pull_closes(tmp_path: Path) -> None:
    # `slipless pull` over the link: the laptop writes PULL, the board sends its
    # mirror's frames over the radio, the queue drops of the run among them
    fr = frames(_plan())
    path = tmp_path / "pull.slcap"
    w = capture.CaptureWriter(path, {"sources": [{}]}, sync_every_s=1e9)
    t = 1_000_000_000
    w.event(0, "connected", mtu=247)
    laptop = wire.Encoder(0xFFFF, RUN)
    w.write(capture.TX, 0, laptop.frame(laptop.command(wire.CMD_PULL, 1)), t, t + 10**18)
    for data in fr:
        t += 1_000_000
        w.write(capture.RX, 0, data, t, t + 10**18)
    w.close()
    (acc,) = analyse(collect([path]))
    assert acc.closes, acc.discrepancies
    assert acc.terms["received"] == 45 and acc.gaps == []
    # without the PULL the same frames would contradict the counter: it is the evidence
    w = capture.CaptureWriter(tmp_path / "live.slcap", {"sources": [{}]}, sync_every_s=1e9)
    for i, data in enumerate(fr):
        w.write(capture.RX, 0, data, t + i, t + i + 10**18)
    w.close()
    (live,) = analyse(collect([tmp_path / "live.slcap"]))
    assert not live.closes and "only 0 are missing there" in live.discrepancies[0]


def test_no_loss_no_worst_sector() -> None:
    angle = np.linspace(0, 4 * math.pi, 48)
    h = histogram(angle, np.zeros(48, dtype=bool), 12)
    assert h["worst_deg"] is None and h["worst_loss_fraction"] is None
    assert sum(b["frames"] for b in h["bins"]) == 48
    lost = np.zeros(48, dtype=bool)
    lost[3] = True  # 3 of 48 steps into the first turn: 45 degrees, bin 30-60
    assert histogram(angle, lost, 12)["worst_deg"] == 45.0


def test_a_lossless_run_reads_no_gaps(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    cfg = rig.RigConfig(blocks_rad_s=(2 * math.pi,), block_s=8.0, seed=5)
    (tmp_path / "all.bin").write_bytes(b"".join(rig.frames(cfg)))
    assert main(["loss", str(tmp_path / "all.bin")]) == 0
    out = capsys.readouterr().out
    assert "no gaps: every frame arrived live" in out
    assert "no frame missed, no worst sector" in out
    assert "gaps in what arrived live" not in out and "degrees" not in out
    assert main(["loss", str(tmp_path / "all.bin"), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    (run,) = doc["runs"]
    assert run["gaps"] == [] and doc["gaps"] == []
    assert run["angle"]["worst_deg"] is None and run["angle"]["sectors"] == []
    png = tmp_path / "loss.png"
    assert main(["loss", str(tmp_path / "all.bin"), "--plot", str(png)]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
