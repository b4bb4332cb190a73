"""The watch page's server: the page and its files, one snapshot as JSON, and a
WebSocket that pushes a snapshot every `every_s` to each open page.

It listens on a loopback address only and checks the Host and Origin headers:
the page shows a run's data and takes no login, so neither another machine nor
a web site open in the same browser (DNS rebinding, cross-site WebSocket) may
read it. Every response forbids loading anything from elsewhere (CSP).

Each tick calls `snapshot()` once and hands the same text to every client;
each client sends only the newest text it holds, so a slow or broken page
skips updates or is dropped without holding up the others.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import json
import logging
import math
import socket
import sys
from collections.abc import Callable
from importlib import resources
from importlib.resources.abc import Traversable
from typing import Any

from aiohttp import WSMsgType, web

from slipless.errors import InputError

LOOPBACK = ("127.0.0.1", "::1", "localhost")
SEND_TIMEOUT_S = 5.0  # a page that takes longer to accept one snapshot is dropped (common practice)
CLOSE_TIMEOUT_S = 1.0  # how long stop() waits for each page to acknowledge the close
_CONTENT_TYPES = {".html": "text/html", ".js": "text/javascript", ".css": "text/css",
                  ".svg": "image/svg+xml", "": "text/plain"}
log = logging.getLogger(__name__)


def encode(snapshot: dict[str, Any]) -> str:
    """Strict JSON (RFC 8259 has no NaN or Infinity): non-finite floats become null."""
    try:
        return json.dumps(snapshot, allow_nan=False, separators=(",", ":"), default=_plain)
    except ValueError:  # a NaN or an infinity somewhere: clean the whole tree once
        return json.dumps(_finite(snapshot), allow_nan=False, separators=(",", ":"), default=_plain)


def _plain(value: Any) -> Any:
    """numpy arrays and scalars, should a snapshot carry them, as plain lists and numbers."""
    if hasattr(value, "tolist"):
        return _finite(value.tolist())
    raise TypeError(f"{type(value).__name__} is not JSON-ready")


def _finite(value: Any) -> Any:
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    if hasattr(value, "tolist"):
        return _finite(value.tolist())
    return value


def _listen(host: str, port: int) -> socket.socket:
    """A listening socket on a loopback address, or an InputError saying why not."""
    if host not in LOOPBACK:
        raise InputError(f"the watch page listens on loopback only (127.0.0.1, ::1 or localhost), "
                         f"not {host!r}: it shows a run's data and has no login")
    if not 0 <= port <= 65535:
        raise InputError(f"port {port} is not a TCP port (0 to 65535; 0 picks a free one)")
    address = "::1" if host == "::1" else "127.0.0.1"  # localhost: one address, one port
    family = socket.AF_INET6 if address == "::1" else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    try:
        if sys.platform != "win32":  # a restart may reuse a port in TIME_WAIT, never a live one
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        sock.bind((address, port))
        sock.listen(128)
    except OSError as e:
        sock.close()
        if e.errno == errno.EADDRINUSE:
            raise InputError(f"port {port} on {address} is in use: choose another with --port") from None
        raise InputError(f"cannot listen on {address} port {port}: {e.strerror or e}") from None
    sock.setblocking(False)
    return sock


def _static_files() -> dict[str, Traversable]:
    """Every file under the package's static/ folder by its path there (works from a
    wheel too); serving only these names leaves no path to climb out of it."""
    found: dict[str, Traversable] = {}

    def walk(folder: Traversable, prefix: str) -> None:
        for item in folder.iterdir():
            if item.is_dir():
                walk(item, f"{prefix}{item.name}/")
            elif item.is_file():
                found[prefix + item.name] = item

    walk(resources.files("slipless.live").joinpath("static"), "")
    return found


def _content_type(name: str) -> str:
    suffix = name[name.rfind("."):] if "." in name.rsplit("/", 1)[-1] else ""
    return _CONTENT_TYPES.get(suffix, "application/octet-stream")


class _Client:
    """One open page: holds the newest snapshot text not yet sent, nothing older."""

    def __init__(self, ws: web.WebSocketResponse) -> None:
        self.ws = ws
        self._pending: str | None = None
        self._ready = asyncio.Event()

    def offer(self, text: str) -> None:
        self._pending = text
        self._ready.set()

    async def send_forever(self, sent: Callable[[], None]) -> None:
        while not self.ws.closed:
            await self._ready.wait()
            self._ready.clear()
            text, self._pending = self._pending, None
            if text is None:
                continue
            try:
                await asyncio.wait_for(self.ws.send_str(text), SEND_TIMEOUT_S)
            except (ConnectionError, RuntimeError, TimeoutError):
                break  # gone or stuck: drop it, the others carry on
            sent()
        with contextlib.suppress(Exception):
            await asyncio.wait_for(self.ws.close(code=1011, message=b"send failed"), CLOSE_TIMEOUT_S)


class WatchServer:
    """Serves the watch page on a loopback address and pushes `snapshot()` to it."""

    def __init__(self, snapshot: Callable[[], dict[str, Any]], host: str = "127.0.0.1", port: int = 0,
                 every_s: float = 0.25, title: str = "slipless watch") -> None:
        if not (math.isfinite(every_s) and every_s > 0):
            raise ValueError(f"every_s must be a positive number of seconds, not {every_s!r}")
        self._snapshot = snapshot
        self.host, self.port, self.every_s, self.title = host, port, every_s, title
        self._clients: set[_Client] = set()
        self._runner: web.AppRunner | None = None
        self._ticker: asyncio.Task[None] | None = None
        self._files = _static_files()
        self._hosts: set[str] = set()
        self.updates_sent = 0  # snapshots sent over WebSockets, each page counted
        self.snapshot_errors = 0  # ticks skipped because snapshot() raised

    @property
    def clients(self) -> int:
        """Open WebSockets (pages watching)."""
        return sum(1 for c in self._clients if not c.ws.closed)

    @property
    def url(self) -> str:
        host = "[::1]" if self.host == "::1" else "127.0.0.1"
        return f"http://{host}:{self.port}/"

    async def start(self) -> str:
        """Listen and start pushing; returns the page's address (the real port when port=0)."""
        if self._runner is not None:
            raise RuntimeError("this WatchServer is already running")
        sock = _listen(self.host, self.port)
        self.port = sock.getsockname()[1]
        self._hosts = {f"{name}:{self.port}" for name in ("127.0.0.1", "localhost", "[::1]")}
        app = web.Application(middlewares=[self._only_loopback_hosts])
        app.router.add_get("/", self._page)
        app.router.add_get("/snapshot.json", self._snapshot_json)
        app.router.add_get("/ws", self._websocket)
        app.router.add_get("/static/{name:.+}", self._static)
        app.on_response_prepare.append(self._headers)
        self._runner = web.AppRunner(app, access_log=None, handle_signals=False,
                                     shutdown_timeout=CLOSE_TIMEOUT_S)
        await self._runner.setup()
        await web.SockSite(self._runner, sock).start()
        self._ticker = asyncio.create_task(self._tick_forever())
        return self.url

    async def stop(self) -> None:
        """Close every page's socket (they show "waiting" and retry) and stop listening."""
        if self._ticker is not None:
            self._ticker.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._ticker
            self._ticker = None
        await asyncio.gather(*(c.ws.close(code=1001, message=b"server stopping")
                               for c in list(self._clients)), return_exceptions=True)
        if self._runner is not None:
            await self._runner.cleanup()
            self._runner = None

    async def _tick_forever(self) -> None:
        loop = asyncio.get_running_loop()
        next_s = loop.time()
        while True:
            next_s += self.every_s
            if self._clients:  # nobody watching: no snapshot work at all
                text = self._encoded()
                if text is not None:
                    for client in self._clients:
                        client.offer(text)
            next_s = max(next_s, loop.time())  # after a stall, resume the cadence, no burst
            await asyncio.sleep(next_s - loop.time())

    def _encoded(self) -> str | None:
        try:
            return encode(self._snapshot())
        except Exception as e:  # a bad snapshot must not end the watch: skip it, say so once
            self.snapshot_errors += 1
            if self.snapshot_errors == 1:
                log.error("live snapshot failed (%s: %s); skipping such updates", type(e).__name__, e)
            return None

    def _count_sent(self) -> None:
        self.updates_sent += 1

    @web.middleware
    async def _only_loopback_hosts(self, request: web.Request,
                                   handler: Callable[[web.Request], Any]) -> web.StreamResponse:
        if request.host not in self._hosts:  # a foreign name resolving to us (DNS rebinding)
            raise web.HTTPForbidden(text="the watch page answers only to 127.0.0.1, localhost and [::1]\n")
        response: web.StreamResponse = await handler(request)
        return response

    async def _headers(self, request: web.Request, response: web.StreamResponse) -> None:
        ws = f"ws://127.0.0.1:{self.port} ws://localhost:{self.port}"
        response.headers["Content-Security-Policy"] = (
            f"default-src 'self'; connect-src 'self' {ws}; img-src 'self' data:; style-src 'self'; "
            "script-src 'self'; object-src 'none'; base-uri 'none'; form-action 'none'; "
            "frame-ancestors 'none'")
        response.headers["X-Content-Type-Options"] = "nosniff"
        response.headers["Referrer-Policy"] = "no-referrer"
        response.headers["Cache-Control"] = "no-store"

    async def _page(self, request: web.Request) -> web.Response:
        return self._file_response("watch.html")

    async def _static(self, request: web.Request) -> web.Response:
        return self._file_response(request.match_info["name"])

    def _file_response(self, name: str) -> web.Response:
        item = self._files.get(name)
        if item is None:
            raise web.HTTPNotFound(text=f"no file {name!r} in the watch page\n")
        body = item.read_bytes()
        ctype = _content_type(name)
        if ctype == "text/html":
            body = body.replace(b"{{title}}", _html_text(self.title).encode())
        charset = "utf-8" if ctype.startswith("text/") or ctype.endswith("+xml") else None
        return web.Response(body=body, content_type=ctype, charset=charset)

    async def _snapshot_json(self, request: web.Request) -> web.Response:
        text = self._encoded()
        if text is None:
            raise web.HTTPServiceUnavailable(text="the live state could not make a snapshot\n")
        return web.Response(text=text, content_type="application/json")

    async def _websocket(self, request: web.Request) -> web.WebSocketResponse:
        origin = request.headers.get("Origin")
        if origin is not None and origin.removeprefix("http://") not in self._hosts:
            raise web.HTTPForbidden(text="the watch socket is for the watch page only\n")
        ws = web.WebSocketResponse(heartbeat=10.0, max_msg_size=4096)
        await ws.prepare(request)
        client = _Client(ws)
        self._clients.add(client)
        sender = asyncio.create_task(client.send_forever(self._count_sent))
        text = self._encoded()
        if text is not None:
            client.offer(text)
        try:
            async for msg in ws:  # the page sends nothing we need; reading notices the close
                if msg.type == WSMsgType.ERROR:
                    break
        finally:
            self._clients.discard(client)
            sender.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await sender
            await ws.close()
        return ws


def _html_text(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace('"', "&quot;")
