"""The board core on a simulated hardware layer: sampling, pulse program,
frames and replies, decoded by the laptop's decoder."""

from __future__ import annotations

import json

from collect_sink import CollectSink, collect

from slipless.decode.decoder import Decoder
from slipless.protocol import wire

CONFIG = {
    "board_id": 5,
    "streams": [
        {"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 1000, "type": "h",
         "scale": 0.001, "offset": 0.0},
        {"id": 1, "name": "coil_current", "unit": "A", "source": "adc1", "rate_hz": 1000,
         "type": "h", "scale": 0.001, "offset": 0.0},
        {"id": 3, "name": "coil_state", "unit": "", "source": "coil_state", "rate_hz": 50,
         "type": "b", "scale": 1.0, "offset": 0.0, "state": True},
    ],
    "coil": {"program": [[1, 200], [0, 200], [-1, 200], [0, 200]], "repeat": 2,
             "max_on_ms": 1000, "max_duty": 0.5, "duty_window_ms": 2000,
             "link_timeout_ms": 500},
    "link": {"status_every_ms": 500, "descriptor_every_ms": 1000, "ring_frames": 64,
             "queue_frames": 32},
}

SETUP = """
import json, config, wire
from board import Board
from simhw import SimHW, SinkLink
cfg = config.validate(json.loads({cfg!r}))
hw = SimHW(start_us={start_us})
b = Board(cfg, hw, hw.next_run_id())
link = SinkLink(b.ring, keep=True)
b.link = link
def run_for(us, step=100):
    t = 0
    while t < us:
        hw.advance(step)
        b.poll()
        t += step
def cmd(frame_hex):
    b.command_bytes(bytes.fromhex(frame_hex))
"""


def setup(cfg=CONFIG, start_us=0) -> str:
    return SETUP.format(cfg=json.dumps(cfg), start_us=start_us)


def decode(hexdata: str) -> tuple[Decoder, CollectSink]:
    return collect([bytes.fromhex(hexdata)])


def laptop(opcode_builder) -> str:
    enc = wire.Encoder(0xFFFF, 0)
    return enc.frame(opcode_builder(enc)).hex()


def test_pulsed_run_end_to_end(board_runtime) -> None:
    start = laptop(lambda e: e.start(1, 0, "run A"))
    code = setup(start_us=(1 << 30) - 300_000) + f"""
cmd({start!r})
run_for(2_000_000)
print(link.keep.hex())
print(hw.in1.v, hw.in2.v, hw.enable.v, b.running)
"""
    out = board_runtime(code).split()
    dec, sink = decode(out[0])
    assert out[1:] == ["0", "0", "0", "False"]  # coil off, run over
    runs = {k: r for k, r in dec.runs.items() if r.samples}
    (run,) = runs.values()
    assert run.end is not None and run.end["reason"] == 2  # program_done
    assert dec.missing(run) == 0 and dec.counters.corrupt == 0
    by_stream: dict[int, list[int]] = {}
    for board, _, stream, _, tick, _ in sink.samples_rows:
        assert board == 5
        by_stream.setdefault(stream, []).append(tick)
    # 4 steps x 200 ms x 2 cycles = 1.6 s of program, sampled at 1 kHz on a
    # nominal grid: consecutive ticks exactly one period apart.
    for stream, period in ((0, 1000), (1, 1000), (3, 20000)):
        ticks = sorted(by_stream[stream])
        assert all(b - a == period for a, b in zip(ticks, ticks[1:])), stream
        assert len(ticks) >= 1_600_000 // period
    totals = {t["stream"]: t["samples"] for t in run.end["totals"]}
    assert totals == {s: len(v) for s, v in by_stream.items()}
    coil = [(tick, value) for _, _, _, tick, code, value in sink.events if code == wire.EV_COIL]
    states = [v for _, v in coil]
    assert states[:8] == [1, 0, -1, 0, 1, 0, -1, 0]
    gaps = [b[0] - a[0] for a, b in zip(coil, coil[1:4])]
    assert all(abs(g - 200_000) <= 1000 for g in gaps)  # state changes 200 ms apart (+-1 ms loop)
    acks = [r for r in sink.replies if r[3] == "ack"]
    assert len(acks) == 1


def test_commands_answered(board_runtime) -> None:
    frames = [
        laptop(lambda e: e.ping(1, 123456789)),
        laptop(lambda e: e.command(wire.CMD_STATUS, 2)),
        laptop(lambda e: e.set_config(3, "coil.repeat", "5")),
        laptop(lambda e: e.set_config(4, "coil.max_duty", "0.9")),  # over the hard limit
        laptop(lambda e: e.command(42, 5)),  # unknown opcode
        laptop(lambda e: e.command(wire.CMD_STOP, 6, b"junk")),  # bad arguments
        laptop(lambda e: e.resend(7, 0, 3)),
        laptop(lambda e: e.command(wire.CMD_STOP, 8)),
    ]
    code = setup() + f"""
for f in {frames!r}:
    cmd(f)
run_for(1000)
print(link.keep.hex())
print(hw.saved is not None and json.loads(hw.saved)["coil"]["repeat"])
"""
    out = board_runtime(code).split()
    _, sink = decode(out[0])
    assert out[1] == "5"
    replies = [r[3] for r in sink.replies]
    assert replies.count("sync") == 1
    assert replies.count("error") == 3 and replies.count("ack") >= 4


