"""The demo's whole run: the board's own firmware, a radio, the recorder.

Scenario of our own (invented data). The physics rig (sim.rig: a rotating
coaxial capacitor in a pulsed solenoid, charge amplifier, coil current, gyro)
feeds the channels of the simulated hardware layer, and the firmware
(firmware/board.py, link.py, mirror.py, unchanged) samples it, drives the coil
program and radios its frames through MicroPython's `bluetooth` API provided
by a bumble Device (sim.ble_board). The board's clock runs `skew_ppm` fast.
Between the two bumble Devices the radio model (sim.rotating_link) loses what
is sent at the antenna's dead angle (once per turn), stalls the link once so
the board's send queue overflows, and drops the connection once. The link
is one of sim.links' by name: its connection interval, whether the
controllers use Data Length Extension and the packets per connection event
set both bumble's virtual pair and the radio model. On the
laptop side `slipless record`'s own Recorder, on the bumble back end, starts
the run, pings every second, asks for gaps and reconnects; it writes the
capture. The board keeps every frame in its mirror file.

Everything runs on one asyncio loop in simulated time (sim.virtual_time), so
the run takes as long as its work, not its length, and a seed fixes it.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from slipless.io.capture import CaptureWriter
from slipless.record.recorder import Progress, Recorder, RecordOptions
from slipless.record.transports.bumble_central import BumbleCentral
from slipless.sim import rig, rig_board, virtual_time
from slipless.sim.ble_board import VirtualBoard, firmware_on_path, virtual_pair
from slipless.sim.clocks import ClockSim
from slipless.sim.links import DEFAULT_LINK, LINKS, AirLink
from slipless.sim.rotating_link import LinkPlan, RotatingLink, Truth
from slipless.version import __version__

BOOT_S = 5000.0  # laptop monotonic time when the board boots
WALL_OFFSET_NS = 1_790_000_000_000_000_000  # the simulated laptop's wall minus monotonic clock
RAW_START_US = (1 << 30) - 20_000_000  # the board's ticks_us() at boot: it wraps 20 s in


@dataclass
class ScenarioConfig:
    seed: int = 1
    seconds: float = 180.0
    skew_ppm: float = 23.0
    dead_from_deg: float = 200.0  # the antenna's dead sector of the turn
    dead_to_deg: float = 236.0
    elsewhere: float = 0.002  # share of notifications lost at other angles
    stall_at: float = 0.30  # where in the run (fraction) the link stalls once
    stall_s: float = 1.6  # long enough for the board's send queue to overflow
    queue_frames: int = 8  # the board's send queue
    down_at: float = 0.62  # where in the run the link goes silent, then drops
    down_s: float = 3.0
    ring_frames: int = 48  # frames the board can still resend
    poll_s: float = 0.0008  # one turn of the board's main loop
    link: str = DEFAULT_LINK  # a name in sim.links.LINKS

    @property
    def air(self) -> AirLink:
        return LINKS[self.link]


@dataclass
class Scenario:
    cfg: ScenarioConfig
    rig: rig.RigConfig
    clock: ClockSim  # the board clock's truth
    capture: Path
    mirror: Path
    truth: Truth = field(default_factory=Truth)
    frames: int = 0  # frames the board built in the run (END's count)
    board_dropped: int = 0  # the board's own count of frames that left its send queue unsent
    queue_dropped: set[int] = field(default_factory=set)  # which frames those were
    pings: int = 0
    progress: Progress = field(default_factory=Progress)
    coil_ms: float = float("nan")  # largest gap between the board's coil events and the plan
    run: int = 0
    run_start_s: float = 0.0  # board time the run began (s since boot)
    stall_board_s: tuple[float, float] = (0.0, 0.0)  # run seconds: the link stalled
    down_board_s: tuple[float, float] = (0.0, 0.0)  # run seconds: silent, then disconnected
    built_bytes: int = 0  # encoded bytes of the frames the board built in the run
    built_at: dict[int, float] = field(default_factory=dict)  # seq -> loop time it was built
    mtu: int = 0  # the ATT MTU of the last connection
    conn_updates: list[tuple[int, int, int, int, int]] = field(default_factory=list)
    radio: RotatingLink | None = None  # the radio model, for its arithmetic

    def board_s(self, loop_s: float) -> float:
        """Run seconds (board clock) at a laptop loop time."""
        return float(self.clock.board_s(np.array([loop_s]))[0]) - self.run_start_s

    def truth_terms(self, frames: int | None = None) -> dict[str, int]:
        """The loss account's terms from what really went over the air (radio
        only), over the run's first `frames` frames (default: all it built)."""
        t = self.truth
        every = set(range(self.frames if frames is None else frames))
        resent = {s for s, at in t.delivered.items() if s in every and t.asked.get(s, 1e30) <= at}
        never = every - set(t.delivered)
        return {"received": len(every & set(t.delivered)) - len(resent), "resent": len(resent),
                "lost": len(never - self.queue_dropped), "dropped": len(never & self.queue_dropped),
                "lost_dead": len(never & t.lost_dead), "lost_random": len(never & t.lost_random)}

    def wait_s(self) -> float:
        """Median time from a frame's building to its first arrival, over the
        frames that got across before anyone asked for them again."""
        t = self.truth
        waits = [at - self.built_at[s] for s, at in t.delivered.items()
                 if s in self.built_at and t.asked.get(s, 1e30) > at]
        return float(np.median(waits)) if waits else float("nan")

    def truth_values(self) -> dict[str, float]:
        return {**self.rig.truth(), "skew_ppm": self.clock.skew_ppm}


