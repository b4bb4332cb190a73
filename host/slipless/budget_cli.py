"""`slipless budget`: will the planned run fit the link, the mirror and the battery?"""

from __future__ import annotations

import argparse
from typing import Any

from rich.console import Console

from slipless.errors import InputError


def add_parser(sub: Any) -> None:
    b = sub.add_parser("budget", help="check a config's data rate against the link, mirror and battery")
    b.add_argument("--config", metavar="FILE", help="board config JSON (default: built-in defaults)")


def run_budget(args: argparse.Namespace, console: Console) -> int:
    raise InputError("budget: not built yet")
