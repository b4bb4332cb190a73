"""Headless Chromium driven over its DevTools protocol, for tests only.

The browser is started with --remote-debugging-port=0 and says where it listens
on stderr ("DevTools listening on ws://..."); we talk to it over that WebSocket
with aiohttp's client, one flat session per page (Target.attachToTarget with
flatten). Every event is kept so a test can look at all of them afterwards.
The DevTools protocol's methods and events are named as Chromium documents them
(from memory, checked against Chromium 156 here).
"""

from __future__ import annotations

import asyncio
import base64
import contextlib
import itertools
import re
import subprocess
from pathlib import Path
from typing import Any

import aiohttp

CHROMIUM = Path("/usr/bin/chromium")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars", "--remote-debugging-port=0", "--window-size=1280,1800"]
START_TIMEOUT_S = 30.0
_LISTENING = re.compile(r"DevTools listening on (ws://\S+)")


class CdpError(AssertionError):
    """The browser answered a command with an error."""


class Page:
    """One tab: commands go to its session; its events land in `events`."""

    def __init__(self, browser: Browser, session: str) -> None:
        self.browser, self.session = browser, session
        self.events: list[tuple[str, dict[str, Any]]] = []

    async def send(self, method: str, params: dict[str, Any] | None = None) -> dict[str, Any]:
        return await self.browser.send(method, params, session=self.session)

    async def evaluate(self, expression: str) -> Any:
        r = await self.send("Runtime.evaluate", {"expression": expression, "returnByValue": True,
                                                 "awaitPromise": True})
        if "exceptionDetails" in r:
            raise CdpError(f"{expression!r} threw: {r['exceptionDetails']}")
        return r["result"].get("value")

    async def wait_for(self, expression: str, timeout_s: float, every_s: float = 0.05) -> None:
        """Poll until the expression is truthy in the page, or AssertionError on timeout."""
        loop = asyncio.get_running_loop()
        end = loop.time() + timeout_s
        while True:
            value = await self.evaluate(f"!!({expression})")
            if value:
                return
            if loop.time() > end:
                raise AssertionError(f"{expression!r} still {value!r} after {timeout_s} s")
            await asyncio.sleep(every_s)

    async def screenshot_png(self) -> bytes:
        r = await self.send("Page.captureScreenshot", {"format": "png"})
        return base64.b64decode(r["data"])

    def named(self, method: str) -> list[dict[str, Any]]:
        return [params for name, params in self.events if name == method]


class Browser:
    """`async with Browser(profile_dir) as b: page = await b.new_page()`."""

    def __init__(self, profile: Path) -> None:
        self.profile = profile
        self._proc: subprocess.Popen[bytes] | None = None
        self._http: aiohttp.ClientSession | None = None
        self._ws: aiohttp.ClientWebSocketResponse | None = None
        self._reader: asyncio.Task[None] | None = None
        self._ids = itertools.count(1)
        self._waiting: dict[int, asyncio.Future[dict[str, Any]]] = {}
        self._pages: dict[str, Page] = {}

    async def __aenter__(self) -> Browser:
        self.profile.mkdir(parents=True, exist_ok=True)
        log = self.profile / "stderr.txt"
        with log.open("wb") as err:
            self._proc = subprocess.Popen([str(CHROMIUM), *FLAGS, f"--user-data-dir={self.profile}",
                                           "about:blank"], stdout=subprocess.DEVNULL, stderr=err)
        url = await self._devtools_url(log)
        self._http = aiohttp.ClientSession()
        self._ws = await self._http.ws_connect(url, max_msg_size=0)  # screenshots are large
        self._reader = asyncio.create_task(self._read())
        return self

    async def __aexit__(self, *exc: object) -> None:
        if self._ws is not None and not self._ws.closed:
            with contextlib.suppress(Exception):
                await asyncio.wait_for(self.send("Browser.close"), 5)
        if self._reader is not None:
            self._reader.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._reader
        if self._ws is not None:
            await self._ws.close()
        if self._http is not None:
            await self._http.close()
        if self._proc is not None:
            try:
                await asyncio.to_thread(self._proc.wait, 10)
            except subprocess.TimeoutExpired:
                self._proc.kill()  # our own child, by its handle
                self._proc.wait()

    async def _devtools_url(self, log: Path) -> str:
        loop = asyncio.get_running_loop()
        end = loop.time() + START_TIMEOUT_S
        assert self._proc is not None
        while loop.time() < end:
            found = _LISTENING.search(log.read_text(errors="replace"))
            if found:
                return found.group(1)
            if self._proc.poll() is not None:
                break
            await asyncio.sleep(0.05)
        raise AssertionError(f"Chromium gave no DevTools address: {log.read_text(errors='replace')[-2000:]}")

    async def _read(self) -> None:
        assert self._ws is not None
        async for msg in self._ws:
            if msg.type != aiohttp.WSMsgType.TEXT:
                break
            data = msg.json()
            if "id" in data:
                future = self._waiting.pop(data["id"], None)
                if future is not None and not future.done():
                    future.set_result(data)
            elif data.get("sessionId") in self._pages:
                self._pages[data["sessionId"]].events.append((data["method"], data.get("params", {})))
        for future in self._waiting.values():
            if not future.done():
                future.set_exception(CdpError("the browser closed its DevTools socket"))

    async def send(self, method: str, params: dict[str, Any] | None = None,
                   session: str | None = None) -> dict[str, Any]:
        assert self._ws is not None
        msg_id = next(self._ids)
        message: dict[str, Any] = {"id": msg_id, "method": method, "params": params or {}}
        if session is not None:
            message["sessionId"] = session
        future: asyncio.Future[dict[str, Any]] = asyncio.get_running_loop().create_future()
        self._waiting[msg_id] = future
        await self._ws.send_json(message)
        answer = await asyncio.wait_for(future, 30)
        if "error" in answer:
            raise CdpError(f"{method}: {answer['error']}")
        result: dict[str, Any] = answer.get("result", {})
        return result

    async def new_page(self) -> Page:
        target = await self.send("Target.createTarget", {"url": "about:blank"})
        attached = await self.send("Target.attachToTarget", {"targetId": target["targetId"], "flatten": True})
        page = Page(self, attached["sessionId"])
        self._pages[page.session] = page
        return page
