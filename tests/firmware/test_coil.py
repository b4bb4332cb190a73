"""Coil limits the board enforces whatever the config says."""

from __future__ import annotations

CODE = """
from coil import Coil, HBridge, Program, TRIP_ON_TIME, TRIP_DUTY
from simhw import Pin
from config import HARD_MAX_ON_MS, HARD_MAX_DUTY
p = [Pin(), Pin(), Pin()]
out = []
# on-time: a config asking for more than the hard cap gets the cap
c = Coil(HBridge(*p), 0, 10 ** 6, 0.9, 100000)
out.append(c.max_on_ms == HARD_MAX_ON_MS and c.max_duty == HARD_MAX_DUTY)
c = Coil(HBridge(*p), 0, 500, 0.5, 100000)
c.set(1, 0)
out.append((p[0].v, p[1].v, p[2].v))
out.append(c.check(499))
out.append(c.check(500))
out.append((c.state, p[2].v))
# duty: 30 % of a 1 s window
c = Coil(HBridge(*p), 0, 1000, 0.3, 1000)
out.append(c.set(-1, 0))
out.append((p[0].v, p[1].v, p[2].v))
out.append(c.check(299))
out.append(c.check(300))
out.append(c.set(1, 400))        # budget spent: refused
out.append(c.set(1, 2000))       # a window later: allowed again
# shoot-through guard: enable drops before the direction changes
c = Coil(HBridge(*p), 0, 1000, 0.5, 10000)
c.set(1, 0)
seq = []
for pin in p:
    pin.changes = 0
c.set(-1, 10)
out.append((p[0].v, p[1].v, p[2].v))
# a program of [state, ms] steps
pr = Program([[1, 100], [0, 50], [-1, 100]], 2)
pr.start(0)
states = []
for t in range(0, 600, 10):
    pr.advance(t)
    states.append(pr.state())
out.append(''.join('+0-'[1 - s] for s in states[::5]))
out.append((pr.done, pr.running))
for o in out:
    print(o)
"""


def test_coil_limits(board_runtime) -> None:
    out = board_runtime(CODE).strip().split("\n")
    assert out[0] == "True"
    assert out[1] == "(1, 0, 1)"
    assert out[2:5] == ["0", "1", "(0, 0)"]  # TRIP_ON_TIME at 500 ms
    assert out[5] == "0" and out[6] == "(0, 1, 1)"
    assert out[7:9] == ["0", "2"]  # TRIP_DUTY once 300 ms of the 1 s window are used
    assert out[9] == "2" and out[10] == "0"
    assert out[11] == "(0, 1, 1)"
    # 10 ms steps sampled every 50 ms: + + 0 - - + + 0 - - then off after 2 cycles
    assert out[12] == "++0--++0--00"
    assert out[13] == "(True, False)"
