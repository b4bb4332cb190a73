"""The live view's state and alarms, fed real frames through the real decoder.

Frames are built with the wire encoder (SPEC.md); each check says what it is
checked against: numpy's reductions for the display bins (common practice),
scipy's cumulative trapezoid for the rotor angle, the encoder's own clock for
the offset, and the alarm rules' documented thresholds.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.integrate import cumulative_trapezoid

from slipless.decode.decoder import Arrival, Decoder
from slipless.live.state import LiveState, WatchOptions
from slipless.protocol import wire

H = 0x68  # int16
HZ = 1_000_000
PERIOD = 1000  # 1 kHz
N = 50  # samples a frame
STREAMS = [(0, H, 0, PERIOD, 0.001, 0.0, "cap_amp", "V"),
           (1, H, 0, PERIOD, 0.001, 0.0, "coil_current", "A"),
           (2, H, 0, PERIOD, 0.001, 0.0, "gyro_z", "rad/s")]


class Rig:
    """A board's frames, fed to a decoder whose sink is a LiveState, with laptop
    receive times equal to the board's time plus a fixed delay."""

    def __init__(self, opts: WatchOptions | None = None) -> None:
        self.enc = wire.Encoder(1, 1)
        self.state = LiveState(opts or WatchOptions())
        self.dec = Decoder(self.state, flush_bytes=1)
        self.tick = 0
        self.send(self.enc.descriptor(0, HZ, (1, 2, 3), 5000, 3, STREAMS))

    def mono(self, tick: int | None = None) -> int:
        return 10**9 + (self.tick if tick is None else tick) * 1000 + 5_000_000

    def send(self, n: int, lost: bool = False) -> None:
        data = self.enc.frame(n)
        if not lost:
            self.dec.feed(data, Arrival(0, self.mono(), self.mono(), "radio"))

    def block(self, values: dict[int, np.ndarray], lost: bool = False,
              lose: frozenset[int] = frozenset()) -> None:
        """One frame per stream of N samples from self.tick, then time moves on;
        all are lost on the way (lost), or those of the streams in `lose`."""
        for sid, v in values.items():
            self.send(self.enc.samples(sid, self.tick, H, np.asarray(v, np.int16).tolist()),
                      lost or sid in lose)
        self.tick += N * PERIOD

    def snap(self) -> dict:
        self.dec._flush()
        return self.state.snapshot(self.mono())


def test_display_bins_are_the_min_and_max_of_their_samples() -> None:
    rig = Rig(WatchOptions(window_s=2.0, points=40))  # 50 ms bins
    rng = np.random.default_rng(1)
    every = []
    for _ in range(60):  # 3 s: the ring holds the last 2
        v = rng.integers(-3000, 3000, N)
        every.append(v)
        rig.block({0: v})
    s = next(x for x in rig.snap()["streams"] if x["name"] == "cap_amp")
    values = np.concatenate(every) * 0.001
    ticks = np.arange(values.size) * PERIOD
    width = int(2.0 * HZ / 40)
    for t, lo, hi in zip(s["t_s"], s["lo"], s["hi"]):
        b = int(round(t * HZ / width - 0.5))
        sel = ticks // width == b  # numpy reductions over the same bin (common practice)
        assert lo == pytest.approx(values[sel].min()) and hi == pytest.approx(values[sel].max())
    assert len(s["t_s"]) == 40 and s["last"] == pytest.approx(values[-1])


def test_rail_alarm_names_the_stream_and_its_full_scale() -> None:
    rig = Rig()
    rig.block({0: np.full(N, 100)})
    assert not any(a["id"].startswith("rail") for a in rig.snap()["alarms"])
    rig.block({0: np.r_[np.full(N - 1, 100), 32767]})  # int16 full scale
    snap = rig.snap()
    s = next(x for x in snap["streams"] if x["name"] == "cap_amp")
    assert s["near_rail"] and s["rails"] == pytest.approx([-32.768, 32.767])
    (alarm,) = [a for a in snap["alarms"] if a["id"] == "rail.1.1.0"]
    assert alarm["active"] and "cap_amp" in alarm["text"] and alarm["level"] == "warn"


@pytest.mark.parametrize(("mv", "level"), [(3600, None), (3420, "warn"), (3250, "alarm")])
def test_battery_thresholds(mv: int, level: str | None) -> None:
    rig = Rig()
    rig.send(rig.enc.status(rig.tick, mv, 2500, 90000, 3, 0, 0, 50))
    got = [a for a in rig.snap()["alarms"] if a["id"] == "battery.1"]
    assert [a["level"] for a in got] == ([level] if level else [])
    b = rig.snap()["boards"][0]
    assert b["battery_v"] == pytest.approx(mv / 1000) and b["temp_c"] == pytest.approx(25.0)


def test_board_drops_raise_an_alarm_that_clears() -> None:
    rig = Rig(WatchOptions(held_s=2.0))
    rig.send(rig.enc.status(rig.tick, 3900, 2500, 90000, 3, 0, 0, 50))
    rig.block({0: np.zeros(N)})
    rig.send(rig.enc.status(rig.tick, 3900, 2500, 90000, 8, 7, 0, 50))
    ids = {a["id"]: a for a in rig.snap()["alarms"]}
    assert ids["dropped.1.1"]["active"] and "dropped 7 frames" in ids["dropped.1.1"]["text"]
    for _ in range(60):  # 3 s later, no further drops
        rig.block({0: np.zeros(N)})
    ids = {a["id"]: a for a in rig.snap()["alarms"]}
    assert not ids["dropped.1.1"]["active"]