def test_resend_and_not_held(board_runtime) -> None:
    cfg = dict(CONFIG, link={"status_every_ms": 500, "descriptor_every_ms": 1000,
                             "ring_frames": 8, "queue_frames": 8})
    start = laptop(lambda e: e.start(1, 0, ""))
    resend = laptop(lambda e: e.resend(9, 0, 30))
    code = setup(cfg) + f"""
cmd({start!r})
run_for(600_000)
before = link.frames
cmd({resend!r})
run_for(100)
print(link.keep.hex(), link.frames - before, b.ring.head)
"""
    out = board_runtime(code).split()
    _, sink = decode(out[0])
    head = int(out[2])
    errors = [r for r in sink.replies if r[3] == "error"]
    assert errors, "resend of overwritten frames must be refused"
    dup = [f for f in sink.frames if f[3] == "duplicate"]
    assert len(dup) >= 8 - 2 and head > 8  # the held ones came again (as duplicates here)


def test_zero_allocation_per_frame(micropython) -> None:
    # MicroPython docs, gc.mem_alloc(): bytes of heap in use. With the collector
    # off, any allocation shows up as growth.
    start = laptop(lambda e: e.start(1, 0, ""))
    fast = [dict(s, id=k, rate_hz=5000) for k, s in enumerate(CONFIG["streams"][:2] * 2)]
    cfg = dict(CONFIG, streams=fast + [dict(CONFIG["streams"][2], id=9)],
               coil=dict(CONFIG["coil"], repeat=1000))  # the program runs throughout
    code = setup(cfg) + f"""
import gc
link.keep = None
cmd({start!r})
run_for(2_100_000)          # warm up: every frame kind built at least once
gc.collect()
gc.disable()
f0 = b.ring.head
a = gc.mem_alloc()
while b.ring.head - f0 < 1000:
    hw.advance(100)
    b.poll()
d = gc.mem_alloc() - a
gc.enable()
print(b.ring.head - f0, d, b.running)
"""
    frames, delta, running = micropython(code).split()
    frames, delta = int(frames), int(delta)
    assert frames >= 1000 and running == "True"
    assert delta == 0, f"{delta} bytes allocated over {frames} frames"


def test_coil_off_at_boot_and_on_error(board_runtime) -> None:
    start = laptop(lambda e: e.start(7, 0, ""))
    code = setup() + f"""
print(hw.in1.v, hw.in2.v, hw.enable.v)
cmd({start!r})
run_for(50_000)
print(hw.enable.v)
hw.fail = 'adc1'
b.sampler.streams[1].read = hw.channel('adc1')
try:
    run_for(5000)
except OSError:
    print('raised')
link.poll()
print(hw.in1.v, hw.in2.v, hw.enable.v, b.running)
print(link.keep.hex())
"""
    out = board_runtime(code).split()
    assert out[:3] == ["0", "0", "0"] and out[3] == "1"
    assert out[4] == "raised" and out[5:9] == ["0", "0", "0", "False"]
    dec, sink = decode(out[9])
    safety = [e for e in sink.events if e[4] == wire.EV_SAFETY]
    assert safety and safety[-1][5] == 4  # TRIP_ERROR
    ends = [r for r in sink.replies if r[3] == "end"]
    assert ends


def test_link_timeout_turns_coil_off(board_runtime) -> None:
    start = laptop(lambda e: e.start(7, 0, ""))
    code = setup() + f"""
cmd({start!r})
run_for(50_000)
on = hw.enable.v
link.connected = False
run_for(400_000)
still = hw.enable.v
run_for(200_000)
link.connected = True
run_for(10_000)
print(on, still, hw.enable.v, link.keep.hex())
"""
    on, still, after, data = board_runtime(code).split()
    assert (on, still, after) == ("1", "1", "0")  # link_timeout_ms = 500
    _, sink = decode(data)
    assert [e[5] for e in sink.events if e[4] == wire.EV_SAFETY] == [3]  # TRIP_LINK


def test_queue_overflow_counted(board_runtime) -> None:
    start = laptop(lambda e: e.start(1, 0, ""))
    status = laptop(lambda e: e.command(wire.CMD_STATUS, 3))
    code = setup() + f"""
cmd({start!r})
run_for(10_000)
link.paused = True
run_for(2_000_000, step=250)
dropped = b.ring.dropped
cmd({status!r})
link.paused = False
run_for(100)
print(dropped, link.keep.hex())
"""
    dropped, data = board_runtime(code).split()
    assert int(dropped) > 0
    _, sink = decode(data)
    assert max(r[3 + 5] for r in sink.status_rows) == int(dropped)
