"""FOLDER/campaign.sqlite: a `captures` table (what was decoded, by SHA-256) and
a `runs` table (one row per capture, board and run)."""

from __future__ import annotations

import sqlite3
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from slipless.campaign.columns import COLUMNS, NAMES
from slipless.errors import InputError

CATALOGUE = "campaign.sqlite"

_SCHEMA = (
    "CREATE TABLE IF NOT EXISTS captures (capture TEXT PRIMARY KEY, sha256 TEXT NOT NULL, "
    "mirror_sha256 TEXT, size_B INTEGER, runs INTEGER, note TEXT)",
    "CREATE TABLE IF NOT EXISTS runs (" + ", ".join(f"{c.name} {c.sql}" for c in COLUMNS)
    + ", PRIMARY KEY (capture, board, run))",
)


def folder_of(folder: Path) -> Path:
    if not folder.is_dir():
        raise InputError(f"{folder}: not a folder")
    return folder


def connect(folder: Path) -> sqlite3.Connection:
    """The catalogue for writing (made when missing)."""
    path = folder_of(folder) / CATALOGUE
    try:
        con = sqlite3.connect(path)
        for stmt in _SCHEMA:
            con.execute(stmt)
    except sqlite3.Error as exc:
        raise InputError(f"{path}: not a campaign catalogue ({exc}): delete it and scan again "
                         "(it is rebuilt from the captures)") from exc
    return con


def read_only(folder: Path) -> sqlite3.Connection:
    """The catalogue opened read-only, so a --where condition cannot change it."""
    path = folder_of(folder) / CATALOGUE
    if not path.is_file():
        raise InputError(f"{folder}: no catalogue yet (run `slipless campaign scan {folder}`)")
    return sqlite3.connect(f"file:{path.resolve().as_posix()}?mode=ro", uri=True)


def known(con: sqlite3.Connection) -> dict[str, tuple[str, str | None]]:
    """capture -> (sha256, mirror sha256) of what was decoded last."""
    return {c: (s, m) for c, s, m in con.execute("SELECT capture, sha256, mirror_sha256 FROM captures")}


def replace(con: sqlite3.Connection, capture: str, sha: str, mirror_sha: str | None, size: int,
            rows: Iterable[dict[str, Any]], note: str = "") -> int:
    """The rows of one capture, in place of its old ones (one transaction)."""
    rows = list(rows)
    with con:
        con.execute("DELETE FROM runs WHERE capture = ?", (capture,))
        con.executemany(f"INSERT INTO runs ({', '.join(NAMES)}) VALUES "
                        f"({', '.join('?' * len(NAMES))})",
                        [tuple(r.get(n) for n in NAMES) for r in rows])
        con.execute("INSERT OR REPLACE INTO captures VALUES (?, ?, ?, ?, ?, ?)",
                    (capture, sha, mirror_sha, size, len(rows), note or None))
    return len(rows)


def forget(con: sqlite3.Connection, captures: Iterable[str]) -> None:
    """Drop the rows of captures no longer in the folder."""
    with con:
        for c in captures:
            con.execute("DELETE FROM runs WHERE capture = ?", (c,))
            con.execute("DELETE FROM captures WHERE capture = ?", (c,))


def query(folder: Path, where: str | None = None) -> list[dict[str, Any]]:
    """Catalogue rows (as dicts, ordered by capture, board, run) matching an SQL
    condition on the columns, read-only."""
    con = read_only(folder)
    sql = f"SELECT {', '.join(NAMES)} FROM runs"
    try:
        con.execute(sql + " LIMIT 0")
    except sqlite3.Error as exc:
        con.close()
        raise InputError(f"{folder / CATALOGUE}: not a campaign catalogue ({exc}): delete it "
                         "and scan again (it is rebuilt from the captures)") from exc
    if where and where.strip():
        sql += f" WHERE {where}"
    try:
        cur = con.execute(sql + " ORDER BY capture, board, run")
        return [dict(zip(NAMES, row)) for row in cur.fetchall()]
    except sqlite3.Error as exc:
        raise InputError(f"--where {where!r}: {exc}") from exc
    finally:
        con.close()
