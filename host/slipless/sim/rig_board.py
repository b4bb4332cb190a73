"""The demo's board: the firmware's config for the physics rig (sim.rig), and
the rig's signals wired to the simulated hardware layer as its channels.

The rig computes every sample in advance for the run-relative sample times
0, period, 2 x period, ...; the board's sampler reads each channel once per
sample and stamps it with its nominal tick, so the k-th read returns the
k-th sample. The coil program is the rig's own (one block's pattern,
repeated per block), so the board drives the coil when the rig's physics
assumes it does; the demo checks that against the board's coil events.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from slipless.sim import rig


class Replay:
    """A channel returning precomputed counts in order (then holding the last)."""

    def __init__(self, counts: np.ndarray) -> None:
        self.values = counts.astype(int).tolist()
        self.k = 0

    def read(self) -> int:
        k = self.k
        if k < len(self.values):
            self.k = k + 1
            return self.values[k]
        return self.values[-1] if self.values else 0


def program_steps(rc: rig.RigConfig) -> list[list[int]]:
    """The rig's coil plan for one block as firmware program steps [state, ms]."""
    times, states = rig.coil_program(rc)
    first = times < rc.block_s
    edges = [0.0, *times[first].tolist(), rc.block_s]
    levels = [0, *states[first].tolist()]
    steps: list[list[int]] = []
    for a, b, state in zip(edges[:-1], edges[1:], levels):
        ms = int(round((b - a) * 1000))
        if ms <= 0:
            continue
        if steps and steps[-1][0] == state:
            steps[-1][1] += ms
        else:
            steps.append([int(state), ms])
    return steps


def firmware_config(rc: rig.RigConfig, ring_frames: int, queue_frames: int) -> dict[str, Any]:
    streams = [{"id": s[0], "name": s[6], "unit": s[7], "source": s[6], "type": chr(s[1]),
                "rate_hz": rig.TICK_HZ // s[3], "scale": s[4], "offset": s[5]}
               for s in rig.stream_entries(rc)]
    return {
        "board_id": rc.board, "name": f"rotor-{rc.board:02d}", "streams": streams,
        "coil": {"program": program_steps(rc), "repeat": len(rc.blocks_rad_s),
                 "max_on_ms": int(rc.pulse_s * 1000) + 500, "max_duty": 0.5,
                 "duty_window_ms": 30000, "link_timeout_ms": 6000},
        "link": {"status_every_ms": int(rig.STATUS_EVERY_S * 1000),
                 "descriptor_every_ms": int(rig.DESCRIPTOR_EVERY_S * 1000),
                 "ring_frames": ring_frames, "queue_frames": queue_frames},
        "mirror": {"enabled": True, "path": "/mirror.bin", "max_bytes": 50_000_000,
                   "flush_every_ms": 1000},
    }


def wire_channels(hw: Any, sig: rig.RigSignals) -> None:
    """Put the rig's counts behind the channels the config names."""
    hw.channels["cap_amp"] = Replay(sig.cap_counts)
    hw.channels["coil_current"] = Replay(sig.current_counts)
    if sig.cfg.gyro:
        hw.channels["gyro_z"] = Replay(sig.gyro_counts)
