"""The link on the two kinds of BLE stack the board's ports have, and the
connection-parameter events, run on real MicroPython.

The stack is the stand-in tests/firmware/sim_bluetooth.py (a mock: the
WebAssembly port has no radio). With `unbounded` set it behaves as
MicroPython's BTstack binding does (extmod/btstack/modbluetooth_btstack.c,
mp_bluetooth_gatts_notify_indicate, read for this test): when the controller's
buffers are full it copies the value onto the heap, asks to be told when it
can send, and returns success, so gatts_notify never refuses. Each connection
event of the stand-in's radio carries a set number of the queued values.
"""

from __future__ import annotations

import json
from pathlib import Path

from collect_sink import collect

from slipless.protocol import wire

HERE = Path(__file__).resolve().parent
BLUETOOTH = {"/lib/bluetooth.py": (HERE / "sim_bluetooth.py").read_text()}
PICO_W = json.loads((HERE.parents[1] / "firmware" / "profiles" / "pico-w.json").read_text())

FAST = [{"id": k, "name": f"s{k}", "unit": "V", "source": f"adc{k}", "rate_hz": 5000,
         "type": "h", "scale": 0.001, "offset": 0.0} for k in range(4)]
CONFIG = {"board_id": 2, "name": "rotor-a", "streams": FAST,
          "link": {"status_every_ms": 500, "descriptor_every_ms": 1000, "ring_frames": 64,
                   "queue_frames": 32}}
HEAP = 200_000  # the stand-in board's heap, bytes; the stack's queue comes out of it

CODE = """
import json, config, bluetooth
from board import Board
from link import Link
from simhw import SimHW
cfg = config.validate(json.loads({cfg!r}))
hw = SimHW()
b = Board(cfg, hw, hw.next_run_id())
ble = bluetooth.BLE()
ble.unbounded = {unbounded}
stack = json.loads({stack!r})
b.link = Link(ble, bluetooth, cfg['name'], b.ring, b.command_bytes, stack=stack,
              on_conn_params=b.conn_params, ticks_us=hw.ticks_us,
              free_heap=lambda: {heap} - ble.queued_bytes)
ble.connect()
ble.mtu(247)
b.command_bytes(bytes.fromhex({start!r}))
radio = [{event_us}, {carry}, 0]   # connection event period, values carried per event, phase
def run_for(us, step=100):
    t = 0
    while t < us:
        hw.advance(step)
        b.poll()
        t += step
        radio[2] += step
        if radio[2] >= radio[0]:
            radio[2] -= radio[0]
            ble.drain(radio[1])
{script}
r = b.ring
frames_out = sum(n.count(b"\\x00") for n in ble.notes)   # each frame ends in its one zero byte
print(json.dumps([ble.max_queued, ble.max_queued_bytes, len(ble.notes), frames_out,
                  r.pending(), b.link._tx_frames, r.dropped, r.head, b.link.held,
                  b.link.heap_low, b.link.interval_us]))
print(''.join(n.hex() + ',' for n in ble.notes))
"""

KEYS = ("max_queued", "max_queued_bytes", "notes", "frames_out", "pending", "in_tx", "dropped",
        "built", "held", "heap_low", "interval_us")


def start_hex() -> str:
    enc = wire.Encoder(0xFFFF, 0)
    return enc.frame(enc.start(1, 0, "")).hex()


def run(micropython, stack: dict | None, event_us: int, carry: int, script: str,
        cfg: dict = CONFIG, unbounded: bool = True) -> tuple[dict, list[bytes]]:
    code = CODE.format(cfg=json.dumps(cfg), stack=json.dumps(stack), start=start_hex(),
                       heap=HEAP, event_us=event_us, carry=carry, script=script,
                       unbounded=unbounded)
    stats, notes = micropython(code, files=BLUETOOTH).strip().split("\n")
    return dict(zip(KEYS, json.loads(stats))), [bytes.fromhex(n) for n in notes.split(",") if n]


