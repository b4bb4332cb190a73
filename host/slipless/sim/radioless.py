"""A whole run without a radio, for fault tests: the board's own firmware on
the simulated hardware layer (CPython), its frames taken by a SinkLink that
keeps every byte sent, and a laptop that writes a capture and hands its
commands straight to the board. Subclasses decide which sent bytes reach
the capture (the radio's faults)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from slipless.io import capture
from slipless.protocol import wire
from slipless.sim.ble_board import firmware_on_path


class RadiolessRun:
    def __init__(self, path: Path, config: dict[str, Any], step_us: int = 1000) -> None:
        firmware_on_path()
        import config as fw_config
        from board import Board
        from simhw import SimHW, SinkLink

        self.step_us = step_us
        self.hw = SimHW()
        self.built: list[bytes] = []  # every frame the board built, once: its mirror, the truth
        self.hw.on_frame = lambda slot, n: self.built.append(bytes(slot[:n]))
        self.board = Board(fw_config.validate(config), self.hw, self.hw.next_run_id())
        self.link = SinkLink(self.board.ring, keep=True)
        self.board.link = self.link
        self.capture = capture.CaptureWriter(path, {"sources": [{}]}, sync_every_s=1e9)
        self.t_ns = 10**9  # the laptop's clock (monotonic and wall alike)
        self.radio_up = True  # False: bytes leave the board but never reach the laptop
        self.laptop = wire.Encoder(0xFFFF, 0)
        self.requests = 0
        self.event("connected")

    def turn(self) -> None:
        """One turn of the board's main loop, step_us of board and laptop time."""
        self.hw.advance(self.step_us)
        self.board.poll()
        self.t_ns += self.step_us * 1000

    def command(self, build: Any) -> None:
        """Build a command with the laptop's encoder, log it, give it to the board."""
        self.requests += 1
        data = self.laptop.frame(build(self.laptop, self.requests))
        self.capture.write(capture.TX, 0, data, self.t_ns, self.t_ns)
        self.board.command_bytes(data)

    def event(self, name: str) -> None:
        self.capture.write(capture.EVENT, 0, json.dumps({"event": name}).encode(), self.t_ns,
                           self.t_ns)
