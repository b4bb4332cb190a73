"""table_io: CSV text as Python's repr and csv module write it; Parquet datasets
as DuckDB and pandas read them (types, nulls, partitions, metadata)."""

from __future__ import annotations

import csv
import io
import json
import math
import sys
from datetime import UTC as UTC_ZONE
from datetime import datetime
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from slipless.cli import decode_files
from slipless.decode.tables import SPECS, read_decoded
from slipless.io import capture, table_files, table_io, table_parquet
from slipless.io.table_csv import csv_rows
from slipless.io.table_io import FLOAT, INT, STR, UTC, Coded, Const, TickSeconds, spec
from slipless.protocol import wire
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import notifications

VECTORS = Path(__file__).resolve().parents[2] / "protocol" / "vectors"
WALL0_NS = 1_700_000_000_123_456_789  # 2023-11-14T22:13:20.123456789Z


def cells(columns: list[tuple[str, str]], cols: list[object]) -> list[list[str]]:
    """Rows as the csv module reads our text back."""
    text = csv_rows(spec("t", columns), cols).decode()
    return list(csv.reader(io.StringIO(text, newline="")))


# ---- CSV text ---------------------------------------------------------------------
@settings(max_examples=300, deadline=None)
@given(st.lists(st.floats(allow_nan=False), min_size=1, max_size=40))
def test_float_cells_are_repr_and_read_back_exactly(values: list[float]) -> None:
    # Python's repr(float) is the shortest text that reads back to the same float
    # (Python docs, "Floating-Point Arithmetic: Issues and Limitations"; since 3.1).
    got = [r[0] for r in cells([("x", FLOAT)], [np.array(values)])]
    assert got == [repr(v) for v in values]
    assert [float(g) for g in got] == values


@settings(max_examples=300, deadline=None)
@given(st.lists(st.integers(min_value=-(2**53), max_value=2**53), min_size=1, max_size=40),
       st.sampled_from([1, 10, 1000, 32_768, 1_000_000, 1_000_003, 10**9]))
def test_tick_seconds_are_repr_of_the_division(ticks: list[int], hz: int) -> None:
    # The power-of-ten path places a decimal point instead of formatting a float;
    # it must print what repr(tick / hz) prints (reference: CPython's float repr).
    # Ticks stay within 2**53 (285 years of us), where the int converts to a float exactly.
    tick = np.array(ticks, dtype=np.int64)
    got = [r[0] for r in cells([("t", FLOAT)], [TickSeconds(tick, hz)])]
    assert got == [repr(t / hz) for t in ticks]


def test_tick_seconds_edges_at_one_megahertz() -> None:
    tick = np.concatenate([np.arange(0, 3000), 10**np.arange(0, 16), 10**np.arange(1, 16) - 1,
                           np.array([86_400_000_000, 999_999_999_999_999])]).astype(np.int64)
    got = [r[0] for r in cells([("t", FLOAT)], [TickSeconds(tick, 1_000_000)])]
    assert got == [repr(t / 1e6) for t in tick.tolist()]
    no_rate = cells([("t", FLOAT), ("k", INT)], [TickSeconds(np.arange(3), 0), Const(1)])
    assert no_rate == [["", "1"]] * 3


@settings(max_examples=200, deadline=None)
@given(st.lists(st.integers(min_value=-(2**63) + 1, max_value=2**63 - 1), min_size=1,
                max_size=40))
def test_int_cells_are_decimal(values: list[int]) -> None:
    got = [r[0] for r in cells([("n", INT)], [np.array(values, dtype=np.int64)])]
    assert got == [str(v) for v in values]


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(st.none(), st.text(st.characters(exclude_characters="\0\r",
                                                          exclude_categories=("Cs",)))),
                min_size=1, max_size=20))
def test_text_cells_quote_as_the_csv_module_does(values: list[str | None]) -> None:
    # Reference: Python's csv module (QUOTE_MINIMAL, its default), which follows RFC 4180.
    ours = csv_rows(spec("t", [("a", STR), ("b", INT)]), [values, list(range(len(values)))])
    ref = io.StringIO(newline="")
    csv.writer(ref).writerows(zip(values, range(len(values))))
    assert ours.decode() == ref.getvalue()


def test_nul_in_text_is_kept_visible() -> None:
    # NUL bytes pad the words the text is built from; one in a name must not vanish.
    assert cells([("a", STR)], [["a\0b"]]) == [["a\ufffdb"]]


def test_missing_cells_are_empty() -> None:
    rows = cells([("i", INT), ("f", FLOAT), ("s", STR), ("u", UTC)],
                 [[1, None], np.array([math.nan, 2.5]), [None, "x"], [None, WALL0_NS]])
    assert rows[0] == ["1", "", "", ""]
    assert rows[1][:3] == ["", "2.5", "x"]


