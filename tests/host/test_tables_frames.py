"""decode's samples table from the decoder's frames' form: the same bytes as
Python's csv module writes for the rows one by one, with every float as its repr,
whatever the chunking of the input; Parquet holds the same values."""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from slipless.decode.decoder import Decoder, NullSink, RunState, StreamInfo
from slipless.decode.tables import SPECS, TableSink, read_decoded
from slipless.protocol import wire

H, B, UH, I32, F32 = 0x68, 0x62, 0x48, 0x69, 0x66  # int16, int8, uint16, int32, float32
STREAMS = (  # (stream, type, flags, period in ticks, scale, offset, name, unit)
    (0, H, 0, 1000, 1e-4, 0.0, "cap_amp", "V"),
    (1, B, wire.FLAG_STATE, 10_000, 1.0, 0.0, "coil_state", ""),
    (2, UH, 0, 2000, 0.5, -3.25, 'a,"quoted" name', "m/s, x"),
    (3, I32, 0, 5000, 1e-6, 1.0, "wide", "Pa"),
    (4, F32, 0, 10_000, 2.0, 0.0, "float_s", "K"),
)
FW = (0, 4, 0)


def capture(tick_hz: int, seconds: float, first_tick: int, first_seq: int,
            streams: tuple[tuple[Any, ...], ...] = STREAMS, seed: int = 5) -> bytes:
    """A run whose streams interleave frame by frame, with frames of varying
    length: invented data, a scenario of our own."""
    rng = np.random.default_rng(seed)
    enc = wire.Encoder(1, 2, seq=first_seq)
    out = [enc.frame(enc.descriptor(first_tick, tick_hz, FW, 5000, len(streams), streams))]
    next_tick = {s[0]: first_tick for s in streams}
    end = first_tick + int(seconds * 1_000_000)
    while min(next_tick.values()) < end:
        behind = min(next_tick.values())  # the streams keep pace, in a shuffled order
        lagging = [s for s in streams if next_tick[s[0]] < behind + 200_000]
        sid, typ, _, period, *_ = lagging[int(rng.integers(len(lagging)))]
        count = int(rng.integers(1, wire.max_samples(typ) + 1))
        tick = next_tick[sid]
        next_tick[sid] = tick + count * period
        out.append(enc.frame(enc.samples(sid, tick, typ, _values(rng, typ, count))))
        if rng.random() < 0.02:
            out.append(enc.frame(enc.status(tick, 3900, 2512, 90_000, 3, 0, 0, 40)))
    return b"".join(out)


def _values(rng: np.random.Generator, typ: int, n: int) -> list[Any]:
    if typ == H:
        return rng.normal(0, 3000, n).clip(-32768, 32767).astype(int).tolist()
    if typ == B:
        return rng.integers(-128, 128, n).tolist()
    if typ == UH:
        return rng.integers(0, 65536, n).tolist()
    if typ == I32:
        return rng.integers(-(2**31), 2**31, n).tolist()
    special = [math.nan, math.inf, -math.inf, 1e-45, -0.0, 0.0, 3.0, 16777216.0]
    floats = np.frombuffer(rng.integers(0, 2**32, n, dtype=np.uint32).tobytes(), np.float32)
    return [special[i % len(special)] if i % 5 == 0 else float(v) for i, v in
            enumerate(floats.tolist())]


class Rows(NullSink):
    """The samples one row at a time, as the decoder hands them to a row sink."""

    def __init__(self) -> None:
        self.rows: list[tuple[RunState, StreamInfo, int, int, Any]] = []

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        for q, t, v in zip(seq.tolist(), tick.tolist(), raw.tolist()):
            self.rows.append((run, info, q, t, v))