def rig_config(cfg: ScenarioConfig) -> rig.RigConfig:
    # whole seconds per block: each stopped block then faces angle 0, outside the dead sector
    return rig.RigConfig(seed=cfg.seed, block_s=float(max(10, round(cfg.seconds / 6))))


def turned_deg(rc: rig.RigConfig) -> np.ndarray:
    """The rotor's true angle (degrees) at each millisecond of the run."""
    grid = np.arange(0.0, rc.seconds + 0.002, 0.001)
    return np.degrees(np.concatenate([[0.0], np.cumsum(rig.rotation(rc, grid[:-1]) * 0.001)]))


def build(folder: Path, cfg: ScenarioConfig,
          progress: Callable[[float], None] | None = None) -> Scenario:
    """Run the scenario; write `run.slcap` (the capture) and `run.mirror` into
    `folder`. `progress` gets the share of the run done, now and then."""
    rc = rig_config(cfg)
    sc = Scenario(cfg, rc, ClockSim(seconds=rc.seconds, skew_ppm=cfg.skew_ppm, start_tick=0),
                  folder / "run.slcap", folder / "run.mirror")
    sc.mirror.unlink(missing_ok=True)  # the board's mirror appends
    return virtual_time.run(_session(sc, progress), start_s=BOOT_S)


