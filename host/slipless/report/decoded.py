"""A folder written by `slipless decode --out DIR` as report input: its
inputs.json names the captures (and mirror files) it was decoded from, and
the report decodes those again, after checking they are still there and
unchanged (their SHA-256 against the one recorded).

A recorded path is looked for relative to the folder first (a folder moved
with its captures), then as recorded (relative to where decode ran).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from slipless.errors import InputError

INPUTS_FILE = "inputs.json"


@dataclass
class Followed:
    """What a decode folder leads to: inputs, mirror files and what could not be checked."""

    inputs: list[Path] = field(default_factory=list)
    mirrors: list[Path] = field(default_factory=list)
    unchecked: list[Path] = field(default_factory=list)  # inputs.json records no SHA-256


def sha256_of(path: Path) -> str:
    """The file's SHA-256 as the campaign catalogue takes it; unreadable: one line."""
    from slipless.campaign.scan import sha256_of as digest

    try:
        return digest(path)
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from exc


def split_inputs(inputs: Sequence[Path], mirrors: Sequence[Path] = ()) -> Followed:
    """Files as given, and decode folders replaced by what their inputs.json names."""
    out = Followed()
    for p in inputs:
        if p.is_dir():
            got = follow(p)
            out.inputs += got.inputs
            out.mirrors += got.mirrors
            out.unchecked += got.unchecked
        else:
            out.inputs.append(p)
    out.mirrors += list(mirrors)
    return out


def follow(folder: Path) -> Followed:
    """The captures and mirror files FOLDER/inputs.json names, each found and checked."""
    entries = _entries(folder)
    out = Followed()
    for e in entries:
        path, checked = _find(folder, e)
        (out.mirrors if e.get("kind") == "mirror" else out.inputs).append(path)
        if not checked:
            out.unchecked.append(path)
    if not out.inputs:
        raise InputError(f"{folder / INPUTS_FILE}: names no input to decode")
    return out


def _entries(folder: Path) -> list[dict[str, Any]]:
    path = folder / INPUTS_FILE
    if not path.is_file():
        raise InputError(f"{folder}: no {INPUTS_FILE} (not a folder written by "
                         "`slipless decode --out`)")
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise InputError(f"{path}: not readable as JSON ({exc})") from exc
    entries = doc.get("inputs") if isinstance(doc, dict) else None
    if not isinstance(entries, list) or not all(
            isinstance(e, dict) and isinstance(e.get("path"), str) and e["path"] for e in entries):
        raise InputError(f"{path}: expected {{\"inputs\": [{{\"path\": ...}}, ...]}}")
    return entries


def _find(folder: Path, entry: dict[str, Any]) -> tuple[Path, bool]:
    """(the file, whether its SHA-256 was checked); InputError when missing or changed."""
    recorded = Path(entry["path"])
    want = entry.get("sha256")
    candidates = [recorded] if recorded.is_absolute() else [folder / recorded, recorded]
    present = [c for c in dict.fromkeys(candidates) if c.is_file()]
    if not present:
        raise InputError(f"{folder / INPUTS_FILE}: {recorded} is missing (looked for "
                         + " and ".join(str(c) for c in dict.fromkeys(candidates)) + ")")
    if not isinstance(want, str) or not want:
        return present[0], False
    sums = {c: sha256_of(c) for c in present}
    for c, got in sums.items():
        if got == want.lower():
            return c, True
    raise InputError(f"{folder / INPUTS_FILE}: {present[0]} has changed since it was decoded "
                     f"(SHA-256 {sums[present[0]][:12]}..., recorded {want[:12]}...)")