def reference_csv(data: bytes, chunk: int) -> bytes:
    """samples.csv as Python's csv module writes the rows (QUOTE_MINIMAL, CRLF lines:
    RFC 4180), each float as float.__repr__ (the shortest text that reads back to
    the same float, Python docs), a missing value as an empty cell (README). The
    decoder hands samples over after each chunk it is fed, stream by stream, so
    the rows come in the order of the same chunks."""
    sink = Rows()
    dec = Decoder(sink)
    for at in range(0, len(data), chunk):
        dec.feed(data[at : at + chunk])
    dec.finish()
    text = io.StringIO(newline="")
    out = csv.writer(text)
    out.writerow(SPECS["samples"].names)
    for run, info, seq, tick, raw in sink.rows:
        is_float = info.dtype.kind == "f"
        value = float(raw) * info.scale + info.offset
        out.writerow([run.board, run.run, info.stream, seq, tick,
                      "" if is_float else int(raw), "" if value != value else repr(value),
                      repr(float(raw)) if is_float and raw == raw else ""])
    return text.getvalue().encode()


def write_tables(data: bytes, folder: Path, fmt: str, chunk: int) -> Path:
    sink = TableSink(folder, fmt)
    dec = Decoder(sink)
    for at in range(0, len(data), chunk):
        dec.feed(data[at : at + chunk])
    dec.finish()
    sink.close(list(dec.runs.values()), dec.missing, dec.corrupt_guess)
    return folder


CODED = STREAMS[:3] + (  # samples of at most 16 bits: each value's text made once
    (5, B, 0, 20_000, 0.25, 0.0, "g", ""), (6, H, 0, 4000, 3.0, 1.5, "n" * 32, "u" * 32))
CASES = {  # tick rate, seconds, first tick, first seq, streams
    "microseconds": (1_000_000, 120.0, 500_000, 97_000, CODED),  # the first second to 100 s
    "all_types": (1_000_000, 30.0, 500_000, 97_000, STREAMS),  # wider and float samples too
    "milliseconds": (1000, 30.0, 5_000, 0, CODED),
    "tens_of_hz": (10, 3.0, 0, 5, CODED),
    "odd_rate": (1_000_003, 5.0, 2_000_000, 12, CODED),
    "late_start": (1_000_000, 20.0, 5_000_000_000_000, 4_000_000_000, CODED),  # 58 days in
    "more_digits": (1_000_000, 20.0, 9_999_990_000_000, 99_990, CODED),  # 10**7 s, 10**5 seqs
}


@pytest.fixture
def placed(monkeypatch: pytest.MonkeyPatch) -> list[int]:
    """Rows the frames' form path placed itself (the rest went through the word matrix)."""
    from slipless.io import table_csv

    rows: list[int] = []
    place = table_csv.FramesText._place

    def counting(self: Any, plan: Any, cols: Any, n: int) -> Any:
        got = place(self, plan, cols, n)
        rows.append(n if got is not None else 0)
        return got

    monkeypatch.setattr(table_csv.FramesText, "_place", counting)
    return rows


@pytest.mark.parametrize("case", sorted(CASES))
@pytest.mark.parametrize("chunk", [1 << 20, 244])  # a file read; one notification
def test_samples_csv_is_the_csv_module_row_by_row(case: str, chunk: int, tmp_path: Path,
                                                  placed: list[int]) -> None:
    data = capture(*CASES[case])
    folder = write_tables(data, tmp_path, "csv", chunk)
    text = (folder / "samples.csv").read_bytes()
    assert text == reference_csv(data, chunk)
    if case != "all_types":  # samples of <= 16 bits at any tick rate: the path under test
        assert sum(placed) > 0.9 * text.count(b"\n")


