"""The board's encoder, under real MicroPython, reproduces every golden vector's bytes."""

from __future__ import annotations

import json
from pathlib import Path

VECTORS = Path(__file__).resolve().parents[2] / "protocol" / "vectors"

RUN_ALL = """
import json, replay
cases = json.loads(open('/tmp/cases.json').read())
for name in sorted(cases):
    for f in replay.build(cases[name]):
        print(name, f.hex())
"""


def test_board_encoder_reproduces_vectors(micropython) -> None:
    cases = {}
    expected = []
    for p in sorted(VECTORS.glob("*.json")):
        case = json.loads(p.read_text())
        cases[p.stem] = {"ops": case["ops"]}
        expected += [f"{p.stem} {h}" for h in case["wire"]]
    out = micropython(RUN_ALL, files={
        "/lib/replay.py": (VECTORS / "replay.py").read_text(),
        "/tmp/cases.json": json.dumps(cases),
    })
    got = out.split()
    assert [" ".join(got[i : i + 2]) for i in range(0, len(got), 2)] == expected
    assert len(cases) >= 20


def test_board_deframer_reads_commands(micropython) -> None:
    # The board parses laptop commands with the same wire module.
    data = (VECTORS / "10-commands.bin").read_bytes()
    code = f"""
import wire
d = wire.Deframer()
data = bytes.fromhex('{data.hex()}')
bodies = []
for i in range(0, len(data), 20):   # 20-byte notifications
    bodies += d.feed(data[i:i + 20])
for b in bodies:
    v, kind, board, run, seq = wire.parse_header(b)
    print(v, kind, board, b[wire.HEADER_SIZE], d.corrupt)
"""
    rows = micropython(code).split("\n")[:-1]
    assert [r.split()[3] for r in rows] == ["1", "2", "3", "4", "5", "6"]
    assert all(r.split()[:3] == ["1", "9", "65535"] and r.split()[4] == "0" for r in rows)


def test_clock64_extends_ticks_for_a_day(micropython) -> None:
    # MicroPython docs, time module: ticks_us() wraps (2**30 on this port) and
    # only ticks_diff() gives a correct difference, for |d| < period/2.
    code = """
import time
from clock import Clock64
now = [time.ticks_us()]
def fake_ticks():
    return now[0]
c = Clock64(fake_ticks, time.ticks_diff)
total = 0
step = (1 << 28) + 12345          # about 4.5 min between calls, under the half period
while total < 24 * 3600 * 1000000:
    now[0] = time.ticks_add(now[0], step)
    total += step
    assert c.now() == total, (c.now(), total)
print(total, total // (1 << 30))
"""
    total, wraps = map(int, micropython(code).split())
    assert total >= 24 * 3600 * 1_000_000 and wraps >= 80
