"""The simulated-time event loop the demo runs on: waits cost no wall time,
timers fire at their own times in a fixed order, and a run with nothing
left to wait for is reported instead of hanging."""

from __future__ import annotations

import asyncio

import pytest

from slipless.sim import virtual_time


def test_an_hour_of_sleeping_moves_the_clock_exactly() -> None:
    async def main() -> tuple[float, float]:
        loop = asyncio.get_running_loop()
        t0 = loop.time()
        await asyncio.sleep(3600.0)
        return t0, loop.time()

    t0, t1 = virtual_time.run(main(), start_s=100.0)
    assert t0 == 100.0 and t1 == pytest.approx(3700.0, abs=1e-9)


def test_timers_fire_in_time_order_and_the_same_order_every_run() -> None:
    def once() -> list[tuple[str, float]]:
        seen: list[tuple[str, float]] = []

        async def main() -> None:
            loop = asyncio.get_running_loop()
            for name, at in (("c", 2.0), ("a", 1.0), ("b", 1.0), ("d", 0.5), ("e", 1.0)):
                loop.call_at(at, lambda n=name: seen.append((n, loop.time())))
            await asyncio.sleep(3.0)

        virtual_time.run(main())
        return seen

    first = once()
    assert [t for _, t in first] == [0.5, 1.0, 1.0, 1.0, 2.0]  # each at its own time
    assert first[0][0] == "d" and first[-1][0] == "c"
    assert all(once() == first for _ in range(3))  # ties: the same order every run


def test_wait_for_times_out_at_its_simulated_deadline() -> None:
    async def main() -> float:
        loop = asyncio.get_running_loop()
        never = asyncio.Event()
        with pytest.raises(TimeoutError):
            await asyncio.wait_for(never.wait(), 2.5)
        return loop.time()

    assert virtual_time.run(main()) == pytest.approx(2.5)


def test_loop_clock_reads_the_simulated_time() -> None:
    async def main() -> tuple[int, int]:
        clock = virtual_time.LoopClock(wall_offset_ns=1_000)
        await asyncio.sleep(1.5)
        return clock.mono_ns(), clock.wall_ns()

    assert virtual_time.run(main(), start_s=10.0) == (11_500_000_000, 11_500_001_000)


def test_nothing_to_wait_for_is_an_error_not_a_hang(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(virtual_time, "STUCK_S", 0.01)

    async def main() -> None:
        await asyncio.Event().wait()  # nobody will ever set it

    with pytest.raises(RuntimeError, match="simulation stuck"):
        virtual_time.run(main())