def test_small_chunks_of_the_writer_change_nothing(tmp_path: Path,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    from slipless.decode import tables
    from slipless.io import table_csv

    data = capture(*CASES["microseconds"], seed=9)
    monkeypatch.setattr(tables, "SAMPLE_CHUNK", 333)  # batches cut inside frames
    monkeypatch.setattr(table_csv, "FRAME_ROWS", 97)
    folder = write_tables(data, tmp_path, "csv", 1 << 20)
    assert (folder / "samples.csv").read_bytes() == reference_csv(data, 1 << 20)


def test_parquet_holds_the_same_samples(tmp_path: Path) -> None:
    pytest.importorskip("pyarrow")
    from slipless.io.table_parquet import read_arrow

    data = capture(*CASES["microseconds"], seed=3)
    folder = write_tables(data, tmp_path, "parquet", 1 << 20)
    table = read_arrow(folder / "samples")
    got = sorted(zip(*(table.column(c).to_pylist() for c in ("stream", "seq", "tick_us",
                                                             "raw", "value", "raw_float"))),
                 key=lambda r: (r[0], r[1], r[2]))
    text = reference_csv(data, 1 << 20).decode()
    want = []
    for r in list(csv.reader(io.StringIO(text, newline="")))[1:]:
        want.append((int(r[2]), int(r[3]), int(r[4]), int(r[5]) if r[5] else None,
                     float(r[6]) if r[6] else None, float(r[7]) if r[7] else None))
    want.sort(key=lambda r: (r[0], r[1], r[2]))
    assert len(got) == len(want)
    for a, b in zip(got, want):
        assert a[:4] == b[:4]
        for x, y in ((a[4], b[4]), (a[5], b[5])):
            assert x == y or (x is None and y is None) or (x != x and y != y)


def test_samples_name_their_stream_through_the_streams_table(tmp_path: Path) -> None:
    """A stream's name and unit are in `streams` once per run, not on every sample
    row; read_decoded puts them back, the same from CSV and from Parquet."""
    data = capture(*CASES["all_types"], seed=5)
    got = {}
    for fmt in ("csv", "parquet"):
        if fmt == "parquet":
            pytest.importorskip("pyarrow")
        folder = write_tables(data, tmp_path / fmt, fmt, 1 << 20)
        got[fmt] = read_decoded(folder, "samples", ("stream", "name", "unit", "raw"))
    by_stream = {s[0]: (s[6], s[7]) for s in STREAMS}  # id -> (name, unit)
    for cols in got.values():
        assert set(cols["stream"].tolist()) == set(by_stream)
        assert [(n, u) for n, u in zip(cols["name"], cols["unit"])] == [
            by_stream[s] for s in cols["stream"].tolist()]
    order = [np.lexsort((np.arange(len(c["stream"])), c["stream"])) for c in got.values()]
    a, b = (c["name"][o] for c, o in zip(got.values(), order))
    assert a.tolist() == b.tolist()


@pytest.mark.parametrize("case", ["microseconds", "odd_rate", "late_start"])
def test_samples_board_time_from_the_runs_tick_rate(case: str, tmp_path: Path) -> None:
    """board_time_s is not stored on every sample row: read_decoded makes it as
    tick_us / the run's tick_hz from `runs`, the same double as Python's true
    division of the two integers (correctly rounded: Python docs, numeric types),
    from CSV and from Parquet alike; a folder whose samples hold the column (an
    older release) is read as it is."""
    data = capture(*CASES[case], seed=6)
    hz = CASES[case][0]
    for fmt in ("csv", "parquet"):
        if fmt == "parquet":
            pytest.importorskip("pyarrow")
        folder = write_tables(data, tmp_path / fmt, fmt, 1 << 20)
        cols = read_decoded(folder, "samples", ("board_time_s", "tick_us", "name"))
        assert cols is not None and len(cols["tick_us"]) > 0
        assert cols["board_time_s"].tolist() == [t / hz for t in cols["tick_us"].tolist()]
    old = tmp_path / "old"
    old.mkdir()
    for f in (tmp_path / "csv").glob("*.csv"):
        old.joinpath(f.name).write_bytes(f.read_bytes())
    with (old / "samples.csv").open("w", newline="") as f:
        csv.writer(f).writerows([["board", "run", "stream", "tick_us", "board_time_s"],
                                 [1, 1, 0, 5, 0.25]])
    got = read_decoded(old, "samples", ("board_time_s", "tick_us"))
    assert got is not None and got["board_time_s"].tolist() == [0.25]


def test_samples_whose_stream_or_run_is_not_listed_are_a_clear_error(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A decode folder that lost its streams or runs table, or whose runs table
    does not list a run of the samples: one line naming what is missing, exit 2
    from a command (no traceback), and no made-up names or times."""
    from slipless.cli import main
    from slipless.errors import InputError

    folder = write_tables(capture(*CASES["microseconds"], seed=7), tmp_path / "t", "csv", 1 << 20)
    runs = (folder / "runs.csv").read_text()
    (folder / "runs.csv").unlink()
    with pytest.raises(InputError, match="without a runs table"):
        read_decoded(folder, "samples", ("board_time_s",))
    assert main(["pulses", str(folder), "--out", str(tmp_path / "o"), "--no-plots",
                 "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "without a runs table" in err and "Traceback" not in err and err.count("\n") == 1
    lines = runs.splitlines(keepends=True)
    (folder / "runs.csv").write_text(lines[0] + lines[1].replace("1,2,", "1,9,", 1))
    with pytest.raises(InputError, match="run its runs table does not list"):
        read_decoded(folder, "samples", ("board_time_s",))
    (folder / "streams.csv").unlink()
    with pytest.raises(InputError, match="without a streams table"):
        read_decoded(folder, "samples", ("name",))


def test_parquet_samples_schema_and_a_run_without_tick_rate(tmp_path: Path) -> None:
    """The columns every sample has are required Parquet fields (no definition
    levels), the rest optional; page statistics only on the key columns. A
    descriptor with tick_hz 0 still writes its samples; their board_time_s is null."""
    pytest.importorskip("pyarrow")
    import pyarrow.parquet as pq

    from slipless.io.table_parquet import read_arrow

    folder = write_tables(capture(*CASES["all_types"], seed=4), tmp_path / "a", "parquet", 1 << 20)
    files = sorted((folder / "samples").rglob("*.parquet"))
    assert len(files) == len(STREAMS)  # a file per stream
    for f in files:
        meta = pq.ParquetFile(f)
        fields = {c.name: c.max_definition_level for c in meta.schema}
        # board, run and stream are the hive folders (board=B/run=R/stream=S), not columns
        assert f.parent.name.startswith("stream=") and f.parent.parent.name.startswith("run=")
        assert {k for k, v in fields.items() if v == 0} == {"seq", "tick_us"}
        assert not {"board", "run", "stream", "name", "unit"} & set(fields)
        group = meta.metadata.row_group(0)
        stats = {group.column(i).path_in_schema for i in range(group.num_columns)
                 if group.column(i).is_stats_set}
        assert stats == {"seq", "tick_us"}
    assert sorted(int(f.parent.name.split("=")[1]) for f in files) == sorted(
        s[0] for s in STREAMS)

    still = capture(0, 2.0, 0, 0, CODED[:1])
    folder = write_tables(still, tmp_path / "b", "parquet", 1 << 20)
    table = read_arrow(folder / "samples")
    assert table.num_rows > 0 and table.column("tick_us").null_count == 0
    seconds = read_decoded(folder, "samples", ("board_time_s",))
    assert seconds is not None and np.isnan(seconds["board_time_s"]).all()


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_frames_table_from_single_rows_and_stretches(fmt: str, tmp_path: Path) -> None:
    """The frames table holds single rows and stretches in call order, whatever
    mix of them a block gets: one row alone, a repeated seq, a frame never
    received (empty cells), stretches of two runs. The reference is the rows
    written one by one with Python's csv module (RFC 4180 lines)."""
    if fmt == "parquet":
        pytest.importorskip("pyarrow")
    from slipless.decode.decoder import Arrival

    a, b = RunState(1, 1), RunState(2, 7)
    radio = Arrival(source=1, wall_ns=1_700_000_000_123_456_789, origin="radio")
    calls: list[tuple[Any, ...]] = [
        ("frame", a, 5, wire.SAMPLES, "received", 40, "radio", radio),
        ("flush",),
        ("frame", a, 5, wire.SAMPLES, "duplicate", 80, "radio", radio),
        ("frame", a, 5, wire.SAMPLES, "duplicate", 120, "radio", radio),
        ("flush",),
        ("stretch", a, 6, np.array([200, 260, 320]), "", Arrival()),
        ("frame", a, 9, -1, "missing", -1, "", Arrival()),
        ("stretch", b, 0, np.array([0, 61]), "mirror", Arrival(source=2)),
        ("flush",),
        ("stretch", b, 2, np.array([122]), "mirror", Arrival(source=2)),
    ]
    sink = TableSink(tmp_path, fmt)
    want = []
    for call in calls:
        if call[0] == "flush":
            sink._frames.flush()
        elif call[0] == "frame":
            _, run, seq, kind, fate, offset, origin, arr = call
            sink.frame(run, seq, kind, fate, offset, origin, arr)
            want.append((run.board, run.run, seq, "missing" if kind < 0 else "samples", fate,
                         origin if kind >= 0 else "", 1 if kind >= 0 else "",
                         offset if offset >= 0 else "", arr.wall_ns if arr.wall_ns >= 0 else ""))
        else:
            _, run, seq0, offsets, origin, arr = call
            sink.received_frames(run, seq0, offsets, origin, arr)
            want += [(run.board, run.run, seq0 + i, "samples", "received", origin, arr.source,
                      int(o), "") for i, o in enumerate(offsets)]
    sink.close([], lambda r: 0, lambda r: 0)
    got = read_decoded(tmp_path, "frames", ("board", "run", "seq", "kind", "fate", "origin",
                                            "source", "offset_B", "rx_wall_ns"))
    assert got is not None
    rows = sorted(zip(*(np.asarray(v, dtype=object).tolist() for v in got.values())),
                  key=lambda r: (r[0], r[1]))  # Parquet: a file per board and run
    rows = [tuple("" if v is None else v for v in r) for r in rows]
    rows = [r[:3] + (r[3] if r[3] != "" else "missing",) + r[4:] for r in rows]
    assert rows == sorted(want, key=lambda r: (r[0], r[1]))


def test_the_readme_pandas_join_gives_what_read_decoded_gives(tmp_path: Path,
                                                              monkeypatch: pytest.MonkeyPatch) -> None:
    """The README's pandas lines for board seconds, names and units, run as
    written on a decode folder, give read_decoded's columns."""
    pytest.importorskip("pandas")
    import re

    readme = (Path(__file__).parents[2] / "README.md").read_text()
    (code,) = [c for c in re.findall(r"```python\n(.*?)```", readme, re.S)
               if "board_time_s" in c and "read_csv" in c]
    write_tables(capture(*CASES["odd_rate"], seed=8), tmp_path / "out", "csv", 1 << 20)
    monkeypatch.chdir(tmp_path)
    space: dict[str, Any] = {}
    exec(code, space)  # the README's own lines
    s = space["s"].sort_values(["stream", "seq", "tick_us"], kind="stable")
    want = read_decoded(tmp_path / "out", "samples", ("stream", "seq", "tick_us", "board_time_s",
                                                      "name", "unit"))
    assert want is not None
    order = np.lexsort((want["tick_us"], want["seq"], want["stream"]))
    assert s["board_time_s"].tolist() == want["board_time_s"][order].tolist()
    assert s["name"].tolist() == want["name"][order].tolist()
    assert s["unit"].fillna("").tolist() == want["unit"][order].tolist()
