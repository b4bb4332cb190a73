"""What a user installs: the wheel, built from this checkout, installed with its
dependencies into a fresh virtual environment, and every command run from
there, away from the checkout (so nothing can come from the source tree)."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from slipless.cli import COMMANDS as CLI_COMMANDS

REPO = Path(__file__).resolve().parents[2]
COMMANDS = ("decode", *sorted(CLI_COMMANDS))  # every command the parser has


def run(cmd: list[str], cwd: Path, timeout: float = 600) -> subprocess.CompletedProcess[str]:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    env["SLIPLESS_HOME"] = str(cwd / "home")  # keys and markers stay in the test's folder
    proc = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=timeout, env=env,
                          stdin=subprocess.DEVNULL)
    assert proc.returncode == 0, (f"{cmd}: exit {proc.returncode}\n{proc.stdout[-3000:]}\n"
                                  f"{proc.stderr[-3000:]}")
    return proc


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("wheel")
    # Built from a copy: setuptools reuses a build/ folder, whose stale files would
    # land in the wheel and hide a missing one.
    src = tmp / "src"
    shutil.copytree(REPO, src, ignore=shutil.ignore_patterns(
        ".git", ".venv", "node_modules", "build", "*.egg-info", ".pytest_cache", ".hypothesis",
        ".fuzz", "demo-out", "__pycache__", "*.mpy"))
    run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "--quiet",
         "-w", str(tmp / "dist"), str(src)], tmp)
    (wheel,) = (tmp / "dist").glob("slipless-*.whl")
    run([getattr(sys, "_base_executable", sys.executable), "-m", "venv", str(tmp / "venv")], tmp)
    run([str(tmp / "venv" / "bin" / "python"), "-m", "pip", "install", "--quiet",
         "--disable-pip-version-check", str(wheel)], tmp)
    return tmp


def test_installed_package_is_the_wheel(installed: Path) -> None:
    py = installed / "venv" / "bin" / "python"
    out = run([str(py), "-c", "import slipless, slipless.board.files as b, json; print(json.dumps("
               "[slipless.__file__, str(b.firmware_dir()), str(b.wire_path())]))"], installed)
    paths = json.loads(out.stdout)
    assert all(p.startswith(str(installed / "venv")) for p in paths), paths
    assert not any(str(REPO) in p for p in paths)


def test_every_command_answers_help(installed: Path) -> None:
    exe = str(installed / "venv" / "bin" / "slipless")
    assert "usage: slipless" in run([exe, "--help"], installed).stdout
    for command in COMMANDS:
        assert f"usage: slipless {command}" in run([exe, command, "--help"], installed).stdout


def test_flash_dry_run_from_the_wheel(installed: Path) -> None:
    exe = str(installed / "venv" / "bin" / "slipless")
    cfg = installed / "rig.json"
    cfg.write_text((REPO / "firmware" / "config.example.json").read_text())
    out = run([exe, "flash", "--config", str(cfg), "--dry-run"], installed).stdout
    assert "dry run: nothing copied" in out
    for dest in ("/lib/wire.mpy", "/lib/board.mpy", "/config.json", "/main.py"):
        assert dest in out


def test_demo_and_every_analysis_from_the_wheel(installed: Path) -> None:
    """The demo's capture through every command that reads one; record, pull and
    board need a radio or a board and are covered by --help above."""
    exe = str(installed / "venv" / "bin" / "slipless")
    demo = installed / "demo"
    out = run([exe, "demo", "--seconds", "60", "--out", str(demo)], installed).stdout
    assert "loss (radio only):" in out and ": closes" in out
    assert (demo / "report.html").is_file()
    cap, mirror = str(demo / "run.slcap"), str(demo / "run.mirror")
    work = installed / "again"
    run([exe, "decode", cap, "--mirror", mirror, "--out", str(work / "tables")], installed)
    assert (work / "tables" / "samples.csv").stat().st_size > 0
    loss = json.loads(run([exe, "loss", cap, "--mirror", mirror, "--json"], installed).stdout)
    assert loss["closes"]
    run([exe, "align", cap, "--grid", "10ms", "--out", str(work / "aligned")], installed)
    assert (work / "aligned" / "clock.json").is_file()
    rig = run([exe, "predict", "--inner-mm", "20", "--outer-mm", "40", "--cap-length-mm", "100",
               "--turns", "500", "--coil-length-mm", "200", "--coil-radius-mm", "50", "--amps",
               "2", "--rpm", "60", "--json"], installed).stdout
    (work / "rig.json").write_text(rig)
    run([exe, "pulses", cap, "--out", str(work / "pulses"), "--prediction",
         str(work / "rig.json")], installed)
    assert (work / "pulses" / "summary.json").is_file()
    run([exe, "report", cap, "--mirror", mirror, "--out", str(work / "run.html")], installed)
    assert (work / "run.html").stat().st_size > 0
    cfg = installed / "rig-config.json"
    cfg.write_text((REPO / "firmware" / "config.example.json").read_text())
    run([exe, "budget", "--config", str(cfg), "--link", "fast"], installed)
    out = run([exe, "watch", cap, "--speed", "0", "--exit-at-end", "--terminal"], installed).stdout
    assert "played" in out and "cap_amp" in out


LIVE_PAGE = """
import asyncio, sys, urllib.request
from slipless.live.server import WatchServer
async def main():
    server = WatchServer(lambda: {"v": 1})
    url = await server.start()
    loop = asyncio.get_running_loop()
    for path in ("", "static/watch.js", "static/vendor/uplot/uPlot.iife.min.js", "snapshot.json"):
        body = await loop.run_in_executor(None, lambda: urllib.request.urlopen(url + path).read())
        print(path or "/", len(body))
    await server.stop()
asyncio.run(main())
"""


def test_live_page_is_served_from_the_wheel(installed: Path) -> None:
    """The page, its script and the vendored uPlot are package data of the wheel."""
    py = str(installed / "venv" / "bin" / "python")
    sizes = dict(line.split() for line in run([py, "-c", LIVE_PAGE], installed).stdout.splitlines())
    vendored = REPO / "host" / "slipless" / "live" / "static" / "vendor" / "uplot" / "uPlot.iife.min.js"
    assert int(sizes["static/vendor/uplot/uPlot.iife.min.js"]) == vendored.stat().st_size
    assert int(sizes["/"]) > 500 and int(sizes["static/watch.js"]) > 1000
