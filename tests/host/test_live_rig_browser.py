"""The live view end to end on the simulated rig, in real headless Chromium.

A capture of the demo's scenario (the board's firmware on simulated hardware,
a rotating link with a dead sector, one stall that overflows the board's send
queue, one outage) is played back at 10x through the real decoder into a
LiveState, served by the real WatchServer; Chromium (Debian's
/usr/bin/chromium, driven over its DevTools protocol by tests/live_browser.py)
loads the page. Nothing here is a stand-in. Skipped, saying so, without
Chromium. PNG signature: RFC 2083 section 3.1 (pixels read by matplotlib).
"""

from __future__ import annotations

import asyncio
import io
import json
from pathlib import Path

import numpy as np
import pytest

from slipless.live.replay import Replay
from slipless.live.server import WatchServer
from slipless.live.state import LiveState
from slipless.sim.scenario import ScenarioConfig, build

CHROMIUM = Path("/usr/bin/chromium")
pytestmark = pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="/usr/bin/chromium is absent (Debian package `chromium`; `make test` installs it "
           "where apt-get can): the live view's browser test on the simulated rig is skipped")


def _errors(page) -> list[str]:  # type: ignore[no-untyped-def]
    out = [json.dumps(e.get("args", []))[:300] for e in page.named("Runtime.consoleAPICalled")
           if e.get("type") == "error"]
    out += [json.dumps(e["exceptionDetails"])[:300] for e in page.named("Runtime.exceptionThrown")]
    out += [e["entry"].get("text", "") for e in page.named("Log.entryAdded")
            if e["entry"].get("level") == "error"]
    return out


def test_rig_replay_in_chromium(tmp_path: Path) -> None:
    import matplotlib.image
    from live_browser import Browser

    sc = build(tmp_path, ScenarioConfig(seed=2, seconds=60))
    state = LiveState(title="slipless watch: rig")
    replay = Replay(sc.capture, state, speed=10.0)

    async def go() -> None:
        server = WatchServer(lambda: state.snapshot(replay.now_ns()), every_s=0.2)
        url = await server.start()
        try:
            async with Browser(tmp_path / "profile") as browser:
                page = await browser.new_page()
                for domain in ("Runtime", "Log", "Page", "Network"):
                    await page.send(f"{domain}.enable")
                await page.send("Page.navigate", {"url": url})
                w = "window.sliplessWatch"
                await page.wait_for(f"{w} && {w}.updates >= 2", 15)
                job = asyncio.ensure_future(replay.run())
                first = await page.evaluate(f"{w}.updates")
                # the stall's queue overflow: the board's STATUS says it dropped frames
                await page.wait_for("document.querySelector('[data-alarm-id^=\"dropped.\"]')", 30)
                await job
                await asyncio.sleep(0.6)  # the last snapshots drawn
                assert await page.evaluate(f"{w}.updates") >= first + 10  # it kept updating
                text = await page.evaluate("document.body.innerText")
                for name in ("cap_amp", "coil_current", "gyro_z"):
                    assert name in text
                plots = await page.evaluate(
                    "[...document.querySelectorAll('[data-plot]')].map(e => e.dataset.plot)")
                assert {"stream:1.2.0", "stream:1.2.1", "stream:1.2.2", "angle", "clock",
                        "loss"} <= set(plots), plots
                png = await page.screenshot_png()
                assert png.startswith(b"\x89PNG\r\n\x1a\n")
                px = matplotlib.image.imread(io.BytesIO(png), format="png")[..., :3]
                colours = np.unique((px.reshape(-1, 3) * 255).astype(np.uint8), axis=0)
                assert len(colours) > 50 and float(px.std()) > 0.05  # not blank
                assert await page.evaluate(f"{w}.errors") == 0 and _errors(page) == []
        finally:
            await server.stop()

    asyncio.run(go())
    snap = state.snapshot(replay.now_ns())
    assert max(b["dropped"] for b in snap["boards"]) == sc.board_dropped > 0
