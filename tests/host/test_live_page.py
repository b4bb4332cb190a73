"""The live watch page and its server.

The server is the real one (aiohttp on a loopback port) and the browser is real
headless Chromium (Debian's /usr/bin/chromium), driven over its DevTools
protocol (tests/live_browser.py); the browser tests skip, saying so, where
Chromium is absent. The snapshots come from `Provider` below: a test-only
stand-in for the live decoder's LiveState, shaped like the snapshot schema
(v 1) and changing with every call. The real decoder's path to a snapshot is
tested separately, with LiveState.

Outside references: RFC 8259 section 6 (JSON has no NaN or Infinity), RFC 6455
(the WebSocket handshake and Origin header), RFC 2083 section 3.1 / ISO 15948
(the PNG signature; the pixels decoded by matplotlib's PNG reader), the W3C
CSP Level 3 directives. Chromium's DevTools method and event names: from
memory, checked against Chromium 156 here.
"""

from __future__ import annotations

import asyncio
import base64
import copy
import hashlib
import io
import json
import math
import os
import socket
import time
from pathlib import Path
from typing import Any

import aiohttp
import numpy as np
import pytest

from slipless.errors import InputError
from slipless.live.server import WatchServer, encode

REPO = Path(__file__).resolve().parents[2]
STATIC = REPO / "host" / "slipless" / "live" / "static"
CHROMIUM = Path("/usr/bin/chromium")
needs_chromium = pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="/usr/bin/chromium is absent (Debian package `chromium`; `make test` installs it where "
           "apt-get can): the live page's browser test is skipped")

# A valid v 1 snapshot (the schema's example): the provider's starting shape.
SAMPLE: dict[str, Any] = {
    "v": 1, "title": "slipless watch: run.slcap", "now_s": 42.5, "speed": 10.0,
    "link": {"up": False, "state": "waiting", "since_s": 40.1, "why": "supervision timeout"},
    "totals": {"frames": 12000, "missing": 35, "loss_pct": 0.29, "samples": 1400000, "resent": 12},
    "loss_series": {"t_s": [10, 20, 30, 40], "loss_pct": [0.0, 0.1, 0.3, 2.5]},
    "angle": {"bin_deg": 30, "deg": [15, 45, 75, 105, 135, 165, 195, 225, 255, 285, 315, 345],
              "seen": [100, 100, 100, 100, 100, 100, 100, 60, 100, 100, 100, 100],
              "lost": [0, 0, 0, 0, 0, 0, 2, 40, 1, 0, 0, 0],
              "loss_pct": [0, 0, 0, 0, 0, 0, 2.0, 40.0, 1.0, 0, 0, 0]},
    "clock": {"t_s": [1, 2, 3, 4], "offset_ms": [0.0, 0.02, 0.05, 0.07]},
    "boards": [{"board": 1, "run": 3, "fw": "0.4.0", "battery_v": 3.42, "temp_c": 31.5,
                "dropped": 4, "late": 0, "queue_high": 8, "free_ram": 90000,
                "t_s": [5, 10, 15], "battery_series_v": [3.9, 3.6, 3.42], "temp_series_c": [25, 28, 31.5]}],
    "streams": [{"id": "1.3.0", "board": 1, "run": 3, "stream": 0, "name": "cap_amp", "unit": "V",
                 "rate_hz": 1000.0, "t_s": [30.0, 30.1, 30.2], "lo": [-0.1, -0.2, 9.9],
                 "hi": [0.1, 0.2, 10.0],
                 "last": 10.0, "rails": [-10.0, 10.0], "near_rail": True},
                {"id": "1.3.1", "board": 1, "run": 3, "stream": 1, "name": "coil_current", "unit": "A",
                 "rate_hz": 1000.0, "t_s": [30.0, 30.1, 30.2], "lo": [0.0, 1.9, 1.9], "hi": [0.0, 2.0, 2.0],
                 "last": 2.0, "rails": None, "near_rail": False}],
    "coil": [{"board": 1, "run": 3, "t_s": [29.0, 30.05, 30.5], "state": [0, 1, 0]}],
    "alarms": [{"id": "link_down", "level": "alarm", "text": "link down for 2.4 s (supervision timeout)",
                "since_s": 40.1, "active": True},
               {"id": "rail.1.3.0", "level": "warn", "text": "cap_amp (board 1) within 1% of its rail 10 V",
                "since_s": 30.2, "active": True},
               {"id": "battery.1", "level": "warn", "text": "board 1 battery 3.42 V (low below 3.50 V)",
                "since_s": 38.0, "active": True}],
}
RAISED = "rail.1.3.0"  # the alarm the provider raises part way through
LINE_RGB = (15, 109, 106)  # watch.js INK.line: the streams' min/max lines and band
RAIL_RGB = (176, 65, 46)  # watch.js INK.rail: the dashed rails


