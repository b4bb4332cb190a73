"""Find a campaign's captures, decode each new or changed one once, catalogue its runs."""

from __future__ import annotations

import hashlib
import sqlite3
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import slipless.campaign.catalogue as catalogue
from slipless.campaign.rows import run_rows
from slipless.errors import SliplessError

CHUNK_B = 1 << 20  # hashing reads in pieces: captures can be larger than memory


@dataclass
class ScanCount:
    decoded: int = 0
    unchanged: int = 0
    rows: int = 0
    forgotten: int = 0
    failed: list[str] = field(default_factory=list)  # one line per capture that could not be read


def sha256_of(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as f:
        while chunk := f.read(CHUNK_B):
            h.update(chunk)
    return h.hexdigest()


def captures_in(folder: Path) -> list[tuple[Path, Path | None]]:
    """Every *.slcap under the folder, with the *.mirror of the same stem beside it."""
    found = []
    for cap in sorted(catalogue.folder_of(folder).rglob("*.slcap")):
        mirror = cap.with_suffix(".mirror")
        found.append((cap, mirror if mirror.is_file() else None))
    return found


def scan(folder: Path, prediction: Path | None = None,
         told: Callable[[int, int, str, str], None] | None = None, progress: Any = None,
         again: bool = False) -> ScanCount:
    """Bring FOLDER/campaign.sqlite up to date.

    told(i, n, capture, what) hears of each capture (the i-th of n):
    "decoded", "unchanged" or "failed: why"; progress is open_run's (a bar
    over the bytes being decoded); prediction: `slipless predict --json`
    output for every run's d / model (else the rig a capture's header keeps);
    again: decode unchanged captures too (after a new prediction or release).
    """
    count = ScanCount()
    con = catalogue.connect(folder)
    try:
        before = catalogue.known(con)
        seen = set()
        found = captures_in(folder)
        for i, (cap, mirror) in enumerate(found, 1):
            name = cap.relative_to(folder).as_posix()
            seen.add(name)
            old = None if again else before.get(name)
            what = _one(con, folder, cap, mirror, name, old, prediction, count, progress)
            if told is not None:
                told(i, len(found), name, what)
        gone = sorted(set(before) - seen)
        catalogue.forget(con, gone)
        count.forgotten = len(gone)
    finally:
        con.close()
    return count


def _one(con: sqlite3.Connection, folder: Path, cap: Path, mirror: Path | None, name: str,
         old: tuple[str, str | None] | None, prediction: Path | None, count: ScanCount, progress: Any) -> str:
    from slipless.run import open_run

    sha = sha256_of(cap)
    mirror_sha = None if mirror is None else sha256_of(mirror)
    if old == (sha, mirror_sha):
        count.unchanged += 1
        return "unchanged"
    mirror_name = None if mirror is None else mirror.relative_to(folder).as_posix()
    try:
        run = open_run([cap], [] if mirror is None else [mirror], progress=progress)
        rows = run_rows(run, name, sha, mirror_name, prediction)
    except SliplessError as exc:
        count.failed.append(f"{name}: {exc}")
        catalogue.replace(con, name, sha, mirror_sha, cap.stat().st_size, [], str(exc))
        return f"failed: {exc}"
    count.decoded += 1
    count.rows += catalogue.replace(con, name, sha, mirror_sha, cap.stat().st_size, rows)
    return "decoded"
