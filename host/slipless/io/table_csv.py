"""CSV text for table_io: built in bulk with numpy, not row by row.

Every field becomes little-endian 32-bit words of ASCII padded with NUL bytes,
a batch is one (rows x words) matrix, and dropping the NUL bytes leaves the
lines. Floats are Python's repr (the shortest text that reads back to the same
float); text is quoted as the csv module quotes it; lines end in CRLF as the
csv module's do.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from slipless.errors import InputError
from slipless.io.table_io import (
    FLOAT,
    INT,
    STR,
    UTC,
    Background,
    Coded,
    Column,
    Const,
    Spec,
    TableWriter,
    TickSeconds,
    column_rows,
    plain_values,
    run_now,
)

CSV_CHUNK_ROWS = 1 << 17  # rows formatted at once: the word matrix stays near 12 MB
CSV_WRITE_BYTES = 4 << 20  # formatted text handed to the file at once
_W = np.dtype("<u4")
_P10 = np.array([10**i for i in range(19)], dtype=np.int64)
MAX_EXACT = 10**15  # |int| below which n / 10**k has <= 15 digits: its exact decimal is repr


def _words(strings: Sequence[bytes]) -> np.ndarray:
    """(n, k) words holding each byte string, NUL-padded to a multiple of 4 bytes."""
    width = max(4, -(-max(map(len, strings), default=0) // 4) * 4)
    return np.array(strings, dtype=f"S{width}").view(_W).reshape(len(strings), width // 4)


def _const_words(text: bytes) -> list[Any]:
    return list(_words([text])[0]) if text else []


# 4-digit groups: 0..9999 zero-padded, then 10000..19999 the same with leading NULs
_GROUP = _words([b"%04d" % i for i in range(10_000)]
                + [(b"%4d" % i).replace(b" ", b"\0") for i in range(10_000)])[:, 0]
# 3-digit fraction groups: zero-padded, then the same without trailing zeros
_TRIPLE = _words([b"%03d" % i for i in range(1000)]
                 + [(b"%03d" % i).rstrip(b"0") for i in range(1000)])[:, 0]
_DOT, _DOT0, _MINUS = (_words([b"."])[0, 0], _words([b".0"])[0, 0], _words([b"-"])[0, 0])


def _int_words(a: np.ndarray) -> list[Any]:
    """Decimal text of int64 values as word columns (right-aligned digits)."""
    neg = a < 0
    u = np.abs(a)
    top = int(u.max()) if u.size else 0
    groups = max(1, -(-len(str(top)) // 4))
    out: list[Any] = [np.where(neg, _MINUS, 0).astype(_W)] if neg.any() else []
    for j in range(groups - 1, -1, -1):
        g = (u // _P10[4 * j]) % 10_000 if j else u % 10_000
        lead = (u < _P10[4 * (j + 1)]) if j < 4 else True  # int64 has at most 19 digits
        w = _GROUP[g + 10_000 * lead]
        if j:
            w = w * (u >= _P10[4 * j])
        out.append(w)
    return out


def _frac_words(f: np.ndarray, m: int) -> list[Any]:
    """'.' and 3m fraction digits without trailing zeros ('.0' when f is 0)."""
    if m == 0:
        return [_DOT0]
    out: list[Any] = [np.where(f == 0, _DOT0, _DOT).astype(_W)]
    later = np.zeros(f.shape, dtype=bool)  # a nonzero triple further right
    trip = []
    for i in range(m - 1, -1, -1):
        t = (f // _P10[3 * (m - 1 - i)]) % 1000
        trip.append(_TRIPLE[t + 1000 * ~later] * (later | (t != 0)))
        later |= t != 0
    return out + trip[::-1]


def _tick_words(tick: np.ndarray, hz: int) -> list[Any] | None:
    """repr(tick / hz) as word columns when hz is a power of ten, else None.

    tick / hz is the double nearest the decimal tick * 10**-k, which is also
    what that decimal's text reads back as. With at most 15 significant digits
    no shorter decimal reads back to the same double (any two decimals of <= 15
    digits give different doubles), so repr prints exactly those digits: the
    integer part, '.', the fraction without trailing zeros. repr switches to an
    exponent below 1e-4; those few rows are formatted by repr itself.
    """
    k = len(str(hz)) - 1
    if hz <= 0 or hz != 10**k or k > 12 or not tick.size:
        return None
    if int(tick.min()) < 0 or int(tick.max()) >= MAX_EXACT:
        return None
    ip, fp = np.divmod(tick, hz)
    m = -(-k // 3)
    cols = _int_words(ip) + _frac_words(fp * 10 ** (3 * m - k), m)
    small = np.flatnonzero((tick > 0) & (tick * 10_000 < hz))  # repr writes 5e-05
    if small.size:
        text = _words([repr(v).encode() for v in (tick[small] / hz).tolist()])
        if text.shape[1] > len(cols):
            return None
        cols = [np.broadcast_to(c, tick.shape).copy() for c in cols]
        for i, c in enumerate(cols):
            c[small] = text[:, i] if i < text.shape[1] else 0
    return cols


def _csv_text(s: str) -> str:
    """A text cell as csv.writer writes it (QUOTE_MINIMAL). A NUL cannot be
    written (the NUL bytes are the padding), so it becomes U+FFFD."""
    if "\0" in s:
        s = s.replace("\0", "\ufffd")
    if any(ch in s for ch in ',"\r\n'):
        return '"' + s.replace('"', '""') + '"'
    return s


def _cell_texts(values: Any, kind: str) -> list[bytes]:
    """Each value's CSV text (the general path: one Python call per value)."""
    if isinstance(values, np.ndarray):
        if kind == UTC:
            return _utc_texts(values.astype(np.int64).tolist())
        if values.dtype.kind == "f" and kind == INT:  # an int column handed floats
            return [b"" if v != v else b"%d" % int(v) for v in values.tolist()]
        if values.dtype.kind == "f":
            return [b"" if v != v else float.__repr__(v).encode() for v in values.tolist()]
        values = values.tolist()
    if kind == STR:
        cache: dict[Any, bytes] = {}
        out = []
        for v in values:
            b = cache.get(v)
            if b is None:
                b = cache[v] = b"" if v is None else _csv_text(str(v)).encode(errors="replace")
            out.append(b)
        return out
    if kind == UTC:
        return _utc_texts(values)
    if kind == FLOAT:
        return [b"" if v is None or v != v else float.__repr__(float(v)).encode() for v in values]
    return [b"" if v is None else b"%d" % v for v in values]