class Provider:
    """Test-only stand-in for LiveState: snapshots in the schema's shape that grow
    with each call. Empty (no streams, no angle, empty series) until `fill`;
    `second_stream` and `raise_alarm` switch on what arrives later."""

    def __init__(self) -> None:
        self.calls = 0
        self.filled = self.second_stream = False
        self.raised_at: float | None = None  # monotonic time the alarm first went out
        self._raise = False
        self.odd: list[dict[str, Any]] = []  # when set, these in turn instead

    def fill(self) -> None:
        self.filled = True

    def raise_alarm(self) -> None:
        self._raise = True

    def snapshot(self) -> dict[str, Any]:
        self.calls += 1
        if self.odd:
            return self.odd[self.calls % len(self.odd)]
        if not self.filled:
            return self._empty()
        n = self.calls
        snap = copy.deepcopy(SAMPLE)
        snap["now_s"] = 40.0 + 0.1 * n
        snap["totals"]["frames"] = 12000 + 50 * n
        k = min(n, 300)
        t = [30.0 + 0.1 * i for i in range(k)]
        wave = [9.0 * math.sin(0.2 * i) for i in range(k)]
        a, b = snap["streams"]
        a.update(t_s=t, lo=[w - 0.4 for w in wave], hi=[w + 0.4 for w in wave], last=wave[-1])
        a["lo"][k // 2] = math.nan  # the server must send null, the page must draw a gap
        b.update(t_s=t, lo=[1.9 if i % 40 > 20 else 0.0 for i in range(k)],
                 hi=[2.0 if i % 40 > 20 else 0.05 for i in range(k)])
        snap["streams"] = [a, b] if self.second_stream else [a]
        snap["coil"][0].update(t_s=[30.0 + 0.1 * i for i in range(0, k, 20)],
                               state=[(i // 20) % 2 for i in range(0, k, 20)])
        snap["loss_series"] = {"t_s": [float(i) for i in range(k)], "loss_pct": [0.01 * i for i in range(k)]}
        snap["clock"] = {"t_s": [float(i) for i in range(k)], "offset_ms": [0.001 * i for i in range(k)]}
        board = snap["boards"][0]
        board.update(t_s=t, battery_series_v=[4.0 - 0.001 * i for i in range(k)],
                     temp_series_c=[25.0 + 0.02 * i for i in range(k)], battery_v=None)
        alarms = [al for al in snap["alarms"] if al["id"] != RAISED]
        alarms.append({"id": "quiet.1", "level": "warn", "text": "board 1 quiet for 2.0 s",
                       "since_s": 12.0, "active": False})
        if self._raise:
            alarms.insert(0, SAMPLE["alarms"][1])
            if self.raised_at is None:
                self.raised_at = time.monotonic()
        snap["alarms"] = alarms
        return snap

    def _empty(self) -> dict[str, Any]:
        return {"v": 1, "title": "slipless watch: waiting", "now_s": 0.1 * self.calls, "speed": None,
                "link": {"up": True, "state": "connected", "since_s": 0.0, "why": ""},
                "totals": {"frames": 0, "missing": 0, "loss_pct": 0.0, "samples": 0, "resent": 0},
                "loss_series": {"t_s": [], "loss_pct": []}, "angle": None,
                "clock": {"t_s": [], "offset_ms": []}, "boards": [], "streams": [], "coil": [], "alarms": []}


def odd_snapshots() -> list[dict[str, Any]]:
    """Valid JSON the page must draw without throwing: parts missing or null, empty
    arrays, nulls where numbers go, zero streams after some, unknown words."""
    bare = {"v": 1}
    nulls = {"v": 1, "title": None, "now_s": None, "speed": None, "link": None, "totals": None,
             "loss_series": None, "angle": None, "clock": None, "boards": None, "streams": None,
             "coil": None, "alarms": None}
    empty = copy.deepcopy(SAMPLE)
    del empty["angle"]
    empty.update(streams=[], coil=[{"board": 1, "run": 3, "t_s": [], "state": []}],
                 loss_series={"t_s": [], "loss_pct": []}, clock={"t_s": [], "offset_ms": []})
    holes = copy.deepcopy(SAMPLE)
    a = holes["streams"][0]
    a.update(t_s=[None, 30.1, 30.2, "x"], lo=[None, None, 1.0], hi=[None, "?", 2.0, 3.0], last=None,
             rails=[None, 5.0], unit=None, name=None, rate_hz=None)
    holes["streams"] = [a, {"id": None}, None]
    holes["angle"] = {"bin_deg": None, "deg": [], "seen": [], "lost": [], "loss_pct": []}
    holes["boards"] = [{"board": 1, "run": 3, "fw": None, "battery_v": None, "temp_c": None,
                        "dropped": None, "late": None, "queue_high": None, "free_ram": None,
                        "t_s": [], "battery_series_v": [], "temp_series_c": []}]
    holes["alarms"] = [{"id": "odd", "level": "unheard-of", "text": None, "since_s": None, "active": True},
                       {"id": None}, None]
    holes["coil"][0].update(t_s=[29.0, None], state=[1, None])
    return [bare, nulls, empty, holes]


def strict_json(text: str) -> Any:
    """Parse as RFC 8259 does: Python's json would accept NaN and Infinity."""
    def refuse(name: str) -> None:
        raise AssertionError(f"{name} is not JSON (RFC 8259 section 6)")
    return json.loads(text, parse_constant=refuse)


# ---- the server, without a browser ------------------------------------------------

@pytest.mark.parametrize("host", ["0.0.0.0", "::", "192.168.1.20", "example.org", ""])
def test_only_loopback_hosts(host: str) -> None:
    with pytest.raises(InputError) as e:
        asyncio.run(WatchServer(Provider().snapshot, host=host).start())
    assert "loopback" in str(e.value) and "\n" not in str(e.value)


def test_port_in_use_is_one_line() -> None:
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        with pytest.raises(InputError) as e:
            asyncio.run(WatchServer(Provider().snapshot, port=port).start())
    assert str(e.value) == f"port {port} on 127.0.0.1 is in use: choose another with --port"


def test_bad_cadence_is_a_value_error() -> None:
    for every_s in (0.0, -1.0, math.nan, math.inf):
        with pytest.raises(ValueError):
            WatchServer(Provider().snapshot, every_s=every_s)


def test_encode_is_strict_json() -> None:
    text = encode({"a": [1.0, math.nan, math.inf, -math.inf], "b": np.array([0.5, np.nan]),
                   "c": {"d": np.float64("nan"), "e": (1, 2)}})
    assert strict_json(text) == {"a": [1.0, None, None, None], "b": [0.5, None],
                                 "c": {"d": None, "e": [1, 2]}}


async def _served(provider: Any, **kw: Any) -> tuple[WatchServer, str]:
    server = WatchServer(provider, **kw)
    return server, await server.start()


def test_snapshot_json_and_files() -> None:
    async def go() -> None:
        p = Provider()
        p.fill()
        server, url = await _served(p.snapshot)
        try:
            assert url == f"http://127.0.0.1:{server.port}/" and server.port > 0
            async with aiohttp.ClientSession() as http:
                async with http.get(url + "snapshot.json") as r:
                    assert r.status == 200 and r.content_type == "application/json"
                    snap = strict_json(await r.text())
                lo = snap["streams"][0]["lo"]
                assert lo.count(None) == 1 and lo[len(lo) // 2] is None  # the NaN
                assert snap["v"] == 1 and snap["boards"][0]["battery_v"] is None
                async with http.get(url) as r:
                    page = await r.text()
                    assert r.status == 200 and r.content_type == "text/html"
                    csp = r.headers["Content-Security-Policy"]
                    assert r.headers["X-Content-Type-Options"] == "nosniff"
                # CSP Level 3: nothing from elsewhere, no inline script or style
                assert "default-src 'self'" in csp and "script-src 'self';" in csp
                assert "style-src 'self';" in csp and "unsafe" not in csp
                assert "frame-ancestors 'none'" in csp
                assert "<title>slipless watch</title>" in page
                for name, ctype in [("watch.js", "text/javascript"), ("watch.css", "text/css"),
                                    ("vendor/uplot/uPlot.iife.min.js", "text/javascript"),
                                    ("vendor/uplot/uPlot.min.css", "text/css"),
                                    ("vendor/uplot/LICENSE", "text/plain")]:
                    async with http.get(url + "static/" + name) as r:
                        assert r.status == 200 and r.content_type == ctype, name
                        assert await r.read() == (STATIC / name).read_bytes()
                for bad in ["static/../server.py", "static/%2e%2e/server.py", "static/nothing.js",
                            "static/vendor", "server.py"]:
                    async with http.get(url + bad) as r:
                        assert r.status == 404, bad
        finally:
            await server.stop()
    asyncio.run(go())


def test_foreign_host_and_origin_are_refused() -> None:
    """DNS rebinding (a foreign name for 127.0.0.1) and a foreign page's WebSocket
    (RFC 6455 section 10.2: the server checks Origin) get 403."""
    async def go() -> None:
        server, url = await _served(Provider().snapshot)
        try:
            async with aiohttp.ClientSession() as http:
                async with http.get(url, headers={"Host": f"evil.example:{server.port}"}) as r:
                    assert r.status == 403
                async with http.get(url, headers={"Host": f"localhost:{server.port}"}) as r:
                    assert r.status == 200
                with pytest.raises(aiohttp.WSServerHandshakeError) as e:
                    await http.ws_connect(url + "ws", origin="http://evil.example")
                assert e.value.status == 403
                ws = await http.ws_connect(url + "ws", origin=f"http://127.0.0.1:{server.port}")
                assert strict_json((await ws.receive(timeout=5)).data)["v"] == 1
                await ws.close()
        finally:
            await server.stop()
    asyncio.run(go())


async def _receive(ws: aiohttp.ClientWebSocketResponse, n: int) -> list[dict[str, Any]]:
    out = []
    for _ in range(n):
        msg = await ws.receive(timeout=5)
        assert msg.type == aiohttp.WSMsgType.TEXT, msg
        out.append(strict_json(msg.data))
    return out


async def _wait_until(check: Any, timeout_s: float = 5.0) -> None:
    end = time.monotonic() + timeout_s
    while not check():
        assert time.monotonic() < end, "timed out"
        await asyncio.sleep(0.02)


async def _broken_client(port: int) -> tuple[asyncio.StreamReader, asyncio.StreamWriter]:
    """A WebSocket client by hand (RFC 6455 section 4.1) that we can cut without a close frame."""
    reader, writer = await asyncio.open_connection("127.0.0.1", port)
    key = base64.b64encode(os.urandom(16)).decode()
    writer.write((f"GET /ws HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\nUpgrade: websocket\r\n"
                  f"Connection: Upgrade\r\nSec-WebSocket-Key: {key}\r\n"
                  "Sec-WebSocket-Version: 13\r\n\r\n").encode())
    head = await asyncio.wait_for(reader.readuntil(b"\r\n\r\n"), 5)
    accept = base64.b64encode(hashlib.sha1((key + "258EAFA5-E914-47DA-95CA-C5AB0DC85B11").encode()).digest())
    assert head.startswith(b"HTTP/1.1 101") and accept in head  # RFC 6455 section 4.2.2
    await asyncio.wait_for(reader.read(1), 5)  # the first snapshot is on its way
    return reader, writer


def test_every_client_gets_updates_and_one_leaving_breaks_nothing() -> None:
    async def go() -> None:
        p = Provider()
        p.fill()
        server, url = await _served(p.snapshot, every_s=0.05)
        try:
            async with aiohttp.ClientSession() as http:
                first = await http.ws_connect(url + "ws")
                second = await http.ws_connect(url + "ws")
                _, cut = await _broken_client(server.port)
                await _wait_until(lambda: server.clients == 3)
                a, b = await _receive(first, 4), await _receive(second, 4)
                assert a[-1]["totals"]["frames"] > a[0]["totals"]["frames"]  # fresh snapshots, not one
                assert b[-1]["totals"]["frames"] > b[0]["totals"]["frames"]
                cut.transport.abort()  # gone without a close frame (a TCP reset)
                await first.close()  # and one leaving politely
                await _wait_until(lambda: server.clients == 1)
                sent = server.updates_sent
                later = await _receive(second, 5)
                assert later[-1]["totals"]["frames"] > b[-1]["totals"]["frames"]
                assert server.updates_sent >= sent + 5
                await second.close()
                await _wait_until(lambda: server.clients == 0)
                calls = p.calls
                await asyncio.sleep(0.3)  # nobody watching: no snapshot work
                assert p.calls == calls
        finally:
            await server.stop()
    asyncio.run(go())


def test_a_failing_snapshot_skips_updates_without_ending_the_watch() -> None:
    async def go() -> None:
        p = Provider()
        broken = {"now": False}

        def snapshot() -> dict[str, Any]:
            if broken["now"]:
                raise ZeroDivisionError("a bug in the live state")
            return p.snapshot()

        server, url = await _served(snapshot, every_s=0.05)
        try:
            async with aiohttp.ClientSession() as http:
                ws = await http.ws_connect(url + "ws")
                last = (await _receive(ws, 2))[-1]["now_s"]
                broken["now"] = True
                async with http.get(url + "snapshot.json") as r:
                    assert r.status == 503
                failed_at = p.calls
                await asyncio.sleep(0.2)
                assert server.snapshot_errors >= 3 and server.clients == 1
                broken["now"] = False
                fresh = await _receive(ws, 3)  # perhaps one sent before the failure, then new ones
                assert fresh[-1]["now_s"] > max(last, 0.1 * failed_at)
                await ws.close()
        finally:
            await server.stop()
    asyncio.run(go())


def test_stop_closes_pages_and_frees_the_port() -> None:
    async def go() -> None:
        server, url = await _served(Provider().snapshot, every_s=0.05)
        async with aiohttp.ClientSession() as http:
            ws = await http.ws_connect(url + "ws")
            await _receive(ws, 1)
            await server.stop()
            msg = await ws.receive(timeout=5)
            while msg.type == aiohttp.WSMsgType.TEXT:
                msg = await ws.receive(timeout=5)
            assert msg.type == aiohttp.WSMsgType.CLOSE and msg.data == 1001  # RFC 6455 7.4.1: going away
            assert server.clients == 0
        again = WatchServer(Provider().snapshot, port=server.port)
        assert await again.start() == url
        await again.stop()
    asyncio.run(go())


def test_vendored_uplot_is_the_npm_package() -> None:
    """The vendored files are uplot 1.6.32 from npm byte for byte (package.json pins it)."""
    banner = (STATIC / "vendor" / "uplot" / "uPlot.iife.min.js").read_bytes().split(b"\n", 1)[0]
    assert b"(v1.6.32)" in banner
    npm = REPO / "node_modules" / "uplot"
    if not (npm / "package.json").exists():
        pytest.skip("node_modules/uplot is absent (npm ci installs it): nothing to compare with")
    assert json.loads((npm / "package.json").read_text())["version"] == "1.6.32"
    vendor = STATIC / "vendor" / "uplot"
    for name, source in [("uPlot.iife.min.js", npm / "dist" / "uPlot.iife.min.js"),
                         ("uPlot.min.css", npm / "dist" / "uPlot.min.css"), ("LICENSE", npm / "LICENSE")]:
        assert (vendor / name).read_bytes() == source.read_bytes(), name


# ---- the page, in Chromium ----------------------------------------------------------

def _png_pixels(png: bytes) -> np.ndarray:
    import matplotlib.image

    assert png.startswith(b"\x89PNG\r\n\x1a\n")  # RFC 2083 section 3.1
    px: np.ndarray = matplotlib.image.imread(io.BytesIO(png), format="png")[..., :3]
    return px


# per plot: [pixels near the min/max colour, pixels near the rail colour]
INK_COUNT = """((lineRgb, railRgb) => {
  const out = {};
  for (const el of document.querySelectorAll('[data-plot]')) {
    const canvas = el.querySelector('canvas');
    if (!canvas) continue;
    const d = canvas.getContext('2d').getImageData(0, 0, canvas.width, canvas.height).data;
    const near = (i, rgb) => d[i + 3] > 0 && Math.abs(d[i] - rgb[0]) < 12 && Math.abs(d[i + 1] - rgb[1]) < 12
                              && Math.abs(d[i + 2] - rgb[2]) < 12;
    let line = 0, rail = 0;
    for (let i = 0; i < d.length; i += 4) { if (near(i, lineRgb)) line++; if (near(i, railRgb)) rail++; }
    out[el.dataset.plot] = [line, rail];
  }
  return out;
})(""" + json.dumps(LINE_RGB) + ", " + json.dumps(RAIL_RGB) + ")"


def _errors(page: Any) -> list[str]:
    """Everything the page reported as an error: console.error, uncaught exceptions, log errors."""
    out = [" ".join(str(a.get("value", a.get("description", ""))) for a in e.get("args", []))
           for e in page.named("Runtime.consoleAPICalled") if e.get("type") == "error"]
    out += [json.dumps(e["exceptionDetails"])[:500] for e in page.named("Runtime.exceptionThrown")]
    out += [e["entry"].get("text", "") + " " + e["entry"].get("url", "")
            for e in page.named("Log.entryAdded") if e["entry"].get("level") == "error"]
    return out


@needs_chromium
def test_page_in_chromium(tmp_path: Path) -> None:
    from live_browser import Browser

    async def go() -> None:
        p = Provider()
        server, url = await _served(p.snapshot, every_s=0.1)
        port = server.port
        try:
            async with Browser(tmp_path / "profile") as browser:
                page = await browser.new_page()
                for domain in ("Runtime", "Log", "Page", "Network"):  # before loading: miss nothing
                    await page.send(f"{domain}.enable")
                await page.send("Page.navigate", {"url": url})
                w = "window.sliplessWatch"

                # empty snapshots: nothing to plot yet, nothing breaks
                await page.wait_for(f"{w} && {w}.updates >= 3", 15)
                assert await page.evaluate("document.getElementById('conn').textContent") == "connected"
                shown = "!document.getElementById('%s').classList.contains('hidden')"
                assert await page.evaluate(shown % "no-streams") and await page.evaluate(shown % "no-angle")
                assert "no rotation stream" in await page.evaluate("document.body.innerText")

                # full snapshots: every part drawn, updates keep coming
                p.fill()
                await page.wait_for("document.querySelector('[data-plot=\"stream:1.3.0\"] canvas')", 5)
                before = await page.evaluate(f"{w}.updates")
                await asyncio.sleep(0.6)
                after = await page.evaluate(f"{w}.updates")
                assert after >= before + 3, (before, after)
                assert await page.evaluate(f"{w}.alarms") == ["link_down", "battery.1"]
                text = await page.evaluate("document.body.innerText")
                assert "DOWN" in text and "supervision timeout" in text  # link state in words
                level = "document.querySelector('[data-alarm-id=\"%s\"] .level').textContent"
                assert await page.evaluate(level % "link_down") == "alarm"  # a word beside each colour
                assert await page.evaluate(level % "battery.1") == "warning"
                assert "no rotation stream" not in text and "replay \u00d710" in text
                assert await page.evaluate("document.querySelector('[data-alarm-id=\"quiet.1\"]')"
                                           ".closest('ul').id") == "alarm-history"

                # a stream that arrives later gets its own plot; an alarm shows within 2 s
                p.second_stream = True
                p.raise_alarm()
                await page.wait_for(f"document.querySelector('[data-alarm-id=\"{RAISED}\"]')", 5)
                assert p.raised_at is not None and time.monotonic() - p.raised_at < 2.0
                await page.wait_for("document.querySelector('[data-plot=\"stream:1.3.1\"] canvas')", 5)
                assert RAISED in await page.evaluate(f"{w}.alarms")
                plots = "document.querySelectorAll('[data-plot^=\"stream:\"]').length"
                assert await page.evaluate(plots) == 2
                ink = await page.evaluate(INK_COUNT)
                assert ink["stream:1.3.0"][0] > 200 and ink["stream:1.3.0"][1] > 100  # band and rails
                assert ink["stream:1.3.1"][0] > 200 and ink["stream:1.3.1"][1] == 0  # no rails given
                for key in ("coil:1.3", "loss", "angle", "clock", "board:1.3"):
                    assert key in ink, key
                badge = "document.querySelector('[data-stream=\"%s\"] .badge.rail:not(.hidden)')"
                assert await page.evaluate((badge % "1.3.0") + ".textContent") == "near rail"
                assert await page.evaluate((badge % "1.3.1") + " === null")

                px = _png_pixels(await page.screenshot_png())
                assert px.shape[0] > 500 and px.shape[1] > 500
                colours = np.unique((px.reshape(-1, 3) * 255).astype(np.uint8), axis=0)
                assert len(colours) > 50 and float(px.std()) > 0.05  # text and plots, not one colour
                assert await page.evaluate(f"{w}.errors") == 0
                assert _errors(page) == []

                # odd but valid snapshots: drawn without a throw, and then back to normal
                p.odd = odd_snapshots()
                seen = await page.evaluate(f"{w}.updates")
                await page.wait_for(f"{w}.updates >= {seen + 2 * len(p.odd)}", 5)
                await page.wait_for("document.querySelector('[data-alarm-id=\"odd\"] .level')"
                                    ".textContent === 'unheard-of'", 3)
                assert await page.evaluate(f"{w}.errors") == 0 and _errors(page) == []
                p.odd = []
                await page.wait_for(f"{w}.alarms.includes('{RAISED}')", 3)
                gone = "document.querySelector('[data-stream=\"1.3.1\"]').classList.contains('gone')"
                await page.wait_for(f"!({gone})", 3)

                # the server goes away: the page says so, then reconnects by itself
                await server.stop()
                await page.wait_for("document.getElementById('conn').textContent"
                                    ".startsWith('waiting for the recorder')", 3)
                server = WatchServer(p.snapshot, port=port, every_s=0.1)
                await server.start()
                seen = await page.evaluate(f"{w}.updates")
                await page.wait_for(f"{w}.updates >= {seen + 3}", 10)
                assert await page.evaluate("document.getElementById('conn').textContent") == "connected"
                # while it was down, only the failed reconnects may complain
                late = [e for e in _errors(page) if "WebSocket connection to" not in e]
                assert late == [] and await page.evaluate(f"{w}.errors") == 0

                origin = f"http://127.0.0.1:{port}/"
                requested = [e["request"]["url"] for e in page.named("Network.requestWillBeSent")]
                assert requested and all(u.startswith(origin) or u.startswith("data:") for u in requested), \
                    requested
                sockets = [e["url"] for e in page.named("Network.webSocketCreated")]
                assert len(sockets) >= 2 and set(sockets) == {f"ws://127.0.0.1:{port}/ws"}
        finally:
            await server.stop()
    asyncio.run(go())
