"""The bulk CSV text of table_io against outside references: floats are Python's
repr, laptop times are numpy's ISO 8601 text, whole numbers are their decimal
text, and batches formatted two at a time on the background lanes still reach
the file in order."""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from slipless.io import table_files, table_io
from slipless.io.table_csv import csv_rows
from slipless.io.table_io import FLOAT, INT, STR, UTC, Coded, Const, PerFrame, Stepped
from slipless.io.table_io import spec as make_spec


def awkward_floats(n: int, seed: int) -> np.ndarray:
    """Doubles from random bit patterns (every exponent, subnormals included),
    whole numbers, powers of ten around repr's switch to exponents, and signed
    zeros and infinities."""
    rng = np.random.default_rng(seed)
    bits = rng.integers(0, 2**63, n, dtype=np.int64).view(np.float64)
    bits = bits[np.isfinite(bits)] * rng.choice([-1.0, 1.0], bits[np.isfinite(bits)].size)
    subnormal = rng.integers(1, 2**52, n // 4).astype(np.float64) * 5e-324
    whole = np.concatenate([rng.integers(-(2**53), 2**53, n // 4).astype(np.float64),
                            2.0 ** np.arange(0, 1024, 7), -(10.0 ** np.arange(0, 309, 3))])
    edges = np.array([0.0, -0.0, math.inf, -math.inf, 1e16, 1e15, 9999999999999998.0,
                      1e-4, 9.999999999999999e-05, 5e-324, 2.2250738585072014e-308,
                      1.7976931348623157e308, 0.1, 0.30000000000000004])
    return np.concatenate([bits, subnormal, whole, edges])


def test_float_cells_are_repr_on_many_awkward_floats() -> None:
    # Python's repr(float) is the shortest text that reads back to the same float
    # (Python docs, "Floating-Point Arithmetic: Issues and Limitations").
    values = awkward_floats(40_000, seed=1)
    text = csv_rows(make_spec("t", [("x", FLOAT)]), [values]).decode()
    cells = text.split("\r\n")[:-1]
    assert cells == [float.__repr__(v) for v in values.tolist()]
    assert all(float(c) == v or (v != v) for c, v in zip(cells, values.tolist()))


def test_coded_floats_in_the_frames_form_are_repr() -> None:
    # the table of each code's text is made from repr too, and copied right-aligned
    values = awkward_floats(5000, seed=2)
    rng = np.random.default_rng(3)
    frames = 400
    counts = rng.integers(1, 40, frames)
    n = int(counts.sum())
    codes = rng.integers(0, values.size, n)
    tick = Stepped(10**9 + np.cumsum(counts) * 1000, np.full(frames, 1000), counts)
    cols = [Const(1), PerFrame(np.arange(frames) * 7, counts), tick, Coded(codes, values, "v"),
            Const("V")]
    s = make_spec("t", [("a", INT), ("seq", INT), ("tick", INT), ("v", FLOAT), ("u", STR)])
    rows = list(csv.reader(io.StringIO(csv_rows(s, cols).decode(), newline="")))
    assert [r[3] for r in rows] == [float.__repr__(v) for v in values[codes].tolist()]
    assert [r[2] for r in rows] == [str(t) for t in tick.expand().tolist()]


def test_tick_texts_in_the_frames_form_are_decimal() -> None:
    # a tick is placed as its digits above the last six, then those six from a
    # table: every width from "0" up, across each power of ten, in frames whose
    # leading texts differ in length (reference: Python's int to str, read back
    # with the csv module, RFC 4180)
    rng = np.random.default_rng(5)
    starts = [0, 1, 9, 10, 999, 999_999, 1_000_000, 9_999_990, 10**10 - 3, 10**13 + 7,
              10**14 - 5, 10**14, 2**62]
    seqs = [0, 5, 10**9, 7]
    for start in starts:
        for step in (1, 7, 1000):
            frames = 30
            counts = rng.integers(1, 9, frames)
            first = start + np.concatenate([[0], np.cumsum(counts)[:-1]]) * step
            tick = Stepped(first.astype(np.int64), np.full(frames, step), counts)
            n = int(counts.sum())
            codes = rng.integers(0, 3, n)
            cols = [Const(2), PerFrame(np.array(seqs * 8)[:frames], counts), tick,
                    Coded(codes, np.array([1, -20, 300]), "raw"), Const(None)]
            s = make_spec("t", [("a", INT), ("seq", INT), ("tick", INT), ("raw", INT),
                                ("f", FLOAT)])
            rows = list(csv.reader(io.StringIO(csv_rows(s, cols).decode(), newline="")))
            want = [str(t) for t in tick.expand().tolist()]
            assert [r[2] for r in rows] == want, (start, step)
            assert [r[1] for r in rows] == [str(v) for v in np.repeat(cols[1].values, counts)]
            assert [r[3] for r in rows] == [str(v) for v in np.array([1, -20, 300])[codes]]
            assert all(r[0] == "2" and r[4] == "" for r in rows)


def test_utc_cells_are_numpy_iso_8601_text() -> None:
    # numpy.datetime_as_string(unit="ns", timezone="UTC") is the reference: the
    # per-second text and the appended nanoseconds must give the same text.
    rng = np.random.default_rng(4)
    ns = np.concatenate([rng.integers(-(2**62), 2**62, 3000),
                         1_700_000_000_000_000_000 + rng.integers(0, 10**12, 3000),
                         np.array([0, -1, 1, 2**63 - 1, -(2**63) + 1, 999_999_999, -10**9])])
    values: list[int | None] = ns.tolist()
    values[5] = values[77] = None
    text = csv_rows(make_spec("t", [("u", UTC)]), [values]).decode().split("\r\n")[:-1]
    want = np.datetime_as_string(np.array([v if v is not None else np.datetime64("NaT")
                                           for v in values], dtype="datetime64[ns]"),
                                 unit="ns", timezone="UTC")
    assert text == ["" if w == "NaT" else w for w in want.tolist()]


def test_whole_numbers_with_gaps_are_decimal() -> None:
    rng = np.random.default_rng(5)
    values: list[int | None] = rng.integers(-(2**63), 2**63 - 1, 2000, endpoint=True).tolist()
    values[::7] = [None] * len(values[::7])
    text = csv_rows(make_spec("t", [("n", INT)]), [values]).decode().split("\r\n")[:-1]
    assert text == ["" if v is None else str(v) for v in values]


def test_lanes_write_batches_in_order(tmp_path: Path) -> None:
    s = make_spec("t", [("n", INT), ("x", FLOAT)])
    rng = np.random.default_rng(6)
    batches = []
    for _ in range(60):  # sizes apart, so the two lanes finish out of turn
        n = int(rng.choice([1, 5, 30_000, 200_000]))
        batches.append([rng.integers(-10**6, 10**6, n), rng.random(n)])
    bg = table_io.Background()
    w = table_files.open_table(tmp_path, s, "csv", background=bg)
    for b in batches:
        w.write(b)
    w.close()
    bg.close()
    want = b"n,x\r\n" + b"".join(csv_rows(s, b) for b in batches)
    assert (tmp_path / "t.csv").read_bytes() == want
