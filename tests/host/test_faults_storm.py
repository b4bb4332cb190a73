"""Faults in a whole run, with the board's own firmware on simulated hardware
(CPython, no radio): a disconnection storm of 20 short link cuts. At each cut
the radio first goes dark while the board still sends (those frames are lost
on the radio), then the board sees the link down and its send queue fills
and overflows (frames dropped on the board, counted by its STATUS frames).
After each reconnect the laptop asks again for what it is missing; the ring
still holds part of it. Afterwards every frame the capture (and the board's
mirror) holds must be in the tables at its true board time, and `slipless
loss --json` must put every other frame where the simulation put it.
Truth: what the simulated board built, sent and dropped, and which bytes
reached the laptop (the simulation's own record), never the decoder."""

from __future__ import annotations

import csv
import json
import random
import struct
from pathlib import Path

import pytest

from slipless.cli import main
from slipless.io import capture
from slipless.protocol import wire
from slipless.sim.radioless import RadiolessRun

CONFIG = {
    "board_id": 9,
    "streams": [{"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 1000,
                 "type": "h", "scale": 0.001, "offset": 0.0},
                {"id": 1, "name": "coil_current", "unit": "A", "source": "adc1",
                 "rate_hz": 1000, "type": "h", "scale": 0.001, "offset": 0.0}],
    # a ring short enough that the older part of a long cut's drops is gone when asked for
    "link": {"status_every_ms": 100, "descriptor_every_ms": 1000, "ring_frames": 28,
             "queue_frames": 4},
}
STEP_US = 1000
PERIOD_US = 1000
CUTS = 20


def _seq(frame: bytes) -> int:
    return wire.parse_header(wire.Deframer().feed(frame)[0])[4]


def _split(data: bytes) -> list[bytes]:
    """Whole frames (each with its 0x00) out of bytes the board sent."""
    return [p + b"\x00" for p in data.split(b"\x00")[:-1]]


