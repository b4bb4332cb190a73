"""An asyncio event loop whose clock is simulated: sleeping costs no wall time.

Simulations (the demo, end-to-end tests) run the board's firmware, bumble's
virtual link and the recorder together on this loop. Whenever nothing is
ready to run, the loop's clock jumps to the next timer instead of waiting for
it, so a three-minute run takes as long as its work does, and the same seed
gives the same run: callbacks run in time order, and callbacks due at the same
time in the same order on every run (asyncio's timer heap is deterministic).
Real I/O still works (files are plain blocking calls); only waiting is
simulated.
"""

from __future__ import annotations

import asyncio
import selectors
from collections.abc import Coroutine
from typing import Any, TypeVar

T = TypeVar("T")
STUCK_S = 5.0  # wall seconds to wait for another thread before calling the run stuck


class _Selector(selectors.BaseSelector):
    """The platform selector, polled without blocking; a wait moves the clock."""

    def __init__(self, loop: VirtualTimeLoop) -> None:
        self._real = selectors.DefaultSelector()
        self._loop = loop

    def register(self, fileobj: Any, events: int, data: Any = None) -> selectors.SelectorKey:
        return self._real.register(fileobj, events, data)

    def unregister(self, fileobj: Any) -> selectors.SelectorKey:
        return self._real.unregister(fileobj)

    def modify(self, fileobj: Any, events: int, data: Any = None) -> selectors.SelectorKey:
        return self._real.modify(fileobj, events, data)

    def get_map(self) -> Any:
        return self._real.get_map()

    def close(self) -> None:
        self._real.close()

    def select(self, timeout: float | None = None) -> list[tuple[selectors.SelectorKey, int]]:
        ready = self._real.select(0)
        if ready:
            return ready
        if timeout is None:  # no timer at all: only another thread could wake us
            ready = self._real.select(STUCK_S)
            if not ready:
                raise RuntimeError("simulation stuck: nothing scheduled and nothing to wait for")
            return ready
        if timeout > 0:
            self._loop.now_s += timeout
        return []


class VirtualTimeLoop(asyncio.SelectorEventLoop):
    def __init__(self, start_s: float = 0.0) -> None:
        self.now_s = start_s
        super().__init__(_Selector(self))

    def time(self) -> float:
        return self.now_s


def run(main: Coroutine[Any, Any, T], start_s: float = 0.0) -> T:
    """Run a coroutine to the end on a fresh loop in simulated time."""
    loop = VirtualTimeLoop(start_s)
    try:
        return loop.run_until_complete(main)
    finally:
        loop.run_until_complete(loop.shutdown_asyncgens())
        loop.close()


class LoopClock:
    """The laptop's clocks as the recorder reads them, from the running loop:
    monotonic nanoseconds and wall-clock nanoseconds `wall_offset_ns` apart."""

    def __init__(self, wall_offset_ns: int) -> None:
        self.wall_offset_ns = wall_offset_ns

    def mono_ns(self) -> int:
        return round(asyncio.get_running_loop().time() * 1e9)

    def wall_ns(self) -> int:
        return self.mono_ns() + self.wall_offset_ns
