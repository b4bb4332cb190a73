"""Faults in a whole run, with the board's own firmware on simulated hardware
(CPython): the board reboots mid-run (power lost, the unsent part of its send
queue with it; a new run id after the boot), and the link drops frames at
random. Afterwards every frame any source holds (the radio stream, the board's
mirror file) is counted, and the loss report closes for both runs."""

from __future__ import annotations

import random
from pathlib import Path

from slipless.loss.account import analyse
from slipless.loss.collect import collect
from slipless.protocol import wire
from slipless.sim.ble_board import firmware_on_path

CONFIG = {
    "board_id": 4,
    "streams": [{"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 1000,
                 "type": "h", "scale": 0.001, "offset": 0.0}],
    "link": {"status_every_ms": 200, "descriptor_every_ms": 1000, "ring_frames": 64,
             "queue_frames": 16},
}


def _boot(runs: int, start_us: int, mirror: list[bytes]):
    firmware_on_path()
    import config
    from board import Board
    from simhw import SimHW, SinkLink

    hw = SimHW(start_us=start_us)
    hw.runs = runs  # the run counter lives on flash: it survives the reboot
    hw.on_frame = lambda slot, n: mirror.append(bytes(slot[:n]))
    b = Board(config.validate(CONFIG), hw, hw.next_run_id())
    b.link = SinkLink(b.ring, keep=True)
    enc = wire.Encoder(0xFFFF, 0)
    b.command_bytes(enc.frame(enc.start(1, 0, "run")))
    return b, hw


def _run(b, hw, ms: int, stream: bytearray, rng: random.Random, lose: float) -> None:
    for _ in range(ms * 10):
        hw.advance(100)
        b.poll()
        b.link.poll()
        if b.link.keep:
            data = bytes(b.link.keep)
            b.link.keep.clear()
            for part in data.split(b"\x00")[:-1]:  # one notification per frame
                if rng.random() >= lose:
                    stream += part + b"\x00"


def test_reboot_mid_run_and_lossy_link(tmp_path: Path) -> None:
    rng = random.Random(7)
    stream = bytearray()
    mirror: list[bytes] = []
    b, hw = _boot(0, 0, mirror)
    _run(b, hw, 1500, stream, rng, 0.1)
    first_run = b.run_id
    # power lost: whatever was still queued on the board is gone; reboot, new run
    b2, hw2 = _boot(hw.runs, 123_456, mirror)
    _run(b2, hw2, 1500, stream, rng, 0.1)
    enc = wire.Encoder(0xFFFF, 0)
    b2.command_bytes(enc.frame(enc.command(wire.CMD_STOP, 2)))
    _run(b2, hw2, 50, stream, rng, 0.0)
    assert b2.run_id != first_run
    (tmp_path / "radio.bin").write_bytes(bytes(stream))
    (tmp_path / "mirror.bin").write_bytes(b"".join(mirror))
    accs = {a.run: a for a in analyse(collect([tmp_path / "radio.bin"], [tmp_path / "mirror.bin"]))}
    assert set(accs) == {first_run, b2.run_id}
    for acc in accs.values():
        assert acc.closes, acc.discrepancies
        assert acc.terms["lost"] == 0  # the mirror holds every frame the radio lost
        assert acc.terms["received"] > 0 and acc.terms["recovered_mirror"] > 0
    assert accs[b2.run_id].end_seen and not accs[first_run].end_seen
    produced = {}
    for f in mirror:
        h = wire.parse_header(wire.Deframer().feed(f)[0])
        produced.setdefault(h[3], set()).add(h[4])
    for run, acc in accs.items():  # every frame the board built is counted in its run
        assert produced[run] == set(range(acc.expected))
        assert acc.terms["received"] + acc.terms["recovered_mirror"] == acc.expected