def _utc_texts(ns: Sequence[int | None]) -> list[bytes]:
    """ISO 8601 UTC with nanoseconds: 2026-05-09T07:35:25.123456789Z."""
    t = np.array([np.datetime64("NaT") if v is None else v for v in ns], dtype="datetime64[ns]")
    text = np.datetime_as_string(t, unit="ns", timezone="UTC")
    return [b"" if s == "NaT" else s.encode() for s in text.tolist()]


def _plain_int_array(values: Any) -> np.ndarray | None:
    if isinstance(values, np.ndarray):
        return values.astype(np.int64, copy=False) if values.dtype.kind in "iub" else None
    try:
        return np.array(values, dtype=np.int64)
    except (TypeError, ValueError, OverflowError):
        return None  # missing values (None): the general path


def csv_header(spec: Spec) -> bytes:
    return (",".join(_csv_text(c) for c in spec.names) + "\r\n").encode()


def csv_rows(spec: Spec, cols: Sequence[Column]) -> bytes:
    """The CSV lines (no header) a writer of `spec` writes for one batch."""
    n = max((column_rows(c) for c in cols), default=0)
    form = _CsvFormat(spec)
    return b"".join(form.lines([_slice(c, lo, min(n, lo + CSV_CHUNK_ROWS)) for c in cols],
                               min(n, lo + CSV_CHUNK_ROWS) - lo)
                    for lo in range(0, n, CSV_CHUNK_ROWS))


class CsvWriter(TableWriter):
    def __init__(self, path: Path, spec: Spec, background: Background | None = None) -> None:
        super().__init__(spec)
        self.path = path
        self._file = path.open("wb")
        self._run = background.lane() if background is not None else run_now
        self._text: list[bytes] = [csv_header(spec)]
        self._text_bytes = 0
        self._form = _CsvFormat(spec)

    def _put(self, text: bytes) -> None:
        self._text.append(text)
        self._text_bytes += len(text)
        if self._text_bytes >= CSV_WRITE_BYTES:
            self._run(self._file.writelines, self._text)
            self._text, self._text_bytes = [], 0

    def _write(self, cols: Sequence[Column], n: int) -> None:
        for lo in range(0, n, CSV_CHUNK_ROWS):
            hi = min(n, lo + CSV_CHUNK_ROWS)
            self._put(self._form.lines([_slice(c, lo, hi) for c in cols], hi - lo))

    def close(self) -> None:
        self._run(self._file.writelines, self._text)
        self._text = []
        self._run(self._file.close)


