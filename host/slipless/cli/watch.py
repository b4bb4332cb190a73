"""`slipless watch` (a capture played back into the live view) and the live
view's options and loop, shared with `record --watch`."""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import signal
import webbrowser
from collections.abc import Awaitable, Callable
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.live import Live

from slipless.cli.live_text import alarm_line, render
from slipless.errors import InputError
from slipless.live.state import LiveState, WatchOptions

DEFAULT_PORT = 8765
TERMINAL_EVERY_S = 0.5


def add_view_options(p: Any, prefix: str = "") -> None:
    """The live view's options; `prefix` names them for record (--watch-port...)."""
    p.add_argument(f"--{prefix}port", type=int, default=DEFAULT_PORT, metavar="N",
                   help=f"the page's port on 127.0.0.1 (default {DEFAULT_PORT}; 0: any free one)")
    p.add_argument(f"--{prefix}terminal", action="store_true",
                   help="show the live view in this terminal instead of a web page")
    p.add_argument(f"--{prefix}open", action="store_true",
                   help="open the page in the default browser")
    p.add_argument(f"--{prefix}window", type=float, default=30.0, metavar="S",
                   help="run seconds each stream plot spans (default 30)")
    p.add_argument(f"--{prefix}current", default="coil_current", metavar="NAME",
                   help="the coil-current stream checked against the coil's program "
                        "(default coil_current)")
    p.add_argument(f"--{prefix}angle-stream", metavar="NAME",
                   help="rotation-rate stream for loss by angle (default: the first with a rate unit)")
    p.add_argument(f"--{prefix}battery-low", type=float, default=3.5, metavar="V",
                   help="warn below this battery voltage (default 3.5 V, one Li-ion cell; "
                        "an alarm 0.2 V lower)")


def add_parser(sub: Any) -> None:
    w = sub.add_parser("watch", help="play a capture back into the live view (a local web page "
                       "or the terminal) at real or faster speed")
    w.add_argument("capture", type=Path, metavar="CAPTURE")
    w.add_argument("--speed", type=float, default=1.0, metavar="X",
                   help="playback speed: 1 real time (default), 10 ten times faster, 0 as fast "
                        "as possible")
    w.add_argument("--exit-at-end", action="store_true",
                   help="stop when the capture has been played (default: keep showing it "
                        "until Ctrl-C)")
    add_view_options(w)


def view_options(args: argparse.Namespace, prefix: str = "") -> WatchOptions:
    def get(name: str) -> Any:
        return getattr(args, prefix.replace("-", "_") + name)

    window, low = get("window"), get("battery_low")
    for value, what in ((window, "window"), (low, "battery-low")):
        if not value > 0 or value != value or value == float("inf"):
            raise InputError(f"--{prefix}{what}: must be a positive number, not {value}")
    port = get("port")
    if not 0 <= port <= 65535:
        raise InputError(f"--{prefix}port: {port} is not a port number (0 to 65535)")
    return WatchOptions(window_s=window, current=get("current"), angle_stream=get("angle_stream"),
                        battery_warn_v=low, battery_alarm_v=low - 0.2)


async def show(state: LiveState, now_ns: Callable[[], int], args: argparse.Namespace,
               console: Console, until: Awaitable[Any], prefix: str = "") -> None:
    """Serve the page (or draw the terminal view) until `until` is done; alarms
    raised are printed as lines either way."""
    get: Callable[[str], Any] = lambda name: getattr(args, prefix.replace("-", "_") + name)
    task = asyncio.ensure_future(until)
    if get("terminal"):
        with Live(render(state.snapshot(now_ns())), console=console, auto_refresh=False) as live:
            while not task.done():
                await asyncio.wait({task}, timeout=TERMINAL_EVERY_S)
                snap = state.snapshot(now_ns())
                for e in state.alarms.take_raised():
                    live.console.print(alarm_line(e))
                live.update(render(snap), refresh=True)
        await task
        return
    from slipless.live.server import WatchServer

    server = WatchServer(lambda: state.snapshot(now_ns()), port=get("port"), title=state.title)
    url = await server.start()
    console.print(f"live view: {url} (on this computer only; Ctrl-C to stop)")
    if get("open"):
        webbrowser.open(url)
    try:
        while not task.done():
            await asyncio.wait({task}, timeout=TERMINAL_EVERY_S)
            state.update(now_ns())
            for e in state.alarms.take_raised():
                console.print(alarm_line(e))
        await task
    finally:
        await server.stop()


def run_watch(args: argparse.Namespace, console: Console) -> int:
    from slipless.io.inputs import check_input, open_capture_input
    from slipless.live.replay import Replay

    opts = view_options(args)
    if not args.speed >= 0 or args.speed == float("inf"):
        raise InputError(f"--speed: must be 0 (as fast as possible) or more, not {args.speed}")
    check_input(args.capture)
    f, _ = open_capture_input(args.capture)  # a capture (with receive times), or a clear refusal
    f.close()
    state = LiveState(opts, title=f"slipless watch: {args.capture.name}", speed=args.speed or None)
    replay = Replay(args.capture, state, speed=args.speed)

    async def play() -> None:
        await replay.run()
        t = state.totals()
        console.print(f"played {replay.records:,} records: {t[0]:,} frames, {t[1]:,} missing")
        if not args.exit_at_end:
            console.print("the view stays up: Ctrl-C to stop")
            await asyncio.Event().wait()

    async def main() -> None:
        loop = asyncio.get_running_loop()
        job = asyncio.ensure_future(play())
        with contextlib.suppress(NotImplementedError):  # (no signal handlers on Windows)
            loop.add_signal_handler(signal.SIGINT, job.cancel)
        with contextlib.suppress(asyncio.CancelledError):
            await show(state, replay.now_ns, args, console, job)

    asyncio.run(main())
    return 0