def _coil_run(rig: Rig, follows: int, pulses: int) -> None:
    """Coil +, 0, -, 0 for 0.5 s each; the current follows for the first
    `follows` pulses, then stays at zero (a broken driver)."""
    for p in range(pulses):
        for state in (1, 0, -1, 0):
            rig.send(rig.enc.events([(rig.tick & 0xFFFFFFFF, wire.EV_COIL, state)]))
            amps = 2.0 * state if p < follows else 0.0
            for _ in range(10):
                rig.block({1: np.full(N, int(amps / 0.001))})


def test_coil_current_that_follows_raises_nothing() -> None:
    rig = Rig()
    _coil_run(rig, follows=4, pulses=4)
    assert not any(a["id"].startswith("coil") for a in rig.snap()["alarms"])


def test_coil_current_that_stops_following_raises_an_alarm() -> None:
    rig = Rig()
    _coil_run(rig, follows=2, pulses=3)
    (alarm,) = [a for a in rig.snap()["alarms"] if a["id"] == "coil.1.1"]
    assert alarm["level"] == "alarm" and "not following its program" in alarm["text"]
    coil = rig.snap()["coil"][0]
    assert set(coil["state"]) == {-1, 0, 1}


def test_link_down_then_up_and_quiet_link() -> None:
    rig = Rig(WatchOptions(quiet_s=1.0))
    rig.block({0: np.zeros(N)})
    rig.state.link(False, "waiting", rig.mono(), "supervision timeout")
    rig.tick += 2 * HZ
    alarms = {a["id"]: a for a in rig.snap()["alarms"]}
    assert alarms["link_down"]["level"] == "alarm" and "supervision timeout" in alarms["link_down"]["text"]
    rig.state.link(True, "live", rig.mono())
    alarms = {a["id"]: a for a in rig.snap()["alarms"]}
    assert not alarms["link_down"]["active"]
    assert alarms["link_quiet"]["active"]  # up, but nothing came for 2 s
    rig.block({0: np.zeros(N)})
    assert not {a["id"]: a for a in rig.snap()["alarms"]}["link_quiet"]["active"]


def test_loss_rising_against_the_run_so_far() -> None:
    rig = Rig()
    for i in range(400):  # 20 s clean, then one frame in four lost
        rig.block({0: np.zeros(N)}, lost=i >= 200 and i % 4 == 0)
        if i % 20 == 0:
            rig.snap()
    snap = rig.snap()
    (alarm,) = [a for a in snap["alarms"] if a["id"] == "loss_rising"]
    # one in four over the last 10 s, give or take the window's edges (counts once a second)
    assert alarm["level"] == "alarm" and float(alarm["text"].split()[0]) == pytest.approx(25, abs=4)
    assert alarm["text"].endswith("0.00 % before")
    assert snap["totals"]["missing"] == 50  # blocks 200, 204, ... 396
    assert snap["loss_series"]["loss_pct"][-1] == pytest.approx(25.0, abs=4)


def test_rotor_angle_and_loss_by_angle() -> None:
    """1 rev/s; frames lost while the rotor is in 180..210 degrees."""
    rig = Rig(WatchOptions(angle_bins=12))
    w = 2 * math.pi  # rad/s
    lost = 0
    for _ in range(200):  # 10 s, 10 turns
        t_s = rig.tick / HZ
        deg = math.degrees(w * (t_s + (N - 1) * PERIOD / HZ)) % 360  # at the frame's last sample
        gone = 180 <= deg < 210
        lost += gone
        rig.block({2: np.full(N, int(round(w / 0.001))), 0: np.zeros(N)},
                  lose=frozenset({0} if gone else ()))
    snap = rig.snap()
    ang = snap["angle"]
    assert ang["bin_deg"] == 30
    assert sum(ang["lost"]) == lost - 1 or sum(ang["lost"]) == lost  # the very last may be pending
    assert ang["lost"][6] == sum(ang["lost"])  # all in 180..210
    # the integrated angle against scipy's cumulative trapezoid over the same samples
    a = rig.state.angles[(1, 1)]
    rate = np.full(a.tick[-1] // PERIOD + 1, round(w / 0.001) * 0.001)
    ref = cumulative_trapezoid(rate, dx=PERIOD / HZ, initial=0.0)
    assert a.angle[-1] == pytest.approx(ref[-1], rel=1e-9)


def test_clock_offset_follows_the_boards_skew() -> None:
    """A board clock 50 ppm fast: the offset grows 0.05 ms a second."""
    rig = Rig()
    for k in range(30):
        host = rig.mono()
        board_rx = int(rig.tick * (1 + 50e-6))
        rig.send(rig.enc.sync(k, host, board_rx, board_rx + 100))
        rig.block({0: np.zeros(N)})
        rig.tick += HZ - N * PERIOD
    clock = rig.snap()["clock"]
    slope = np.polyfit(clock["t_s"], clock["offset_ms"], 1)[0]
    assert slope == pytest.approx(0.05, rel=0.05)


def test_snapshot_is_strict_json_before_and_after_data() -> None:
    rig = Rig()
    json.dumps(rig.snap(), allow_nan=False)
    rig.block({0: np.zeros(N), 1: np.zeros(N), 2: np.zeros(N)})
    snap = rig.snap()
    text = json.dumps(snap, allow_nan=False)
    assert json.loads(text)["v"] == 1
    assert {s["name"] for s in snap["streams"]} == {"cap_amp", "coil_current", "gyro_z"}
