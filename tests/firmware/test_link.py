"""The BLE link on a stand-in `bluetooth` module (see sim_bluetooth.py: a mock,
because the WebAssembly port has no radio)."""

from __future__ import annotations

import json
from pathlib import Path

from collect_sink import collect

from slipless.protocol import wire

HERE = Path(__file__).resolve().parent
CONFIG = {
    "board_id": 2, "name": "rotor-a",
    "streams": [{"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 1000,
                 "type": "h", "scale": 0.001, "offset": 0.0}],
    "link": {"status_every_ms": 500, "descriptor_every_ms": 1000, "ring_frames": 64,
             "queue_frames": 48},
}

CODE = """
import json, config, bluetooth
from board import Board
from link import Link
from simhw import SimHW
cfg = config.validate(json.loads({cfg!r}))
hw = SimHW()
b = Board(cfg, hw, hw.next_run_id())
ble = bluetooth.BLE()
b.link = Link(ble, bluetooth, cfg['name'], b.ring, b.command_bytes)
print(ble.adv[1].hex(), ble.adv[2].hex())
ble.connect()
ble.mtu({mtu})
ble.write(bytes.fromhex({start!r})[:7])      # a command split over two writes
ble.write(bytes.fromhex({start!r})[7:])
def run_for(us, step=200):
    t = 0
    while t < us:
        hw.advance(step)
        b.poll()
        t += step
run_for(300_000)
ble.refuse = 5                                 # the controller queue is full for a while
run_for(300_000)
print(''.join(n.hex() + ',' for n in ble.notes))
print(max(len(n) for n in ble.notes), b.link.refused, b.ring.dropped)
"""


def run(micropython, mtu: int):
    enc = wire.Encoder(0xFFFF, 0)
    start = enc.frame(enc.start(1, 0, "x")).hex()
    out = micropython(CODE.format(cfg=json.dumps(CONFIG), mtu=mtu, start=start),
                      files={"/lib/bluetooth.py": (HERE / "sim_bluetooth.py").read_text()})
    first, notes, stats = out.strip().split("\n")
    adv, resp = first.split()
    return adv, resp, [bytes.fromhex(n) for n in notes.split(",") if n], stats.split()


def decode(notes: list[bytes]):
    return collect(notes)


def test_advertises_our_service(micropython) -> None:
    adv, resp, _, _ = run(micropython, 247)
    # Core spec Supplement, AD types: 0x01 flags, 0x07 complete list of 128-bit
    # service UUIDs, 0x09 complete local name (from memory).
    uuid_le = bytes(reversed(bytes.fromhex(wire.SERVICE_UUID.replace("-", ""))))
    assert bytes.fromhex(adv) == b"\x02\x01\x06\x11\x07" + uuid_le
    assert bytes.fromhex(resp) == b"\x08\x09rotor-a"


def test_large_mtu_whole_frames_nothing_lost(micropython) -> None:
    _, _, notes, (biggest, refused, dropped) = run(micropython, 247)
    assert int(biggest) <= 244 and int(refused) == 5 and int(dropped) == 0
    for n in notes:  # every notification holds whole frames only
        assert n.endswith(b"\x00")
    dec, sink = decode(notes)
    (run_,) = [r for r in dec.runs.values() if r.samples]
    assert dec.missing(run_) == 0 and dec.counters.corrupt == 0
    assert [r[3] for r in sink.replies].count("ack") == 1
    assert run_.samples >= 550


def test_default_mtu_splits_frames(micropython) -> None:
    _, _, notes, (biggest, refused, _) = run(micropython, 23)
    assert int(biggest) == 20 and int(refused) == 5
    dec, _ = decode(notes)
    (run_,) = [r for r in dec.runs.values() if r.samples]
    assert dec.missing(run_) == 0 and dec.counters.corrupt == 0


PULL_CODE = """
import json, config, bluetooth, os
from board import Board
from link import Link
from mirror import Mirror
from simhw import SimHW
try:
    os.remove('/tmp/pull-mirror.bin')
except OSError:
    pass
cfg = config.validate(json.loads({cfg!r}))
hw = SimHW()
m = cfg['mirror']
mirror = Mirror(m['path'], m['max_bytes'], m['flush_every_ms'], hw.ticks_ms())
hw.on_frame = mirror.write
b = Board(cfg, hw, hw.next_run_id())
b.mirror = mirror
ble = bluetooth.BLE()
b.link = Link(ble, bluetooth, cfg['name'], b.ring, b.command_bytes)
ble.connect()
ble.mtu({mtu})
def run_for(us, step=200):
    t = 0
    while t < us:
        hw.advance(step)
        b.poll()
        mirror.poll(hw.ticks_ms())
        t += step
ble.write(bytes.fromhex({start!r}))
run_for(400_000)
ble.write(bytes.fromhex({stop!r}))
run_for(20_000)
live = len(ble.notes)
ble.write(bytes.fromhex({pull!r}))
run_for(300_000)
print(''.join(n.hex() + ',' for n in ble.notes[:live]))
print(''.join(n.hex() + ',' for n in ble.notes[live:]))
"""


def test_pull_streams_the_mirror_between_live_frames(micropython) -> None:
    cfg = dict(CONFIG, mirror={"enabled": True, "path": "/tmp/pull-mirror.bin",
                               "max_bytes": 100000, "flush_every_ms": 100})
    enc = wire.Encoder(0xFFFF, 0)
    start = enc.frame(enc.start(1, 0, "")).hex()
    stop = enc.frame(enc.command(wire.CMD_STOP, 2)).hex()
    pull = enc.frame(enc.command(wire.CMD_PULL, 3)).hex()
    for mtu in (247, 23):
        out = micropython(PULL_CODE.format(cfg=json.dumps(cfg), mtu=mtu, start=start, stop=stop,
                                           pull=pull),
                          files={"/lib/bluetooth.py": (HERE / "sim_bluetooth.py").read_text()})
        live_hex, pulled_hex = out.strip().split("\n")
        live = [bytes.fromhex(n) for n in live_hex.split(",") if n]
        pulled = [bytes.fromhex(n) for n in pulled_hex.split(",") if n]
        assert max(len(n) for n in pulled) <= mtu - 3
        dec, sink = decode(live + pulled)
        assert dec.counters.corrupt == 0 and dec.counters.overlong == 0
        (run_,) = [r for r in dec.runs.values() if r.samples]
        assert run_.duplicates >= run_.received // 2  # the mirror copy of the run came again
        acks = [r for r in sink.replies if r[3] == "ack"]
        assert len(acks) == 3  # start, stop, and pull after the last mirror byte
