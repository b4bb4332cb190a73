"""The catalogue's columns: name, SQLite type, unit and meaning, in one table
that makes the schema, the list command's header and the manifest's units."""

from __future__ import annotations

from typing import NamedTuple


class Column(NamedTuple):
    name: str
    sql: str
    unit: str
    what: str


COLUMNS: tuple[Column, ...] = (
    Column("capture", "TEXT", "", "the capture's path inside the campaign folder"),
    Column("sha256", "TEXT", "", "SHA-256 of the capture's bytes"),
    Column("mirror", "TEXT", "", "the board's mirror file merged after it, if any"),
    Column("board", "INTEGER", "", "board id"),
    Column("run", "INTEGER", "", "run number on that board"),
    Column("label", "TEXT", "", "the capture header's label"),
    Column("operator", "TEXT", "", "the capture header's operator"),
    Column("amplifier", "TEXT", "", "the capture header's amplifier"),
    Column("first_utc", "TEXT", "UTC", "first frame received by the laptop (ISO 8601)"),
    Column("last_utc", "TEXT", "UTC", "last frame received by the laptop (ISO 8601)"),
    Column("duration_s", "REAL", "s", "last minus first laptop receive time"),
    Column("streams", "TEXT", "Hz", "every stream as name:rate"),
    Column("tick_hz", "REAL", "Hz", "the board clock's tick rate"),
    Column("samples", "INTEGER", "", "samples decoded"),
    Column("frames_expected", "INTEGER", "", "frames the board sent"),
    Column("frames_received", "INTEGER", "", "frames that arrived live"),
    Column("frames_recovered", "INTEGER", "", "frames filled by resends or the mirror"),
    Column("frames_lost", "INTEGER", "", "frames never received"),
    Column("loss_percent", "REAL", "%", "share of expected frames lost after recovery"),
    Column("clock_bound_ms", "REAL", "ms", "bound on the board-to-laptop clock error"),
    Column("clock_basis", "TEXT", "", "what the clock fit rests on"),
    Column("pulses", "INTEGER", "", "coil pulses used by the fit (null: none found)"),
    Column("d", "REAL", "", "the field x rotation term of this run's fit (unit in d_unit)"),
    Column("d_se", "REAL", "", "its standard error (unit in d_unit)"),
    Column("d_unit", "TEXT", "", "unit of d and d_se"),
    Column("ratio", "REAL", "1", "d over the prediction's d (scan --prediction)"),
    Column("ratio_se", "REAL", "1", "its standard error"),
    Column("scanned_utc", "TEXT", "UTC", "when this row was made"),
)

NAMES = tuple(c.name for c in COLUMNS)
UNITS = {c.name: c.unit for c in COLUMNS}
