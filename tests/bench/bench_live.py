"""`make bench` key live_cpu_fraction: the share of one core the live view
takes at 8 streams x 2 kHz (int16), played back at real time from a capture,
with the page's server pushing snapshots to one WebSocket client (a second
process, so its own work is not counted). CPU is this process's user + system
time over the wall time of the measured stretch (goal < 0.2)."""

from __future__ import annotations

import asyncio
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from slipless.io.capture import RX, CaptureWriter
from slipless.protocol import wire

STREAMS = 8
RATE_HZ = 2000
H = 0x68
MEASURE_S = float(os.environ.get("BENCH_LIVE_S", "20"))

CLIENT = """
import asyncio, sys, aiohttp
async def main():
    n = 0
    async with aiohttp.ClientSession() as s:
        async with s.ws_connect(sys.argv[1]) as ws:
            async for msg in ws:
                n += 1
    print(n)
asyncio.run(main())
"""


def write_capture(path: Path, seconds: float) -> int:
    """8 streams at 2 kHz, each frame a full notification, sent as it fills."""
    per = wire.max_samples(H)
    enc = wire.Encoder(1, 1)
    streams = [(s, H, 0, 1_000_000 // RATE_HZ, 0.001, 0.0, f"ch{s}", "V") for s in range(STREAMS)]
    w = CaptureWriter(path, {"bench": "live"})
    base = 10**9
    frames = 0
    tick = 0
    step = per * 1_000_000 // RATE_HZ  # board us a frame spans
    values = [100 * ((i % 200) - 100) for i in range(per)]
    while tick < seconds * 1_000_000:
        if tick % 10_000_000 < step:  # eight entries do not fit one frame: two parts
            for part in (streams[:4], streams[4:]):
                n = enc.descriptor(tick, 1_000_000, (0, 4, 0), 5000, STREAMS, part)
                w.write(RX, 0, enc.frame(n), base + tick * 1000, base + tick * 1000)
        if tick % 1_000_000 < step:
            n = enc.status(tick, 3900, 2500, 90000, 3, 0, 0, 50)
            w.write(RX, 0, enc.frame(n), base + tick * 1000, base + tick * 1000)
        for s in range(STREAMS):
            n = enc.samples(s, tick, H, values)
            at = base + (tick + step) * 1000 + s * 1000
            w.write(RX, 0, enc.frame(n), at, at)
            frames += 1
        tick += step
    w.close()
    return frames


def live_figures() -> dict[str, float]:
    from slipless.live.replay import Replay
    from slipless.live.server import WatchServer
    from slipless.live.state import LiveState

    with tempfile.TemporaryDirectory() as tmp:
        cap = Path(tmp) / "live.slcap"
        write_capture(cap, MEASURE_S + 10)
        state = LiveState()
        replay = Replay(cap, state, speed=1.0)

        async def go() -> tuple[float, float, int, float]:
            server = WatchServer(lambda: state.snapshot(replay.now_ns()))
            url = await server.start()
            ws = url.replace("http://", "ws://").rstrip("/") + "/ws"
            client = await asyncio.create_subprocess_exec(
                sys.executable, "-c", CLIENT, ws, stdout=subprocess.PIPE)
            job = asyncio.ensure_future(replay.run())
            await asyncio.sleep(3.0)  # warm up: the client connected, plots filled
            r0, t0 = resource.getrusage(resource.RUSAGE_SELF), time.perf_counter()
            n0 = state.totals()[2]
            await asyncio.sleep(MEASURE_S)
            r1, t1 = resource.getrusage(resource.RUSAGE_SELF), time.perf_counter()
            rate = (state.totals()[2] - n0) / (t1 - t0)
            job.cancel()
            sent = server.updates_sent
            await server.stop()
            client.kill()
            await client.wait()
            cpu = (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime)
            return cpu, t1 - t0, sent, rate

        cpu, wall, sent, rate = asyncio.run(go())
    # samples a second the view took in (the goal's load: 8 x 2000 = 16,000)
    return {"live_cpu_fraction": round(cpu / wall, 3), "live_updates_sent": sent,
            "live_samples_per_s": round(rate)}


if __name__ == "__main__":
    print(live_figures())
