"""`slipless flash` on the command line: the plan table, the copy's progress,
the cautions shown once per laptop (the work is in board/flash.py)."""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

from rich.console import Console
from rich.progress import BarColumn, DownloadColumn, Progress
from rich.table import Table

from slipless.board.files import firmware_dir
from slipless.board.flash import (
    _PREPARE,
    CAUTIONS,
    Board,
    Item,
    build_plan,
    check_port,
    ensure_key,
    firmware_hash,
    keep_key,
    probe,
    resolve_config,
    verify,
)
from slipless.errors import InputError


def show_plan(plan: list[Item], console: Console, title: str) -> None:
    t = Table(title=title, title_justify="left")
    for col, just in (("source", "left"), ("destination", "left"), ("bytes", "right"),
                      ("sha256", "left")):
        t.add_column(col, justify=just)  # type: ignore[arg-type]
    for it in plan:
        t.add_row(it.source, it.dest, f"{len(it.data):,}", it.sha256[:12])
    console.print(t)


def firmware_line(plan: list[Item]) -> str:
    """The firmware hash the board will report (SPEC 3.11), for `board status --firmware`."""
    files, size, sha = firmware_hash(plan)
    return (f"firmware hash {sha} ({files} code files, {size:,} bytes): the board reports it; "
            "`slipless board status --firmware` compares")


def show_cautions_once(console: Console) -> None:
    from slipless.record.keys import config_home

    marker = config_home() / "flashed-before"
    if marker.exists():
        console.print("Safety cautions still apply (secure, balance, guard the rotor; coil off "
                      "before handling).")
        return
    console.print(CAUTIONS)
    try:
        marker.parent.mkdir(parents=True, exist_ok=True)
        marker.write_text("slipless showed its safety cautions after the first flash on this laptop\n")
    except OSError:
        pass  # cannot remember: show them again next time, which is harmless



GATT_CACHE_NOTE = (
    "note: if this firmware changed the board's GATT layout (a new slipless version), a laptop "
    "that connected before may hold stale GATT handles (BlueZ caches them): if `slipless record` "
    "then cannot find the data characteristic, remove the board from the laptop's Bluetooth "
    "devices (Linux: bluetoothctl remove ADDRESS) and scan again.")


def show_budget(config: dict, profile: dict, console: Console) -> None:
    """The data rate against a slow and a fast link (slipless budget has the options)."""
    try:
        from slipless.board import budget
    except ImportError:  # pragma: no cover - budget ships with the package
        return
    lines_for = getattr(budget, "summary_lines", None)
    if lines_for is not None:
        for line in lines_for(config, profile):
            console.print(line)


def run_flash(args: argparse.Namespace, console: Console) -> int:
    fw = firmware_dir()
    config, profile = resolve_config(fw, args.config, args.board, flashing=True)
    ensure_key(config)  # the laptop keeps it only once the board verified it (keep_key)
    if not args.dry_run:
        if not args.port:
            raise InputError("flash needs --port (the board's serial port), or --dry-run to only "
                             "see the plan")
        check_port(args.port)
    with tempfile.TemporaryDirectory(prefix="slipless-flash-") as tmp:
        work = Path(tmp)
        plan = build_plan(fw, config, profile, work)
        if args.dry_run:
            where = f" on {args.port}" if args.port else ""
            show_plan(plan, console, f"flash plan for {profile['name']}{where} (dry run: "
                      "nothing copied)")
            show_budget(config, profile, console)
            console.print(firmware_line(plan))
            return 0
        show_budget(config, profile, console)  # its warnings (a mirror shorter than the run...)
        board = Board(args.port)
        remove = probe(board, plan, profile, fw, work, console.print)
        board.exec(_PREPARE % (remove,), "preparing the board")
        total = sum(len(it.data) for it in plan)
        with Progress("[progress.description]{task.description}", BarColumn(), DownloadColumn(),
                      console=console, transient=True) as bar:
            task = bar.add_task("copying", total=total)
            for it in plan:
                bar.update(task, description=it.dest)
                local = work / "copy.bin"
                local.write_bytes(it.data)
                board.copy(local, it.dest, len(it.data))
                bar.advance(task, len(it.data))
                console.print(f"copied {it.dest} ({len(it.data):,} B)")
        verify(board, plan)
    key_file, kept = keep_key(config)
    show_plan(plan, console, f"flashed {profile['name']} on {args.port}: {len(plan)} files, "
              f"{total:,} bytes, all sha256 verified")
    console.print(firmware_line(plan))
    console.print(f"board key: {key_file} (readable only by you; `slipless record` uses it)")
    if kept is not None:
        console.print(f"the key this laptop held before for board {config['board_id']} is kept "
                      f"as {kept}")
    console.print(GATT_CACHE_NOTE)
    if any(it.dest == "/main.py" for it in plan):
        console.print("Reset or power-cycle the board to start the new firmware.")
    else:
        console.print("note: firmware/main.py does not exist yet, so nothing starts at boot.")
    show_cautions_once(console)
    return 0
