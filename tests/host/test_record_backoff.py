"""The recorder's back-off by the class of link failure, walked with a scripted
Central (a stand-in: only the recorder's decisions are under test here; the real
links are in test_record_bluez.py and test_record_bumble.py)."""

from __future__ import annotations

import asyncio
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from slipless.io import capture
from slipless.record.recorder import STATES, Recorder, RecordOptions
from slipless.record.transports import BoardNotFound, ConnectFailed, LinkError, NoBluetooth, WrongGatt


class Scripted:
    """connect() raises the scripted errors in turn, then connects; writes fail
    while `write_fails` is above zero."""

    def __init__(self, errors: list[LinkError], write_fails: int = 0) -> None:
        self.errors = list(errors)
        self.write_fails = write_fails
        self.mtu = 23
        self.address = "AA:BB:CC:DD:EE:FF"
        self.name = ""
        self.connects = 0
        self.states: list[str] = []
        self.rec: Recorder | None = None

    async def connect(self, on_data: Callable[[bytes], None],
                      on_disconnect: Callable[[str], None]) -> None:
        if self.errors:
            raise self.errors.pop(0)
        self.connects += 1

    async def write(self, data: bytes) -> None:
        if self.write_fails > 0:
            self.write_fails -= 1
            raise ConnectFailed("write failed")

    async def disconnect(self) -> None:
        pass

    def link_info(self) -> dict[str, Any]:
        return {}


def run(tmp: Path, central: Scripted, **opts: Any) -> Recorder:
    writer = capture.CaptureWriter(tmp / "c.slcap", {})
    base: dict[str, Any] = {"duration_s": 0.3, "ping_every_s": 0.1, "drain_s": 0.1,
                            "backoff_s": (0.01,)}
    rec = Recorder(central, writer, RecordOptions(**{**base, **opts}))
    try:
        asyncio.run(rec.run())
    finally:
        writer.close()
    return rec


@pytest.mark.parametrize("error", [NoBluetooth("Bluetooth is off"),
                                   WrongGatt("no slipless service")])
def test_what_waiting_cannot_mend_ends_at_once(tmp_path: Path, error: LinkError) -> None:
    central = Scripted([error])
    with pytest.raises(type(error)):
        run(tmp_path, central)
    assert central.errors == [] and central.connects == 0


def test_not_found_and_connect_failures_are_tried_again(tmp_path: Path) -> None:
    central = Scripted([BoardNotFound("not seen"), ConnectFailed("refused")])
    rec = run(tmp_path, central, first_tries=3)
    assert central.connects == 1 and rec.state == "done" and rec.progress.link_error == ""


def test_before_the_start_only_first_tries(tmp_path: Path) -> None:
    central = Scripted([BoardNotFound("not seen")] * 5)
    with pytest.raises(BoardNotFound):
        run(tmp_path, central, first_tries=2)
    assert len(central.errors) == 3  # two tries, then the one line


def test_a_failed_write_is_a_dropped_link(tmp_path: Path) -> None:
    central = Scripted([], write_fails=1)  # START's write fails: reconnect, START again
    rec = run(tmp_path, central)
    assert central.connects == 2 and rec.progress.reconnects == 1 and rec.state == "done"


def test_states_still_allow_every_move_used() -> None:
    assert "waiting" in STATES["connecting"] and "done" in STATES["live"]
    assert "connecting" in STATES["waiting"]
