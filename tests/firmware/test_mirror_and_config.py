"""The file mirror survives a power cut; a bad config on boot keeps the last good one."""

from __future__ import annotations

import json

from collect_sink import collect

from slipless.protocol import wire

CONFIG = {
    "board_id": 3,
    "streams": [{"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 1000,
                 "type": "h", "scale": 0.001, "offset": 0.0}],
    "mirror": {"enabled": True, "path": "/tmp/mirror.bin", "max_bytes": 4096,
               "flush_every_ms": 100},
}


def test_mirror_readable_after_power_cut(board_runtime) -> None:
    path = CONFIG["mirror"]["path"]
    enc = wire.Encoder(0xFFFF, 0)
    start = enc.frame(enc.start(1, 0, "")).hex()
    code = f"""
import json, config, os
from board import Board
from mirror import Mirror
from simhw import SimHW, SinkLink
try:
    os.remove({path!r})
except OSError:
    pass
cfg = config.validate(json.loads({json.dumps(CONFIG)!r}))
hw = SimHW()
m = cfg['mirror']
mirror = Mirror(m['path'], m['max_bytes'], m['flush_every_ms'], hw.ticks_ms())
hw.on_frame = mirror.write
b = Board(cfg, hw, hw.next_run_id())
b.link = SinkLink(b.ring)
b.command_bytes(bytes.fromhex({start!r}))
t = 0
while t < 3_000_000:
    hw.advance(200)
    b.poll()
    mirror.poll(hw.ticks_ms())
    t += 200
# power cut: no close(), whatever sits in RAM is lost
with open({path!r}, 'rb') as f:
    print(f.read().hex(), mirror.skipped, b.ring.head)
"""
    data, skipped, head = board_runtime(code).split()
    raw = bytes.fromhex(data)
    assert 0 < len(raw) <= 4096 and int(skipped) > 0  # the cap stopped it
    dec, sink = collect([raw])
    (run,) = dec.runs.values()
    # every frame that reached the file decodes; none is missing before the cut
    assert run.received > 10 and dec.missing(run) == 0 and dec.counters.corrupt == 0
    assert int(head) > run.received


def test_bad_config_on_boot_keeps_last_good(board_runtime) -> None:
    good = json.dumps({"board_id": 7})
    code = f"""
import config
with open('/tmp/c.json', 'w') as f:
    f.write({good!r})
c, err = config.load('/tmp/c.json', '/tmp/good.json')
print(c['board_id'], err)
with open('/tmp/c.json', 'w') as f:
    f.write('{{"board_id": 70000}}')
c, err = config.load('/tmp/c.json', '/tmp/good.json')
print(c['board_id'], err)
with open('/tmp/c.json', 'w') as f:
    f.write('not json')
c, err = config.load('/tmp/c.json', '/tmp/good.json')
print(c['board_id'], err)
"""
    out = board_runtime(code).strip().split("\n")
    assert out[0] == "7 None"
    assert out[1] == "7 config.board_id: must be between 1 and 65534"
    assert out[2] == "7 config: not valid JSON"


def test_full_filesystem_stops_the_mirror_not_the_run(board_runtime) -> None:
    """The filesystem refuses a write (ENOSPC, errno 28 in POSIX): the mirror stops and
    says why; sampling, the link and the run's END go on as before."""
    path = CONFIG["mirror"]["path"]
    enc = wire.Encoder(0xFFFF, 0)
    start = enc.frame(enc.start(1, 0, "")).hex()
    stop = enc.frame(enc.command(wire.CMD_STOP, 2)).hex()
    code = f"""
import json, config, os
from board import Board
from mirror import Mirror
from simhw import SimHW, SinkLink
class FullDisk:
    def __init__(self, f, room):
        self.f = f
        self.room = room
    def write(self, data):
        if len(data) > self.room:
            raise OSError(28)
        self.room -= len(data)
        return self.f.write(data)
    def flush(self):
        self.f.flush()
    def close(self):
        self.f.close()
try:
    os.remove({path!r})
except OSError:
    pass
cfg = config.validate(json.loads({json.dumps(CONFIG)!r}))
cfg['mirror']['max_bytes'] = 1 << 20
hw = SimHW()
m = cfg['mirror']
mirror = Mirror(m['path'], m['max_bytes'], m['flush_every_ms'], hw.ticks_ms())
mirror.f = FullDisk(mirror.f, 3000)
hw.on_frame = mirror.write
b = Board(cfg, hw, hw.next_run_id())
sink = SinkLink(b.ring)
b.link = sink
b.command_bytes(bytes.fromhex({start!r}))
for i in range(10000):
    hw.advance(200)
    b.poll()
    mirror.poll(hw.ticks_ms())
b.command_bytes(bytes.fromhex({stop!r}))
for i in range(50):
    hw.advance(200)
    b.poll()
print(mirror.failed, mirror.skipped > 0, b.ended, os.stat({path!r})[6] <= 3000)
"""
    assert board_runtime(code).split() == ["28", "True", "True", "True"]
