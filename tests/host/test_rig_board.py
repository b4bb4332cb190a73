"""The demo board's firmware config (sim.rig_board) against the rig it rides on:
the firmware accepts it, its pulse program is the rig's coil plan, and the
channels hand the sampler the rig's samples in order."""

from __future__ import annotations

import numpy as np
import pytest

from slipless.sim import rig, rig_board
from slipless.sim.ble_board import firmware_on_path


@pytest.mark.parametrize("block_s", [10.0, 30.0, 100.0])
def test_the_program_repeated_per_block_is_the_rigs_plan(block_s: float) -> None:
    rc = rig.RigConfig(block_s=block_s)
    cfg = rig_board.firmware_config(rc, ring_frames=48, queue_frames=8)
    firmware_on_path()
    import config as fw_config

    checked = fw_config.validate(cfg)  # the board's own checks: limits, program size
    steps, repeat = checked["coil"]["program"], checked["coil"]["repeat"]
    times, states = [], []
    t = 0
    for _ in range(repeat):
        for state, ms in steps:
            if not states or state != states[-1]:
                times.append(t / 1000)
                states.append(state)
            t += ms
    plan_t, plan_s = rig.coil_program(rc)
    assert t / 1000 == rc.seconds
    assert np.allclose(times[1:], plan_t) and states[1:] == plan_s.tolist() and states[0] == 0


def test_streams_match_the_rigs_encoding() -> None:
    rc = rig.RigConfig()
    cfg = rig_board.firmware_config(rc, 48, 8)
    got = [(s["id"], s["name"], s["rate_hz"], s["scale"]) for s in cfg["streams"]]
    assert got == [(0, "cap_amp", 1000, rc.cap_scale), (1, "coil_current", 1000, rc.current_scale),
                   (2, "gyro_z", 200, rc.gyro_scale)]


def test_replay_hands_out_samples_in_order_then_holds() -> None:
    r = rig_board.Replay(np.array([5, -3, 7], dtype="<i2"))
    assert [r.read() for _ in range(5)] == [5, -3, 7, 7, 7]
    assert all(type(v) is int for v in r.values)  # small ints, like an ADC read
