"""JSON files people write by hand (configs, calibrations): a slip is one line
that says where it is."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from slipless.errors import InputError


def parse_json(text: str, path: Path) -> Any:
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: not valid JSON: line {exc.lineno} column {exc.colno}: "
                         f"{exc.msg}") from None
    except RecursionError:
        raise InputError(f"{path}: not valid JSON: nested too deeply") from None
