"""`slipless board ...`: find boards in range and talk to one outside a run."""

from __future__ import annotations

import argparse
from typing import Any

from rich.console import Console

from slipless.errors import InputError


def add_parser(sub: Any) -> None:
    b = sub.add_parser("board", help="find boards in range; status, stop or ping one outside a run")
    b.add_subparsers(dest="board_command", required=True)


def run_board(args: argparse.Namespace, console: Console) -> int:
    raise InputError("board: not built yet")
