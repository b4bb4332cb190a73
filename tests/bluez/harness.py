"""The double and the board on an event loop of their own, in a thread, so the
laptop side (the real `slipless` command line, which runs its own loop) can
run unchanged on the main thread. Everything here is real time: D-Bus goes
through sockets."""

from __future__ import annotations

import asyncio
import threading
from collections.abc import Callable, Coroutine
from concurrent.futures import Future
from typing import Any

from bluez.double import BluezDouble
from slipless.sim import ble_board

# Each turn of the board's main loop moves its clock by exactly BOARD_STEP_US, then
# yields BOARD_PAUSE_S of real time to the link: the board never falls behind its
# own sampling grid however loaded the machine is (its clock runs slower than the
# laptop's instead, which nothing here depends on).
BOARD_STEP_US = 1000
BOARD_PAUSE_S = 0.0005
CALL_TIMEOUT_S = 20.0


class DoubleThread:
    """dbus-daemon address in; a BluezDouble whose controller is a bumble Device on
    bumble's virtual link, and (config given) the board's own firmware on the
    other Device of that link, turning in real time."""

    def __init__(self, bus_address: str, config: dict[str, Any] | None = None,
                 board: Callable[[Any], Any] | None = None, **double_kw: Any) -> None:
        self.bus_address = bus_address
        self.config = config
        self.board_factory = board  # instead of the firmware: board_dev -> a peripheral set up on it
        self.double_kw = double_kw
        self.loop = asyncio.new_event_loop()
        self.produced: list[bytes] = []  # every frame the board built (its truth)
        self.double: BluezDouble | None = None
        self.vb: Any = None
        self.board_dev: Any = None
        self._stop: asyncio.Event | None = None
        self._board_task: asyncio.Task[None] | None = None
        self._thread = threading.Thread(target=self.loop.run_forever, name="bluez-double", daemon=True)

    def __enter__(self) -> DoubleThread:
        self._thread.start()
        self.call(self._start())
        return self

    def __exit__(self, *exc: object) -> None:
        try:
            self.call(self._close())
        finally:
            self.loop.call_soon_threadsafe(self.loop.stop)
            self._thread.join(CALL_TIMEOUT_S)
            self.loop.close()

    def call(self, coro: Coroutine[Any, Any, Any], timeout_s: float = CALL_TIMEOUT_S) -> Any:
        """Run a coroutine on the double's loop and wait for its result."""
        fut: Future[Any] = asyncio.run_coroutine_threadsafe(coro, self.loop)
        return fut.result(timeout_s)

    def later(self, delay_s: float, fn: Callable[[], Any]) -> None:
        """Call fn on the double's loop after delay_s (a coroutine function is awaited)."""
        def fire() -> None:
            out = fn()
            if asyncio.iscoroutine(out):
                self.loop.create_task(out)

        self.loop.call_soon_threadsafe(self.loop.call_later, delay_s, fire)

    async def _start(self) -> None:
        laptop_dev, board_dev = ble_board.virtual_pair()
        await laptop_dev.power_on()
        await board_dev.power_on()
        self.board_dev = board_dev
        self.double = BluezDouble(self.bus_address, laptop_dev, **self.double_kw)
        await self.double.start()
        self._stop = asyncio.Event()
        if self.config is not None:
            self._start_board()
        elif self.board_factory is not None:
            await self.board_factory(board_dev)

    def _start_board(self) -> None:
        assert self.config is not None and self._stop is not None
        self.vb = ble_board.VirtualBoard(self.board_dev, self.config,
                                         on_frame=lambda slot, n: self.produced.append(bytes(slot[:n])))
        self._board_task = self.loop.create_task(self.vb.run(self._stop, BOARD_STEP_US, BOARD_PAUSE_S))

    async def cut(self) -> None:
        """The link drops (from the board's side, as when the rotor shadows the antenna)."""
        for conn in list(self.board_dev.connections.values()):
            await conn.disconnect()

    async def _close(self) -> None:
        if self._stop is not None:
            self._stop.set()
        if self._board_task is not None:
            await self._board_task
        if self.vb is not None:
            self.vb.close()
        if self.double is not None:
            await self.double.stop()
        here = asyncio.current_task()
        left = [t for t in asyncio.all_tasks() if t is not here]
        for t in left:  # bumble's advertising and drain tasks
            t.cancel()
        await asyncio.gather(*left, return_exceptions=True)
