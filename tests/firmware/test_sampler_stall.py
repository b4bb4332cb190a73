"""The sampler across stalls: a mirror whose flash writes take board time.

Writing to internal flash stalls the board: erasing and programming a 4 KB
sector takes tens of milliseconds (common practice; a W25Q-class SPI NOR chip
is specified at about 45 ms typical per 4 KB sector erase, from memory). The
mirror here writes through a file wrapper that moves the simulated board
clock (simhw) on by STALL_US_PER_4K for every 4096 bytes written, so the
stall lands exactly where the board's own code writes. Runs on MicroPython and
CPython (board_runtime).
"""

from __future__ import annotations

import json

from collect_sink import collect

from slipless.protocol import wire

STALL_US_PER_4K = 30_000  # common practice: tens of ms per 4 KB on internal flash
PERIOD_US = 1000
CONFIG = {
    "board_id": 6,
    "streams": [{"id": k, "name": f"s{k}", "unit": "V", "source": f"adc{k}",
                 "rate_hz": 1_000_000 // PERIOD_US, "type": "h", "scale": 0.001, "offset": 0.0}
                for k in range(3)],
    "link": {"status_every_ms": 500, "descriptor_every_ms": 1000, "ring_frames": 64,
             "queue_frames": 48},
    "mirror": {"enabled": True, "path": "/tmp/stall-mirror.bin", "max_bytes": 1_000_000,
               "flush_every_ms": 250},
}

CODE = """
import json, config, os
from board import Board
from mirror import Mirror
from simhw import SimHW, SinkLink
path = {path!r}
try:
    os.remove(path)
except OSError:
    pass
cfg = config.validate(json.loads({cfg!r}))
hw = SimHW(start_us={start_us})
m = cfg['mirror']
mirror = Mirror(m['path'], m['max_bytes'], m['flush_every_ms'], hw.ticks_ms())

class StallingFile:
    # flash as the board sees it: each write holds the CPU for its share of a sector's time
    def __init__(self, f):
        self.f = f
        self.stalled_us = 0
    def write(self, data):
        us = {stall} * len(data) // 4096
        hw.advance(us)
        self.stalled_us += us
        return self.f.write(data)
    def flush(self):
        self.f.flush()
    def close(self):
        self.f.close()

mirror.f = StallingFile(mirror.f)
hw.on_frame = mirror.write
b = Board(cfg, hw, hw.next_run_id())
b.mirror = mirror
link = SinkLink(b.ring, keep=True)
b.link = link
b.command_bytes(bytes.fromhex({start!r}))
s0 = [(s.hi, s.lo) for s in b.sampler.streams]
t = 0
while t < 3_000_000:
    hw.advance(200)
    b.poll()
    mirror.poll(hw.ticks_ms())
    t += 200
b.stop(1)
link.poll()
from clock import UNIT_BITS
grid = []
for (hi0, lo0), s in zip(s0, b.sampler.streams):
    span = ((s.hi - hi0) << UNIT_BITS) + (s.lo - lo0)
    grid.append([s.stream, span, s.count, s.skipped])
print(json.dumps([grid, b.sampler.late, mirror.f.stalled_us]))
print(link.keep.hex())
"""


def test_samples_due_in_a_stall_are_skipped_and_counted(board_runtime) -> None:
    enc = wire.Encoder(0xFFFF, 0)
    start = enc.frame(enc.start(1, 0, "")).hex()
    code = CODE.format(path=CONFIG["mirror"]["path"], cfg=json.dumps(CONFIG), start=start,
                       stall=STALL_US_PER_4K, start_us=(1 << 30) - 1_000_000)  # ticks wrap mid-run
    stats, data = board_runtime(code).strip().split("\n")
    grid, late, stalled_us = json.loads(stats)
    assert stalled_us > 40_000  # the mirror wrote several 2 KB buffers: ~15 ms each
    # Exact per stream: every grid point since START was either taken or skipped.
    for stream, span, count, skipped in grid:
        assert span % PERIOD_US == 0, stream  # the schedule never left the period grid
        assert count + skipped == span // PERIOD_US, stream
        assert skipped > 0, stream
    assert late == sum(g[3] for g in grid)  # STATUS late = samples skipped, all streams

    dec, sink = collect([bytes.fromhex(data)])
    (run,) = [r for r in dec.runs.values() if r.samples]
    assert dec.missing(run) == 0 and dec.counters.corrupt == 0
    by_stream: dict[int, list[int]] = {}
    for _, _, stream, _, tick, _ in sink.samples_rows:
        by_stream.setdefault(stream, []).append(tick)
    for stream, _, count, skipped in grid:
        ticks = sorted(by_stream[stream])
        assert len(ticks) == len(set(ticks)) == count  # nothing lost, nothing twice
        t0 = ticks[0]
        assert all((t - t0) % PERIOD_US == 0 for t in ticks)  # stamped on the grid
        holes = sum((b - a) // PERIOD_US - 1 for a, b in zip(ticks, ticks[1:]))
        assert holes == skipped  # the laptop sees exactly the skipped samples as gaps
    # Taken samples were read within one period of their tick (STATUS jitter_us,
    # the largest delay since the previous STATUS).
    jitter = [row for row in sink.status_rows]
    assert jitter and max(r[3 + 7] for r in jitter) < PERIOD_US
    assert max(r[3 + 6] for r in jitter) == late  # and the last STATUS carries the total
