"""An archive of a campaign: the catalogue as Parquet, each capture's decoded
tables as a Parquet dataset, and manifest.json with every file's SHA-256, size
and the units of every column."""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path
from typing import Any

import slipless.campaign.catalogue as catalogue
from slipless.campaign.columns import COLUMNS, UNITS
from slipless.campaign.scan import sha256_of
from slipless.errors import InputError
from slipless.version import __version__

MANIFEST = "manifest.json"
_ARROW = {"TEXT": "string", "INTEGER": "int64", "REAL": "float64"}


def export(folder: Path, out: Path, where: str | None = None) -> Path:
    """Write the archive of the catalogued runs (those matching `where`) into
    `out`; returns the manifest's path."""
    from slipless.io.table_parquet import _pyarrow

    rows = catalogue.query(folder, where)
    _pyarrow()  # before anything is written
    if out.exists() and not out.is_dir():
        raise InputError(f"{out}: exists and is not a folder")
    if out.is_dir() and any(out.iterdir()):  # the manifest must list this archive alone
        raise InputError(f"{out}: not empty: give the archive a new folder")
    out.mkdir(parents=True, exist_ok=True)
    _catalogue_parquet(rows, out / "catalogue.parquet")
    for capture, mirror in sorted({(r["capture"], r["mirror"]) for r in rows}):
        _tables(folder, capture, mirror, out / "tables" / Path(capture).with_suffix(""))
    return _manifest(out, folder, where)


def _catalogue_parquet(rows: list[dict[str, Any]], path: Path) -> None:
    from slipless.io.table_parquet import _pyarrow

    pa, pq = _pyarrow()  # an optional extra: without it, one line saying how to install it
    schema = pa.schema([pa.field(c.name, _ARROW[c.sql], metadata={"unit": c.unit, "what": c.what})
                        for c in COLUMNS])
    pq.write_table(pa.Table.from_pylist(rows, schema=schema), path)


def _tables(folder: Path, capture: str, mirror: str | None, dest: Path) -> None:
    from slipless.run import open_run

    dest.mkdir(parents=True, exist_ok=True)
    open_run([folder / capture], [] if mirror is None else [folder / mirror], tables=dest,
             table_format="parquet", hold=False)


def _manifest(out: Path, folder: Path, where: str | None) -> Path:
    from slipless.decode.tables import SPECS

    files = [{"path": p.relative_to(out).as_posix(), "sha256": sha256_of(p),
              "size_B": p.stat().st_size}
             for p in sorted(out.rglob("*")) if p.is_file() and p.name != MANIFEST]
    doc = {"slipless": __version__, "made_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
           "campaign": str(folder.resolve()), "where": where or None,
           "hash": "sha256", "files": files,
           "units": {"catalogue": UNITS,
                     "tables": {name: {c.name: c.unit for c in spec.columns}
                                for name, spec in SPECS.items()}},
           "notes": ["an empty unit: a count, a code or text",
                     "samples.value: in its stream's unit (streams.unit, by board, run and stream)",
                     "samples board seconds: tick_us / runs.tick_hz (by board and run)"]}
    path = out / MANIFEST
    path.write_text(json.dumps(doc, indent=1) + "\n")
    return path
