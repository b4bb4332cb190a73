"""The loss report on the board's own firmware (CPython, simulated hardware):
the link stalls, the board's send queue overflows and drops frames (its own
counter says how many), the laptop asks for them again and gets the part
the ring still holds, and a cut link loses a stretch on the radio. The report must put every frame where the
board and the link really put it."""

from __future__ import annotations

from pathlib import Path

from collect_sink import collect as decode_chunks

from slipless.io import capture
from slipless.loss.account import DROPPED, RECEIVED, RESEND, analyse
from slipless.loss.collect import collect
from slipless.protocol import wire
from slipless.sim.radioless import RadiolessRun

CONFIG = {
    "board_id": 6,
    "streams": [
        {"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 1000, "type": "h",
         "scale": 0.001, "offset": 0.0},
        {"id": 1, "name": "coil_current", "unit": "A", "source": "adc1", "rate_hz": 1000,
         "type": "h", "scale": 0.001, "offset": 0.0},
    ],
    # A ring short enough that part of the stall's drops are gone by the time
    # the laptop asks for them.
    "link": {"status_every_ms": 250, "descriptor_every_ms": 1000, "ring_frames": 70,
             "queue_frames": 8},
}
STEP_US = 1000


class Rig(RadiolessRun):
    """The board on simulated hardware, with a laptop writing a capture."""

    def __init__(self, path: Path) -> None:
        super().__init__(path, CONFIG, STEP_US)
        self.sent = 0  # bytes of link.keep already written to the capture

    def run_for(self, ms: int) -> None:
        for _ in range(ms * 1000 // STEP_US):
            self.turn()
            new = bytes(self.link.keep[self.sent :])
            self.sent = len(self.link.keep)
            if self.radio_up:
                for i in range(0, len(new), wire.MAX_WIRE):  # notification-sized records
                    self.capture.write(capture.RX, 0, new[i : i + wire.MAX_WIRE], self.t_ns,
                                       self.t_ns)


def _seqs(stream: bytes) -> list[int]:
    _, sink = decode_chunks([stream])
    return [seq for _, _, seq, fate in sink.frames if fate == "received"]


def test_queue_overflow_resend_and_a_cut_link(tmp_path: Path) -> None:
    rig = Rig(tmp_path / "run.slcap")
    rig.command(lambda e, r: e.start(r, 0, "loss"))
    rig.run_for(1500)
    rig.link.paused = True  # the link stalls: the board's queue overflows
    rig.run_for(2000)
    rig.link.paused = False
    rig.run_for(1500)
    stalled_drops = rig.board.ring.dropped
    # Ask again for all the board dropped: it still holds only the newer part.
    live = set(_seqs(bytes(rig.link.keep)))
    dropped = sorted(set(range(max(live))) - live)
    assert len(dropped) == stalled_drops > 20
    first, last = rig.board.ring.oldest(), dropped[-1]
    assert dropped[0] < first < last
    rig.laptop.run = rig.board.framer.run
    mark = len(rig.link.keep)
    rig.command(lambda e, r: e.resend(r, dropped[0], last))
    rig.laptop.run = 0
    rig.run_for(500)
    # What came back (a requested frame the ring overwrites before its turn is skipped).
    resent = set(_seqs(bytes(rig.link.keep[mark:]))) & set(dropped)
    assert resent and resent <= set(range(first, last + 1))
    # The radio goes dark for a while (the board keeps sending: bytes are lost).
    rig.event("disconnected")
    rig.radio_up = False
    rig.run_for(700)
    rig.radio_up = True
    rig.event("connected")
    rig.run_for(1500)
    rig.command(lambda e, r: e.command(wire.CMD_STOP, r))
    rig.run_for(100)
    rig.capture.close()
    assert rig.board.ring.dropped == stalled_drops  # no overflow after the stall

    (acc,) = [a for a in analyse(collect([tmp_path / "run.slcap"])) if a.expected > 10]
    assert acc.closes, acc.discrepancies
    assert acc.end_seen and acc.expected == len(rig.built)
    assert set(map(int, (acc.cls == RESEND).nonzero()[0])) == resent
    assert set(map(int, (acc.cls == DROPPED).nonzero()[0])) == set(dropped) - resent
    assert acc.terms["dropped_board"] == stalled_drops - len(resent)
    # The dark stretch: frames sent while the radio was down, lost on the radio.
    dark = [g for g in acc.gaps if g.cause == "disconnection"]
    assert len(dark) == 1 and dark[0].terms["lost"] == dark[0].frames > 5
    assert acc.terms["lost"] == dark[0].frames
    overflow = [g for g in acc.gaps if g.cause == "board_overflow"]
    assert len(overflow) == 1 and overflow[0].board_counted == stalled_drops
    assert not overflow[0].resendable  # the board answered not_held for the older part
    assert f"{dropped[0]}-{first - 1}" in " ".join(overflow[0].evidence)
    assert acc.terms["received"] == int((acc.cls == RECEIVED).sum())
    # Samples: every stream closes against END's totals, with the losses in samples.
    for s in acc.streams:
        assert s.expected_known and s.closes
        assert s.samples["dropped_board"] > 0 and s.samples["lost"] > 0
    # With the board's file mirror everything is recovered.
    mirror = tmp_path / "mirror.bin"
    mirror.write_bytes(b"".join(rig.built))
    (full,) = [a for a in analyse(collect([tmp_path / "run.slcap"], [mirror])) if a.expected > 10]
    assert full.closes and full.terms["lost"] == full.terms["dropped_board"] == 0
    assert full.terms["recovered_mirror"] == acc.terms["lost"] + acc.terms["dropped_board"]