class Storm(RadiolessRun):
    """The board on simulated hardware and a laptop writing a capture."""

    def __init__(self, path: Path) -> None:
        self.kinds: dict[int, int] = {}  # seq -> frame kind, filled as frames leave
        self.delivered: list[tuple[int, bool]] = []  # (seq, asked for before) as they arrived
        self.on_air_live: set[int] = set()  # seqs the board sent before anyone asked again
        self.asked: set[int] = set()
        super().__init__(path, CONFIG, STEP_US)

    def run_for(self, ms: int) -> None:
        for _ in range(ms * 1000 // STEP_US):
            self.turn()
            new = bytes(self.link.keep)
            self.link.keep.clear()
            for f in _split(new):
                body = wire.Deframer().feed(f)[0]
                seq = wire.parse_header(body)[4]
                self.kinds[seq] = body[0] & 0x0F
                if seq not in self.asked:
                    self.on_air_live.add(seq)
                if self.radio_up:  # one notification per frame
                    self.capture.write(capture.RX, 0, f, self.t_ns, self.t_ns)
                    self.delivered.append((seq, seq in self.asked))

    def ask_again(self) -> None:
        """The laptop asks for each run of seqs it is missing (and has not asked for)."""
        got = {s for s, _ in self.delivered}
        missing = sorted(set(range(max(got))) - got - self.asked)
        ranges: list[list[int]] = []
        for s in missing:
            if ranges and ranges[-1][1] == s - 1:
                ranges[-1][1] = s
            else:
                ranges.append([s, s])
        self.laptop.run = self.board.framer.run
        for first, last in ranges:
            self.asked |= set(range(first, last + 1))
            self.command(lambda e, r, a=first, b=last: e.resend(r, a, b))
        self.laptop.run = 0


@pytest.fixture(scope="module")
def storm(tmp_path_factory: pytest.TempPathFactory) -> dict:
    folder = tmp_path_factory.mktemp("storm")
    rng = random.Random(20)
    s = Storm(folder / "storm.slcap")
    s.command(lambda e, r: e.start(r, 0, "storm"))
    s.run_for(300)
    for i in range(CUTS):
        s.event("disconnected")
        s.radio_up = False
        s.run_for(rng.randint(40, 120))  # the radio is dark, the board still sends
        s.link.connected = False  # the board sees the link down: its queue fills
        s.run_for(rng.randint(20, 60) if i % 3 else rng.randint(300, 500))
        s.link.connected = True
        s.radio_up = True
        s.event("connected")
        s.ask_again()
        s.run_for(rng.randint(120, 250))
    s.ask_again()
    s.run_for(200)
    s.command(lambda e, r: e.command(wire.CMD_STOP, r))
    s.run_for(100)
    s.capture.close()
    mirror = folder / "mirror.bin"
    mirror.write_bytes(b"".join(s.built))
    return {"s": s, "cap": folder / "storm.slcap", "mirror": mirror, "folder": folder}


def _truth(s: Storm) -> dict[int, str]:
    """Each frame's term from the simulation's record alone. A frame the board
    dropped is `dropped_board` when a STATUS the laptop holds counts it (frame x
    is counted by STATUS b iff x <= b - 1 - Q: firmware/ring.py's queue); the
    frames the board drops while building its last STATUS and END at STOP
    (its queue is only Q = 4 here) no STATUS counts, so no tool can tell them
    from radio losses: they are `lost`, as loss.py defines it."""
    term: dict[int, str] = {}
    for seq, asked in s.delivered:
        term.setdefault(seq, "recovered_resend" if asked else "received")
    q = CONFIG["link"]["queue_frames"]
    statuses = [seq for seq, _ in s.delivered if s.kinds[seq] == wire.STATUS]
    counted = max(statuses) - 1 - q
    for f in s.built:
        seq = _seq(f)
        if seq not in term:
            dropped = seq not in s.on_air_live
            term[seq] = "dropped_board" if dropped and seq <= counted else "lost"
    return term


def _samples_truth(s: Storm, seqs: set[int]) -> set[tuple[int, int, int, int]]:
    """(stream, seq, tick, raw) of every sample in the frames `seqs`, read from the
    built bytes with the wire layout; the board's sampler puts sample k of a
    stream k periods after its first (checked here: the built frames tile the grid)."""
    rows: set[tuple[int, int, int, int]] = set()
    grid: dict[int, list[tuple[int, int]]] = {}
    for f in s.built:
        body = wire.Deframer().feed(f)[0]
        vk, _, _, seq = struct.unpack_from(wire.HEADER, body)
        if vk & 0x0F != wire.SAMPLES:
            continue
        stream, tick32 = struct.unpack_from(wire.SAMPLES_FIXED, body, wire.HEADER_SIZE)
        values = struct.unpack_from(f"<{(len(body) - 14) // 2}h", body, 14)
        grid.setdefault(stream, []).append((tick32, len(values)))
        if seq in seqs:
            rows |= {(stream, seq, tick32 + i * PERIOD_US, v) for i, v in enumerate(values)}
    assert set(grid) == {0, 1}
    for frames in grid.values():  # no gap, no overlap: the sampler's own time grid
        k = 0
        for tick, n in frames:
            assert tick == frames[0][0] + k * PERIOD_US
            k += n
    return rows


def _table(out: Path) -> set[tuple[int, int, int, int]]:
    with (out / "samples.csv").open(newline="") as f:
        return {(int(r["stream"]), int(r["seq"]), int(r["tick_us"]), int(float(r["raw"])))
                for r in csv.DictReader(f)}


def _loss(capsys: pytest.CaptureFixture[str], *argv: str) -> dict:
    capsys.readouterr()
    main(["loss", *argv, "--json"])
    (run,) = [r for r in json.loads(capsys.readouterr().out)["runs"] if r["frames_expected"] > 10]
    return run


def test_the_storm_really_happened(storm: dict) -> None:
    s: Storm = storm["s"]
    term = _truth(s)
    counts = {t: sum(1 for v in term.values() if v == t) for t in set(term.values())}
    assert counts["lost"] > CUTS and counts["dropped_board"] > 20
    assert counts["recovered_resend"] > 20
    # the board's own counter agrees with the frames it never sent live
    assert s.board.ring.dropped == sum(
        1 for seq, t in term.items() if seq not in s.on_air_live and t != "received")


def test_every_frame_held_is_in_the_tables_at_its_time(storm: dict) -> None:
    s: Storm = storm["s"]
    term = _truth(s)
    out = storm["folder"] / "tables"
    assert main(["decode", str(storm["cap"]), "--out", str(out), "--quiet"]) == 0
    held = {seq for seq, t in term.items() if t in ("received", "recovered_resend")}
    assert _table(out) == _samples_truth(s, held)
    out_m = storm["folder"] / "tables_m"
    assert main(["decode", str(storm["cap"]), "--mirror", str(storm["mirror"]), "--out",
                 str(out_m), "--quiet"]) == 0
    assert _table(out_m) == _samples_truth(s, set(term))


def test_the_loss_report_puts_every_frame_where_the_storm_did(
        storm: dict, capsys: pytest.CaptureFixture[str]) -> None:
    s: Storm = storm["s"]
    term = _truth(s)
    counts = {t: sum(1 for v in term.values() if v == t) for t in
              ("received", "recovered_resend", "lost", "dropped_board")}
    run = _loss(capsys, str(storm["cap"]))
    assert run["closes"] and run["end_seen"], run["discrepancies"]
    assert run["frames_expected"] == len(s.built)
    for t, n in counts.items():
        key = "frames_" + t
        assert run[key] == n, (key, run[key], n)
    assert run["frames_recovered_mirror"] == 0
    # with the board's mirror every frame is held; the mirror fills exactly the holes
    run_m = _loss(capsys, str(storm["cap"]), "--mirror", str(storm["mirror"]))
    assert run_m["closes"], run_m["discrepancies"]
    assert run_m["frames_lost"] == run_m["frames_dropped_board"] == 0
    assert run_m["frames_recovered_mirror"] == counts["lost"] + counts["dropped_board"]
    assert run_m["frames_received"] == counts["received"]