async def _session(sc: Scenario, progress: Callable[[float], None] | None) -> Scenario:
    cfg, rc = sc.cfg, sc.rig
    loop = asyncio.get_running_loop()
    sig = rig.signals(rc)
    rate = 1.0 - cfg.skew_ppm * 1e-6  # laptop seconds per board second (sim.clocks' model)
    air = cfg.air
    laptop_dev, board_dev = virtual_pair(air)
    await laptop_dev.power_on()
    await board_dev.power_on()
    boot = sc.clock.offset_s = loop.time()  # board time 0: its clock starts with the hardware

    def board_us() -> int:
        return RAW_START_US + int((loop.time() - boot) / rate * 1e6)

    firmware_on_path()
    from board import board_time_us
    from simhw import SimHW

    hw = SimHW(now_us=board_us)
    rig_board.wire_channels(hw, sig)
    angles = turned_deg(rc)
    cap_stream = hw.channels["cap_amp"]

    def angle(_now: float) -> float:  # the rotor turns with the run: sample k is at k ms
        return float(angles[min(cap_stream.k, angles.size - 1)])

    plan = LinkPlan(seed=cfg.seed, dead_from_deg=cfg.dead_from_deg, dead_to_deg=cfg.dead_to_deg,
                    elsewhere=cfg.elsewhere, stall_at_s=boot + cfg.stall_at * rc.seconds,
                    stall_s=cfg.stall_s, down_at_s=boot + cfg.down_at * rc.seconds,
                    down_s=cfg.down_s, interval_s=air.interval_ms / 1000,
                    per_event=air.packets_per_event, ll_payload=air.ll_payload,
                    supervision_s=air.supervision_ms / 1000)
    vb: Any = None
    radio = RotatingLink(plan, angle, lambda: vb.board.run_id if vb is not None else -1)
    vb = VirtualBoard(board_dev, rig_board.firmware_config(rc, cfg.ring_frames, cfg.queue_frames),
                      hw=hw, mirror_path=str(sc.mirror), radio=radio)
    built = _watch_queue(vb.board.ring, sc.queue_dropped, loop.time)
    clock = virtual_time.LoopClock(WALL_OFFSET_NS)
    meta = {"slipless": __version__, "created_wall_ns": clock.wall_ns(),
            "created_mono_ns": clock.mono_ns(), "host": "simulation", "backend": "bumble",
            "sources": [{"target": ""}], "sync_every_s": 1.0}
    writer = CaptureWriter(sc.capture, meta, clock=clock)

    def on_progress(p: Progress) -> None:
        if progress is not None:
            progress(min(1.0, cap_stream.k / max(1, len(cap_stream.values))))

    central = BumbleCentral(laptop_dev, None, scan_s=10)
    rec = Recorder(central, writer,
                   RecordOptions(label="demo", ping_every_s=1.0, drain_s=3.0), on_progress)
    stop = asyncio.Event()
    board_task = loop.create_task(vb.run_paced(stop, cfg.poll_s))
    try:
        sc.progress = await rec.run()
    finally:
        stop.set()
        await board_task
        writer.close()
        vb.close()
    sc.run = vb.board.run_id
    s0 = vb.board.sampler.streams[0]
    sc.run_start_s = (board_time_us(s0.hi, s0.lo) - s0.count * s0.period) / 1e6
    sc.stall_board_s = sc.board_s(plan.stall_at_s), sc.board_s(plan.stall_at_s + plan.stall_s)
    sc.down_board_s = sc.board_s(plan.down_at_s), sc.board_s(plan.down_at_s + plan.down_s)
    sc.frames = vb.board.framer.seq
    sc.built_bytes = sum(n for seq, (n, _) in built.items() if seq < sc.frames)
    sc.built_at = {seq: t for seq, (_, t) in built.items() if seq < sc.frames}
    sc.mtu = central.mtu
    sc.conn_updates = list(vb.bt.BLE().updates)
    sc.radio = radio
    sc.board_dropped = vb.board.ring.dropped
    sc.truth = radio.truth
    sc.pings = radio.truth.pings
    return sc


def _watch_queue(ring: Any, dropped: set[int], now: Callable[[], float]
                 ) -> dict[int, tuple[int, float]]:
    """Note which frames the board's ring pushes out of its send queue unsent
    (firmware/ring.py: only commit() moves `send` for that reason); return
    every committed frame's encoded length and loop time, by seq (the last
    run's seqs overwrite an earlier run's)."""
    commit = ring.commit
    built: dict[int, tuple[int, float]] = {}

    def watched(seq: int, length: int) -> None:
        before = ring.send
        commit(seq, length)
        built[seq] = (length, now())
        if ring.send > before:
            dropped.update(range(before, ring.send))

    ring.commit = watched
    return built