def test_utc_cells_are_iso_8601_with_nanoseconds() -> None:
    # ISO 8601 / RFC 3339 UTC time with a Z; checked against the standard library
    # (microseconds) and pandas (nanoseconds back exactly).
    pd = pytest.importorskip("pandas")
    ns = [WALL0_NS, 0, 1_234, 4_102_444_800_000_000_000]
    text = [r[0] for r in cells([("u", UTC)], [ns])]
    assert text[0] == "2023-11-14T22:13:20.123456789Z"
    for t, v in zip(text, ns):
        dt = datetime.fromtimestamp(v // 1000 / 1e6, tz=UTC_ZONE)
        assert t.startswith(dt.strftime("%Y-%m-%dT%H:%M:%S.")) and t.endswith("Z")
        assert pd.Timestamp(t).value == v


def test_coded_columns_write_what_their_values_say() -> None:
    values = np.arange(-32768, 32768, dtype=np.int64)
    scaled = values.astype(np.float64) * 0.0001 + 0.5
    rng = np.random.default_rng(3)
    codes = rng.integers(0, values.size, 5000)
    columns = [("k", INT), ("raw", INT), ("value", FLOAT), ("unit", STR)]
    coded = csv_rows(spec("t", columns), [Const(7), Coded(codes, values, "r"),
                                          Coded(codes, scaled, "v"), Const("V")])
    plain = csv_rows(spec("t", columns), [[7] * codes.size, values[codes], scaled[codes],
                                          ["V"] * codes.size])
    assert coded == plain


# ---- decode folders ------------------------------------------------------------------
@pytest.fixture(scope="module")
def timed_capture(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A capture with laptop times, a STATUS command written and two lost notifications."""
    frames = [f for _, f in simulate(SimConfig(seconds=4))]
    notes = list(notifications(frames, 244))
    path = tmp_path_factory.mktemp("cap") / "timed.slcap"
    w = capture.CaptureWriter(path, {"device": "sim", "mtu": 244})
    w.event(0, "connected", mtu=247)
    for i, n in enumerate(notes):
        if i in (20, 21):
            continue  # lost on the link: missing frames in the frames table
        w.write(capture.RX, 0, n, mono_ns=10**9 + i * 7_500_000, wall_ns=WALL0_NS + i * 7_500_000)
    w.close()
    return path


@pytest.fixture(scope="module")
def decoded(timed_capture: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    pytest.importorskip("pyarrow")
    out = {fmt: tmp_path_factory.mktemp(fmt) for fmt in ("csv", "parquet")}
    for fmt, folder in out.items():
        decode_files([timed_capture], folder, fmt, None)
    return out


def test_parquet_is_a_dataset_partitioned_by_board_and_run(decoded: dict[str, Path]) -> None:
    parts = sorted(p.relative_to(decoded["parquet"]).as_posix()
                   for p in decoded["parquet"].rglob("*.parquet"))
    assert "samples/board=1/run=1/stream=0/part-0.parquet" in parts  # samples: and by stream
    assert "frames/board=1/run=1/part-0.parquet" in parts
    assert {p.split("/")[0] for p in parts} == set(SPECS)


def test_csv_and_parquet_hold_the_same_tables(decoded: dict[str, Path]) -> None:
    for name, s in SPECS.items():
        a = read_decoded(decoded["csv"], name, s.names)
        b = read_decoded(decoded["parquet"], name, s.names)
        assert a is not None and b is not None
        order_a = np.lexsort([a["seq"] if "seq" in a else a["run"], a["board"]])
        order_b = np.lexsort([b["seq"] if "seq" in b else b["run"], b["board"]])
        for c in s.names:
            x, y = a[c][order_a], b[c][order_b]
            if s.columns[s.names.index(c)].kind == STR:  # CSV has "" where Parquet has null
                y = np.array(["" if v is None else v for v in y], dtype=object)
            if s.columns[s.names.index(c)].kind == UTC:
                x = np.array([v[:19] if v else "" for v in x], dtype=object)
                y = np.array([v.strftime("%Y-%m-%dT%H:%M:%S") if v else "" for v in y],
                             dtype=object)
            assert x.dtype == y.dtype, (name, c, x.dtype, y.dtype)
            assert np.array_equal(x, y, equal_nan=x.dtype.kind == "f"), (name, c)


def test_duckdb_reads_types_nulls_partitions_and_metadata(decoded: dict[str, Path]) -> None:
    # DuckDB (PyPI duckdb) is a second Parquet reader, independent of pyarrow.
    duckdb = pytest.importorskip("duckdb")
    root = decoded["parquet"]

    def scan(name: str) -> str:
        return f"read_parquet('{root / name}/**/*.parquet', hive_partitioning = true)"

    con = duckdb.connect()
    types = dict(con.execute(f"SELECT column_name, column_type FROM (DESCRIBE SELECT * FROM "
                             f"{scan('samples')})").fetchall())
    assert types["raw"] == "BIGINT" and types["tick_us"] == "BIGINT"
    assert types["value"] == "DOUBLE" and "board_time_s" not in types  # tick_us / tick_hz
    assert types["stream"] == "BIGINT" and types["board"] == "BIGINT"  # hive keys
    named = con.execute(f"SELECT DISTINCT s.name, s.unit FROM {scan('samples')} JOIN "
                        f"{scan('streams')} s USING (board, run, stream)").fetchall()
    assert ("cap_amp", "V") in named  # a stream's name and unit: joined from streams
    seconds = con.execute(f"SELECT s.tick_us, r.tick_hz, s.tick_us / r.tick_hz FROM "
                          f"{scan('samples')} s JOIN {scan('runs')} r USING (board, run)"
                          ).fetchall()
    assert seconds and all(s == t / hz for t, hz, s in seconds)  # board seconds from runs
    timing = dict(con.execute(f"SELECT column_name, column_type FROM (DESCRIBE SELECT * FROM "
                              f"{scan('timing')})").fetchall())
    assert timing["rx_wall_utc"] in ("TIMESTAMPTZ_NS", "TIMESTAMP WITH TIME ZONE")  # ns; older: us
    assert con.execute(f"SELECT count(*) FROM {scan('timing')} WHERE "
                       "epoch_ns(rx_wall_utc) <> rx_wall_ns").fetchone() == (0,)
    lost = con.execute(f"SELECT count(*), count(kind), count(offset_B), count(rx_wall_utc) "
                       f"FROM {scan('frames')} WHERE fate = 'missing'").fetchone()
    assert lost[0] > 0 and lost[1:] == (0, 0, 0)  # nulls, not -1
    assert con.execute(f"SELECT DISTINCT board, run FROM {scan('samples')}").fetchall() == [(1, 1)]
    meta = dict(con.execute(f"SELECT decode(key), decode(value) FROM parquet_kv_metadata("
                            f"'{root}/samples/**/*.parquet')").fetchall())
    streams = json.loads(meta["slipless.streams"])
    assert {"unit", "scale", "offset", "period_us", "type"} <= set(streams[0])
    units = json.loads(meta["slipless.columns"])
    assert units["tick_us"] == {"kind": "int", "unit": "us"}
    rg = con.execute(f"SELECT count(DISTINCT row_group_id) FROM parquet_metadata("
                     f"'{root}/samples/**/*.parquet')").fetchone()
    assert rg == (1,)  # a few thousand rows: one row group, not one per batch


def test_pandas_reads_the_dataset(decoded: dict[str, Path]) -> None:
    pd = pytest.importorskip("pandas")
    samples = pd.read_parquet(decoded["parquet"] / "samples")
    assert str(samples["raw"].dtype) == "int64" and str(samples["value"].dtype) == "float64"
    assert set(samples["board"].astype(int)) == {1}  # partition keys come back as categories
    timing = pd.read_parquet(decoded["parquet"] / "timing")
    assert str(timing["rx_wall_utc"].dtype) == "datetime64[ns, UTC]"
    assert (timing["rx_wall_utc"].astype("int64") == timing["rx_wall_ns"]).all()
    frames = pd.read_csv(decoded["csv"] / "frames.csv")
    assert frames.loc[frames["fate"] == "missing", "offset_B"].isna().all()


def test_row_groups_are_large(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    pq = pytest.importorskip("pyarrow.parquet")
    from slipless.decode.decoder import Decoder
    from slipless.decode.tables import TableSink

    monkeypatch.setattr(table_parquet, "ROW_GROUP_ROWS", 1000)
    data = b"".join(f for _, f in simulate(SimConfig(seconds=3)))
    sink = TableSink(tmp_path, "parquet")
    dec = Decoder(sink)
    for i in range(0, len(data), 200):  # a batch of samples every few frames
        dec.feed(data[i : i + 200])
    dec.finish()
    sink.close(list(dec.runs.values()), dec.missing, dec.corrupt_guess)
    files = sorted((tmp_path / "samples").rglob("*.parquet"))
    assert len(files) == len(dec.runs[(1, 1)].streams)  # one file per stream
    for f in files:
        meta = pq.read_metadata(f)
        sizes = [meta.row_group(i).num_rows for i in range(meta.num_row_groups)]
        assert len(sizes) >= 2 and all(n >= 1000 for n in sizes[:-1])  # never one per batch


def test_parts_beyond_the_open_limit_go_on_in_new_files(tmp_path: Path,
                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    pytest.importorskip("pyarrow")
    monkeypatch.setattr(table_parquet, "MAX_OPEN_PARTS", 2)
    s = table_io.Spec("t", spec("t", [("board", INT), ("run", INT), ("x", FLOAT)]).columns,
                      ("board", "run"))
    w = table_files.open_table(tmp_path, s, "parquet")
    for i in range(12):
        w.write([Const(i % 4), Const(0), np.arange(3.0) + i])
    w.close()
    got = table_files.read_columns(tmp_path / "t", ("board", "x"))
    assert sorted(zip(got["board"].tolist(), got["x"].tolist())) == sorted(
        (i % 4, float(v)) for i in range(12) for v in np.arange(3.0) + i)
    assert (tmp_path / "t" / "board=0" / "run=0" / "part-1.parquet").exists()


def test_a_failing_write_is_raised(tmp_path: Path) -> None:
    # /dev/full is a real device whose writes fail with ENOSPC (no space left)
    if not Path("/dev/full").exists():
        pytest.skip("no /dev/full on this system")
    bg = table_io.Background()
    w = table_files.open_table(tmp_path, spec("t", [("x", INT)]), "csv", background=bg)
    w._file = open("/dev/full", "wb", buffering=0)  # type: ignore[attr-defined]
    w.write([np.arange(5)])
    w.close()
    with pytest.raises(OSError, match="No space left"):
        bg.close()


def test_no_pyarrow_is_one_clear_line(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "pyarrow", None)
    with pytest.raises(table_io.InputError, match="needs pyarrow"):
        table_files.open_table(tmp_path, SPECS["samples"], "parquet")
    assert wire.VERSION  # CSV needs nothing beyond numpy
    w = table_files.open_table(tmp_path, SPECS["runs"], "csv")
    w.close()


def test_pulses_reads_decode_folders_of_either_format(decoded: dict[str, Path]) -> None:
    from slipless.pulses.data import read_tables

    a, b = read_tables(decoded["csv"]), read_tables(decoded["parquet"])
    assert [(r.board, r.run, sorted(r.streams)) for r in a] == \
        [(r.board, r.run, sorted(r.streams)) for r in b]
    for ra, rb in zip(a, b):
        for name, s in ra.streams.items():
            assert np.array_equal(s.t_s, rb.streams[name].t_s)
            assert np.array_equal(s.v, rb.streams[name].v) and s.unit == rb.streams[name].unit


def test_a_second_decode_replaces_the_dataset(tmp_path: Path) -> None:
    pytest.importorskip("pyarrow")
    decode_files([VECTORS / "20-two-boards.bin"], tmp_path, "parquet", None)
    (tmp_path / "samples" / "notes.txt").write_text("a user's file stays")
    decode_files([VECTORS / "09-end.bin"], tmp_path, "parquet", None)
    boards = {p.name for p in (tmp_path / "samples").iterdir() if p.is_dir()}
    assert boards == {"board=1"} and (tmp_path / "samples" / "notes.txt").exists()
    got = read_decoded(tmp_path, "samples", ("raw",))
    assert got is not None and got["raw"].tolist() == [5, 6, 7, 8]
    # a file where an older release put samples (a level above stream=S) goes too
    part = next((tmp_path / "samples").rglob("part-0.parquet"))  # .../run=R/stream=S/
    old = part.parent.parent / "part-0.parquet"
    old.write_bytes(part.read_bytes())
    decode_files([VECTORS / "09-end.bin"], tmp_path, "parquet", None)
    assert not old.exists() and read_decoded(tmp_path, "samples", ("raw",))["raw"].tolist() == [
        5, 6, 7, 8]


def test_samples_given_row_by_row_land_in_their_stream_folders(tmp_path: Path) -> None:
    """A samples batch of plain columns (a stream id per row, not per frame) is
    split into the same stream=S folders as the decoder's frames' form."""
    pytest.importorskip("pyarrow")
    s = SPECS["samples"]
    w = table_files.open_table(tmp_path, s, "parquet")
    stream = np.array([3, 1, 3, 1, 1])
    w.write([Const(1), Const(2), stream, np.arange(5), np.arange(5) * 10,
             np.arange(5) + 100, np.arange(5) * 0.5, Const(None)])
    w.close()
    folders = sorted(p.parent.name for p in (tmp_path / "samples").rglob("*.parquet"))
    assert folders == ["stream=1", "stream=3"]
    got = table_parquet.read_parquet(tmp_path / "samples", ("stream", "seq", "raw"))
    rows = sorted(zip(got["stream"].tolist(), got["seq"].tolist(), got["raw"].tolist()))
    assert rows == [(1, 1, 101), (1, 3, 103), (1, 4, 104), (3, 0, 100), (3, 2, 102)]