def account_closes(s: dict) -> bool:
    # Every frame built is in exactly one place: handed to the stack, still in
    # the ring's send queue, packed in the link's buffer, or pushed out and
    # counted in ring.dropped (the STATUS drop counter).
    return s["frames_out"] + s["pending"] + s["in_tx"] + s["dropped"] == s["built"]


def test_unpaced_never_refusing_stack_grows_without_bound(micropython) -> None:
    # The problem: without pacing the board feeds a never-refusing stack as
    # fast as it builds frames; a radio carrying 2 per 30 ms event falls behind.
    s, _ = run(micropython, None, 30_000, 2, "run_for(1_000_000)")
    assert s["max_queued"] > 80 and s["dropped"] == 0  # nothing counted, the heap holds it all
    assert account_closes(s)


def test_paced_queue_is_bounded_and_the_account_exact(micropython) -> None:
    # The radio carries 6 per 30 ms event, more than the pace allows (4 per
    # assumed 50 ms interval): the stack's queue stays within about two
    # intervals' credit, and what the pace holds back is dropped by the ring
    # and counted there, frame for frame.
    s, notes = run(micropython, PICO_W["ble"], 30_000, 6, "run_for(1_000_000)")
    assert s["max_queued"] <= 2 * PICO_W["ble"]["notify_per_interval"]
    assert s["held"] > 0 and s["dropped"] > 0 and s["interval_us"] == 50_000
    assert account_closes(s)
    assert s["notes"] <= 4 * (1_000_000 // 50_000 + 1)  # at most 4 per 50 ms from the start
    dec, _ = collect(notes)
    assert dec.counters.corrupt == 0


def test_slow_radio_held_by_the_heap_floor(micropython) -> None:
    # A radio that carries only 1 per event: pacing alone would still let the
    # queue grow; the free-heap floor stops feeding it, so the queue never takes
    # more than the floor allows plus one interval's credit of full notifications.
    floor_gap = 8000
    stack = dict(PICO_W["ble"], min_free_heap=HEAP - floor_gap)
    s, _ = run(micropython, stack, 30_000, 1, "run_for(2_000_000)")
    assert s["heap_low"] > 0
    assert s["max_queued_bytes"] <= floor_gap + stack["notify_per_interval"] * 244
    assert account_closes(s)


def test_pace_follows_the_connection_interval(micropython) -> None:
    # After the central moves the connection to 7.5 ms (6 units of 1.25 ms),
    # the credit renews every 7.5 ms: all the data goes out, none is dropped.
    script = """
run_for(500_000)
before = (len(ble.notes), b.ring.dropped)
ble.conn_update(6, 0, 200)
run_for(500_000)
print(json.dumps([before[0], len(ble.notes) - before[0], before[1], b.ring.dropped - before[1]]))
"""
    code = CODE.format(cfg=json.dumps(CONFIG), stack=json.dumps(PICO_W["ble"]), start=start_hex(),
                       heap=HEAP, event_us=7_500, carry=6, script=script, unbounded=True)
    lines = micropython(code, files=BLUETOOTH).strip().split("\n")
    n_before, n_after, drop_before, drop_after = json.loads(lines[0])
    s = dict(zip(KEYS, json.loads(lines[1])))
    assert s["interval_us"] == 7_500
    assert n_before <= 4 * 11 and drop_before > 0  # 4 per assumed 50 ms: the data is faster
    assert n_after > 2 * n_before and drop_after == 0
    assert s["max_queued"] <= 2 * 4 and account_closes(s)


def test_connection_update_logged_as_three_events_at_one_tick(micropython) -> None:
    # MicroPython docs (bluetooth.rst): _IRQ_CONNECTION_UPDATE = 27, data
    # (conn_handle, conn_interval, conn_latency, supervision_timeout, status).
    # Units: interval 1.25 ms, timeout 10 ms (Core spec, from memory; the
    # BTstack binding prints the interval as units * 125 / 100 ms).
    slow = [dict(FAST[0], rate_hz=1000)]
    script = """
run_for(100_000)
ble.conn_update(24, 4, 300)         # 30 ms, 4 events, 3 s
ble.conn_update(40, 0, 400, status=1)  # refused by the controller: not logged
run_for(100_000)
"""
    cfg = dict(CONFIG, streams=slow)
    s, notes = run(micropython, None, 7_500, 100, script, cfg=cfg, unbounded=False)
    assert s["interval_us"] == 30_000  # learnt, though this stack is not paced
    _, sink = collect(notes)
    conn = [(tick, code, value) for _, _, _, tick, code, value in sink.events
            if code in (wire.EV_CONN_INTERVAL, wire.EV_CONN_LATENCY, wire.EV_CONN_TIMEOUT)]
    assert [(c, v) for _, c, v in conn] == [(wire.EV_CONN_INTERVAL, 30_000),
                                            (wire.EV_CONN_LATENCY, 4), (wire.EV_CONN_TIMEOUT, 3000)]
    assert len({t for t, _, _ in conn}) == 1
    assert 100_000 <= conn[0][0] <= 110_000  # logged by the main loop right after the IRQ


def test_frames_in_the_buffer_at_a_disconnection_are_sent_after(micropython) -> None:
    # The refusing stack (NimBLE) is full when the link drops: the frames packed
    # in the link's buffer go back to the ring's send queue, not into the void.
    slow = [dict(FAST[0], rate_hz=1000)]
    script = """
run_for(200_000)
ble.refuse = 10**6
run_for(60_000)
packed = b.link._tx_frames
ble.disconnect()
run_for(20_000)
ble.refuse = 0
ble.connect()
ble.mtu(247)
run_for(300_000)
print(packed)
"""
    cfg = dict(CONFIG, streams=slow)
    code = CODE.format(cfg=json.dumps(cfg), stack=json.dumps(None), start=start_hex(), heap=HEAP,
                       event_us=7_500, carry=100, script=script, unbounded=False)
    packed, stats, notes_hex = micropython(code, files=BLUETOOTH).strip().split("\n")
    s = dict(zip(KEYS, json.loads(stats)))
    assert int(packed) >= 1 and s["dropped"] == 0
    dec, _ = collect([bytes.fromhex(n) for n in notes_hex.split(",") if n])
    (run_,) = [r for r in dec.runs.values() if r.samples]
    assert dec.missing(run_) == 0


def test_paced_link_allocates_nothing_per_frame(micropython) -> None:
    # MicroPython docs, gc.mem_alloc(): heap in use; with the collector off any
    # allocation shows as growth. The stand-in's gatts_notify (which keeps
    # copies) is swapped for one that keeps nothing, so only board code counts.
    script = """
import gc
sent = [0]
def notify(conn, handle, data):
    sent[0] += 1
ble.gatts_notify = notify
ble.conn_update(6, 0, 200)
run_for(300_000)                    # warm up
gc.collect()
gc.disable()
f0 = b.ring.head
a = gc.mem_alloc()
while b.ring.head - f0 < 500:
    hw.advance(100)
    b.poll()
d = gc.mem_alloc() - a
gc.enable()
print(json.dumps([b.ring.head - f0, d, sent[0]]))
"""
    stack = dict(PICO_W["ble"], min_free_heap=1000)
    code = CODE.format(cfg=json.dumps(CONFIG), stack=json.dumps(stack), start=start_hex(),
                       heap=HEAP, event_us=7_500, carry=6, script=script, unbounded=True)
    frames, delta, sent = json.loads(micropython(code, files=BLUETOOTH).strip().split("\n")[0])
    assert frames >= 500 and sent > 100
    assert delta == 0, f"{delta} bytes allocated over {frames} frames"
