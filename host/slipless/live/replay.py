"""A capture played back into the live view at real or faster speed.

The records keep the laptop's receive times, so a replay feeds the decoder
what came, when it came (divided by the speed), and tells the view of the
link's ups and downs from the capture's link events. The view's clock is the
capture's: now = first record's time + elapsed x speed.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Callable
from pathlib import Path

from slipless.decode.decoder import Decoder
from slipless.io import capture
from slipless.io.inputs import open_capture_input, record_piece
from slipless.live.state import LiveState

BATCH_S = 0.02  # wall seconds of capture fed at a time
FLUSH_BYTES = 4096  # samples reach the view after about this many bytes (smooth plots)
YIELD_RECORDS = 2000  # at speed 0 (as fast as possible): records between yields to the loop


class Replay:
    """Feeds one capture to a decoder whose sink is (or includes) `state`
    (by default one of its own)."""

    def __init__(self, path: Path, state: LiveState, speed: float = 1.0,
                 clock: Callable[[], float] = time.monotonic,
                 decoder: Decoder | None = None) -> None:
        self.path, self.state = path, state
        self.decoder = decoder if decoder is not None else Decoder(state, flush_bytes=FLUSH_BYTES)
        self.speed = speed  # 0: as fast as the laptop can
        self.clock = clock
        self.first_ns = -1
        self.last_ns = -1  # the newest record's time
        self.started = 0.0
        self.records = 0
        self.done = False

    def now_ns(self) -> int:
        """The capture's time that stands for now."""
        if self.first_ns < 0:
            return 0
        if self.done or self.speed <= 0:
            return self.last_ns
        return self.first_ns + int((self.clock() - self.started) * self.speed * 1e9)

    async def run(self) -> None:
        f, reader = open_capture_input(self.path)
        self.started = self.clock()
        self.decoder.new_input()
        with f:
            for rec in reader:
                if rec.type not in (capture.RX, capture.TX, capture.EVENT):
                    continue
                if self.first_ns < 0:
                    self.first_ns = rec.mono_ns
                if self.speed > 0:
                    wait = (rec.mono_ns - self.first_ns) / 1e9 / self.speed - (
                        self.clock() - self.started)
                    if wait > BATCH_S:
                        await asyncio.sleep(wait)
                elif self.records % YIELD_RECORDS == 0:
                    await asyncio.sleep(0)
                self._take(rec)
        self.decoder.finish()
        self.done = True

    def _take(self, rec: capture.Record) -> None:
        self.records += 1
        self.last_ns = max(self.last_ns, rec.mono_ns)
        piece, event = record_piece(rec)
        if event is not None and event.get("event") in ("connected", "disconnected"):
            up = event["event"] == "connected"
            self.state.link(up, "live" if up else "waiting", rec.mono_ns,
                            "" if up else str(event.get("reason", "")))
        if piece is None:
            return
        data, where = piece
        if data is None:
            self.decoder.reset_source(where.source)
        else:
            self.decoder.feed(data, where)
