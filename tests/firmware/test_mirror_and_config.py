"""The file mirror survives a power cut; a bad config on boot keeps the last good one."""

from __future__ import annotations

import json

from slipless.decoder import collect
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