class _CsvFormat:
    """CSV text of batches of one table; keeps the text of Coded values between batches."""

    def __init__(self, spec: Spec) -> None:
        self.spec = spec
        self._luts: dict[tuple[Any, ...], np.ndarray] = {}

    def lines(self, cols: Sequence[Column], n: int) -> bytes:
        pieces: list[Any] = []  # bytes (alike in every row), word columns or (n, k) blocks
        last = len(cols) - 1
        kind = [c.kind for c in self.spec.columns]
        sep = [b"\r\n" if i == last else b"," for i in range(len(cols))]
        i = 0
        while i <= last:
            col = cols[i]
            if isinstance(col, Const):
                pieces.append(_cell_texts([col.value], kind[i])[0] + sep[i])
            elif isinstance(col, Coded):
                # Coded columns sharing their codes, and the constants after them, become
                # one table of ready-made text: one gather per row for all of them.
                j = i + 1
                while j <= last and isinstance(cols[j], Coded) and cols[j].codes is col.codes:
                    j += 1
                k = j
                while k <= last and isinstance(cols[k], Const):
                    k += 1
                pieces.append(self._lut(cols[i:k], kind[i:k], sep[i:k])[col.codes])
                i = k
                continue
            else:
                pieces.append(self._field(col, kind[i]))
                pieces.append(sep[i])
            i += 1
        blocks: list[Any] = []
        text = b""
        for p in pieces:
            if isinstance(p, bytes):
                text += p
                continue
            blocks += _const_words(text)
            text = b""
            blocks += p if isinstance(p, list) else [p]
        blocks += _const_words(text)
        m = np.column_stack([b if getattr(b, "shape", ()) else np.broadcast_to(_W.type(b), (n,))
                             for b in blocks])  # faster than filling a matrix column by column
        return m.tobytes().translate(None, b"\0")  # faster than a boolean mask here

    def _field(self, col: Column, kind: str) -> list[Any]:
        if isinstance(col, TickSeconds):
            tick = np.asarray(col.tick, dtype=np.int64)
            fast = _tick_words(tick, col.tick_hz)
            if fast is not None:
                return fast
            col = plain_values(col, len(tick), FLOAT)
        if kind == INT:
            ints = _plain_int_array(col)
            if ints is not None:
                return _int_words(ints)
        return list(_words(_cell_texts(col, kind)).T)

    def _lut(self, cols: Sequence[Column], kinds: Sequence[str], seps: Sequence[bytes]
             ) -> np.ndarray:
        """Words of each code's text: its Coded cells, then the constants after them."""
        keys = tuple((c.key, k, s) if isinstance(c, Coded) else ("const", c.value, k, s)
                     for c, k, s in zip(cols, kinds, seps))
        cacheable = all(not isinstance(c, Coded) or c.key is not None for c in cols)
        lut = self._luts.get(keys) if cacheable else None
        if lut is None:
            texts: list[bytes] | None = None
            tail = b""
            for c, k, s in zip(cols, kinds, seps):
                if isinstance(c, Coded):
                    cells = [t + s for t in _cell_texts(np.asarray(c.values), k)]
                    texts = cells if texts is None else [a + b for a, b in zip(texts, cells)]
                else:
                    tail += _cell_texts([c.value], k)[0] + s
            lut = _words([t + tail for t in texts or []])
            if cacheable:
                self._luts[keys] = lut
        return lut

def _slice(col: Column, lo: int, hi: int) -> Column:
    if isinstance(col, Const):
        return col
    if isinstance(col, Coded):
        return Coded(col.codes[lo:hi], col.values, col.key)
    if isinstance(col, TickSeconds):
        return TickSeconds(col.tick[lo:hi], col.tick_hz)
    return col[lo:hi]



def read_csv(path: Path, columns: Sequence[str], kinds: Mapping[str, str]
             ) -> dict[str, np.ndarray]:
    import csv

    with path.open(newline="", encoding="utf-8") as f:
        reader = csv.reader(f)
        header = next(reader, [])
        missing = [c for c in columns if c not in header]
        if missing:
            raise InputError(f"{path}: not a slipless table (no column {missing[0]!r})")
        pos = [header.index(c) for c in columns]
        cells: list[list[str]] = [[] for _ in columns]
        for r in reader:
            if r:
                for out, i in zip(cells, pos):
                    out.append(r[i])
    result: dict[str, np.ndarray] = {}
    for c, vals in zip(columns, cells):
        kind = kinds.get(c, STR)
        if kind == INT and all(vals):
            result[c] = np.array(vals, dtype=np.int64) if vals else np.zeros(0, np.int64)
        elif kind == INT:
            result[c] = np.array([int(v) if v else None for v in vals], dtype=object)
        elif kind == FLOAT:
            result[c] = np.array([v if v else "nan" for v in vals], dtype=np.float64)
        else:
            result[c] = np.array(vals, dtype=object)
    return result
