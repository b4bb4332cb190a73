"""Run the same board script under real MicroPython and under CPython."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="session")
def cpython_board():
    """Run code with the board's modules importable (firmware/ and wire.py)."""

    def run(code: str, timeout: float = 120) -> str:
        prelude = (f"import sys; sys.path[:0] = [{str(REPO / 'firmware')!r}, "
                   f"{str(REPO / 'protocol')!r}]\n")
        proc = subprocess.run([sys.executable, "-c", prelude + code], capture_output=True,
                              text=True, timeout=timeout)
        if proc.returncode:
            raise AssertionError(proc.stderr)
        return proc.stdout

    return run


@pytest.fixture(scope="session", params=["micropython", "cpython"])
def board_runtime(request, micropython, cpython_board):
    """Each test using this runs twice: on the board's interpreter and on CPython."""
    return micropython if request.param == "micropython" else cpython_board
