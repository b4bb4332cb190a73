"""CSV text for table_io: built in bulk with numpy, not row by row.

Floats are Python's repr (the shortest text that reads back to the same
float); text is quoted as the csv module quotes it; lines end in CRLF as the
csv module's do. Two ways to the same bytes:

- any batch: every field becomes little-endian 32-bit words of ASCII padded
  with NUL bytes, the batch is one (rows x words) matrix, and dropping the
  NUL bytes leaves the lines;
- samples in their frames' form (FramesText): each row's pieces are copied
  straight to their place in the output, so no padding has to be dropped.
"""

from __future__ import annotations

import threading
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
    PerFrame,
    Spec,
    Stepped,
    TableWriter,
    TickSeconds,
    column_rows,
    plain_values,
    slice_batch,
    ticks_of,
)

CSV_CHUNK_ROWS = 1 << 17  # rows formatted at once: the word matrix stays near 12 MB
_W = np.dtype("<u4")
_P10 = np.array([10**i for i in range(19)], dtype=np.int64)
MAX_EXACT = 10**15  # |int| below which n / 10**k has <= 15 digits: its exact decimal is repr
_NS_PER_S = 10**9
_NAT = -(2**63)  # numpy's "not a time": a missing laptop time


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
_ZULU = _words([b"Z"])[0, 0]


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


def _utc_words(ns: np.ndarray) -> list[Any]:
    """ISO 8601 UTC with nanoseconds (2026-05-09T07:35:25.123456789Z) as word
    columns; _NAT is a missing time (an empty cell). The date and time of day
    are numpy's text for each distinct second, the nanoseconds are appended."""
    missing = ns == _NAT
    sec = np.where(missing, 0, ns) // _NS_PER_S
    frac = np.where(missing, 0, ns) - sec * _NS_PER_S
    uniq, where = np.unique(sec, return_inverse=True)
    days = np.datetime_as_string(uniq.astype("datetime64[s]"), unit="s", timezone="UTC")
    head = _words([s[:-1].encode() + b"." for s in days.tolist()])[where.reshape(-1)]
    cols = [*head.T, _TRIPLE[frac // 1_000_000], _TRIPLE[(frac // 1000) % 1000],
            _TRIPLE[frac % 1000], np.full(ns.shape, _ZULU, dtype=_W)]
    if missing.any():
        keep = ~missing
        cols = [c * keep for c in cols]
    return cols


def _csv_text(s: str) -> str:
    """A text cell as csv.writer writes it (QUOTE_MINIMAL). A NUL cannot be
    written (the NUL bytes are the padding), so it becomes U+FFFD."""
    if "\0" in s:
        s = s.replace("\0", "\ufffd")
    if any(ch in s for ch in ',"\r\n'):
        return '"' + s.replace('"', '""') + '"'
    return s


def cell_texts(values: Any, kind: str) -> list[bytes]:
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


def _masked_ints(values: Any) -> tuple[np.ndarray, np.ndarray] | None:
    """Python ints with None as (int64 values, missing); None if they do not fit."""
    if isinstance(values, np.ndarray) and values.dtype.kind != "O":
        return None
    objs = np.array(values, dtype=object).reshape(-1)
    missing: np.ndarray = objs == None  # noqa: E711 (elementwise, not identity)
    try:
        return np.where(missing, 0, objs).astype(np.int64), missing
    except (TypeError, ValueError, OverflowError):
        return None


def _utc_ns(values: Any) -> np.ndarray | None:
    """Laptop times (ints, None where unknown) as int64 with _NAT for None."""
    if isinstance(values, np.ndarray) and values.dtype.kind in "iu":
        return values.astype(np.int64, copy=False)
    ints = _masked_ints(values)
    if ints is None:
        return None
    ns, missing = ints
    return np.where(missing, _NAT, ns)


def csv_header(spec: Spec) -> bytes:
    return (",".join(_csv_text(c) for c in spec.names) + "\r\n").encode()


def csv_rows(spec: Spec, cols: Sequence[Column]) -> bytes:
    """The CSV lines (no header) a writer of `spec` writes for one batch."""
    n = max((column_rows(c) for c in cols), default=0)
    return b"".join(_CsvFormat(spec).text(cols, n)) if n > 0 else b""


class CsvWriter(TableWriter):
    """One CSV file. With `background`, batches are formatted on its lanes, two
    at a time, and written in order; the caller must not change a batch's
    arrays after handing it over."""

    def __init__(self, path: Path, spec: Spec, background: Background | None = None) -> None:
        super().__init__(spec)
        self.path = path
        self._file = path.open("wb")
        self._file.write(csv_header(spec))
        self._submit = background.in_order() if background is not None else None
        self._form = _CsvFormat(spec)

    def _write(self, cols: Sequence[Column], n: int) -> None:
        if self._submit is None:
            self._file.writelines(self._form.text(cols, n))
        else:
            self._submit(self._form.text, cols, n, self._file.writelines)

    def close(self) -> None:
        if self._submit is None:
            self._file.close()
        else:
            self._submit(list, (), lambda _: self._file.close())


class _CsvFormat:
    """CSV text of batches of one table; keeps the text of Coded values between batches."""

    def __init__(self, spec: Spec) -> None:
        self.spec = spec
        self._kinds = [c.kind for c in spec.columns]
        self._seps = [b"\r\n" if i == len(spec.columns) - 1 else b"," for i in
                      range(len(spec.columns))]
        self._luts: dict[tuple[Any, ...], Any] = {}  # texts of codes by their columns' keys
        self._lock = threading.Lock()  # lanes share the cache of value texts
        self._frames: Any = None  # the frames' form path, made on first use

    def text(self, cols: Sequence[Column], n: int) -> list[Any]:
        """The lines of a batch, as bytes-like pieces in order."""
        if self._frames is None:
            self._frames = FramesText(self)
        fast = self._frames.text(cols, n)
        if fast is not None:
            return fast
        return [self.lines(slice_batch(cols, lo, min(n, lo + CSV_CHUNK_ROWS)),
                           min(n, lo + CSV_CHUNK_ROWS) - lo) for lo in range(0, n, CSV_CHUNK_ROWS)]

    def lines(self, cols: Sequence[Column], n: int) -> bytes:
        """The lines of a batch through the word matrix (any columns)."""
        m = self.matrix(cols, self._kinds, self._seps, n)
        return m.tobytes().translate(None, b"\0")  # faster than a boolean mask here

    def matrix(self, cols: Sequence[Column], kind: Sequence[str], sep: Sequence[bytes],
               n: int) -> np.ndarray:
        """(n, k) words of each row's cells, each followed by its separator."""
        pieces: list[Any] = []  # bytes (alike in every row), word columns or (n, k) blocks
        last = len(cols) - 1
        i = 0
        while i <= last:
            col = cols[i]
            if isinstance(col, Const):
                pieces.append(cell_texts([col.value], kind[i])[0] + sep[i])
            elif isinstance(col, Coded):
                # Coded columns sharing their codes, and the constants after them, become
                # one table of ready-made text: one gather per row for all of them.
                j = i + 1
                while j <= last and isinstance(cols[j], Coded) and cols[j].codes is col.codes:
                    j += 1
                k = j
                while k <= last and isinstance(cols[k], Const):
                    k += 1
                pieces.append(self.lut(cols[i:k], kind[i:k], sep[i:k], col.codes)[col.codes])
                i = k
                continue
            else:
                pieces.append(self._field(col, kind[i], n))
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
        if not blocks:
            return np.zeros((n, 0), dtype=_W)
        return np.column_stack([b if getattr(b, "shape", ()) else np.broadcast_to(_W.type(b), (n,))
                                for b in blocks])  # faster than filling a matrix column by column

    def _field(self, col: Column, kind: str, n: int) -> list[Any]:
        if isinstance(col, TickSeconds):
            tick = ticks_of(col.tick)
            fast = _tick_words(tick, col.tick_hz)
            if fast is not None:
                return fast
            col = plain_values(TickSeconds(tick, col.tick_hz), n, FLOAT)
        elif isinstance(col, PerFrame) and isinstance(col.values, Coded):  # a table per code
            codes = np.repeat(col.values.codes, col.counts)
            coded = Coded(codes, col.values.values, col.values.key)
            return [self.lut([coded], [kind], [b""], codes)[codes]]
        elif isinstance(col, (PerFrame, Stepped)):
            col = plain_values(col, n, kind)
        if kind == INT:
            ints = _plain_int_array(col)
            if ints is not None:
                return _int_words(ints)
            masked = _masked_ints(col)
            if masked is not None:
                keep = ~masked[1]
                return [w * keep for w in _int_words(masked[0])]
        if kind == UTC:
            ns = _utc_ns(col)
            if ns is not None:
                return _utc_words(ns)
        return list(_words(cell_texts(col, kind)).T)

    @staticmethod
    def _lut_key(cols: Sequence[Column], kinds: Sequence[str], seps: Sequence[bytes]
                 ) -> tuple[Any, ...] | None:
        if not all(not isinstance(c, Coded) or c.key is not None for c in cols):
            return None
        return tuple((c.key, k, s) if isinstance(c, Coded) else ("const", c.value, k, s)
                     for c, k, s in zip(cols, kinds, seps))

    def _keep(self, key: tuple[Any, ...] | None, lut: Any) -> None:
        if key is not None:
            with self._lock:
                if len(self._luts) >= MAX_LUTS:  # a new code space: drop the oldest
                    self._luts.pop(next(iter(self._luts)))
                self._luts[key] = lut

    def lut(self, cols: Sequence[Column], kinds: Sequence[str], seps: Sequence[bytes],
            codes: np.ndarray) -> np.ndarray:
        """Words of each code's text: its Coded cells, then the constants after them;
        made for the codes asked for so far (a stream's samples use a few thousand
        of its 65536 raw values)."""
        return self._texts("words", _WordTexts, cols, kinds, seps, codes)[0]

    def right_lut(self, cols: Sequence[Column], kinds: Sequence[str], seps: Sequence[bytes],
                  codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """lut's texts right-aligned in one width (void items: NUL bytes, then the
        text) and their lengths."""
        return self._texts("right", _RightTexts, cols, kinds, seps, codes)

    def _texts(self, form: str, kind: Any, cols: Sequence[Column], kinds: Sequence[str],
               seps: Sequence[bytes], codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        key = self._lut_key(cols, kinds, seps)
        with self._lock:
            got = self._luts.get((form, key)) if key is not None else None
            made = got is None
            if got is None:
                got = kind(len(np.asarray(cols[0].values)))
            new = got.missing(codes)
            if new.size:
                got.add(new, self._lut_texts(cols, kinds, seps, new))
            text, length = got.text, got.length
        if made and key is not None:
            self._keep((form, key), got)
        return text, length

    @staticmethod
    def _lut_texts(cols: Sequence[Column], kinds: Sequence[str], seps: Sequence[bytes],
                   codes: np.ndarray) -> list[bytes]:
        texts: list[bytes] | None = None
        tail = b""
        for c, k, s in zip(cols, kinds, seps):
            if isinstance(c, Coded):
                cells = [t + s for t in cell_texts(np.asarray(c.values)[codes], k)]
                texts = cells if texts is None else [a + b for a, b in zip(texts, cells)]
            else:
                tail += cell_texts([c.value], k)[0] + s
        return [t + tail for t in texts or []]


MAX_LUTS = 8  # value-text tables kept per table (one or two per code space; a few MB each)


class _WordTexts:
    """Texts of codes as rows of words (NUL-padded), the row growing as longer
    texts come, filled in as codes are first asked for."""

    def __init__(self, size: int) -> None:
        self.text = np.zeros((size, 1), dtype=_W)
        self.length = np.zeros(size, dtype=np.int64)
        self.filled = np.zeros(size, dtype=bool)

    def missing(self, codes: np.ndarray) -> np.ndarray:
        gaps = ~self.filled[codes]
        return np.unique(codes[gaps]) if gaps.any() else codes[:0]

    def add(self, codes: np.ndarray, texts: Sequence[bytes]) -> None:
        words = _words(texts)
        if words.shape[1] > self.text.shape[1]:  # a new array: readers keep the old one
            wide = np.zeros((len(self.text), words.shape[1]), dtype=_W)
            wide[:, : self.text.shape[1]] = self.text
            self.text = wide
        self.text[codes, : words.shape[1]] = words
        self.length[codes] = [len(t) for t in texts]
        self.filled[codes] = True


class _RightTexts:
    """Texts of codes, right-aligned (NUL bytes, then the text) in rows of one
    width: a power of two, which numpy copies fastest, growing as longer texts
    come; filled in as codes are first asked for."""

    def __init__(self, size: int) -> None:
        self.text = np.zeros((size, 8), dtype=np.uint8)
        self.length = np.zeros(size, dtype=np.int16)
        self.filled = np.zeros(size, dtype=bool)

    def missing(self, codes: np.ndarray) -> np.ndarray:
        gaps = ~self.filled[codes]
        return np.unique(codes[gaps]) if gaps.any() else codes[:0]

    def add(self, codes: np.ndarray, texts: Sequence[bytes]) -> None:
        width = self.text.shape[1]
        longest = max(map(len, texts), default=1)
        if longest > width:  # a new array: readers keep the old one
            while width < longest:
                width *= 2
            wide = np.zeros((len(self.text), width), dtype=np.uint8)
            wide[:, width - self.text.shape[1]:] = self.text
            self.text = wide
        flipped = np.array([t[::-1] for t in texts], dtype=f"S{width}").view(np.uint8)
        self.text[codes] = flipped.reshape(len(texts), width)[:, ::-1]
        self.length[codes] = [len(t) for t in texts]
        self.filled[codes] = True


# ---- samples in their frames' form --------------------------------------------------------
FRAME_ROWS = 1 << 16  # rows placed at once: each temporary stays near half a megabyte
_LOW_DIGITS = 6  # a tick's text: its digits above the last six, then those six from a table
_MAX_HIGH_DIGITS = 8  # ticks below 10**14 (three years of microseconds): one 64-bit word
_U64 = np.uint64


def _digit_words(values: np.ndarray, digits: int) -> np.ndarray:
    """Each value's `digits` decimal digits (zero-padded) as the bytes of a uint64,
    first digit in the lowest byte."""
    out = np.zeros(values.shape, dtype=_U64)
    for j in range(digits):
        d = (values // _P10[digits - 1 - j]) % 10 + 48
        out |= d.astype(_U64) << _U64(8 * j)
    return out


_LOW_TEXT: list[np.ndarray] = []
_LOW_TEXT_LOCK = threading.Lock()


def _low_text() -> np.ndarray:
    """For u in 0..10**6 - 1: its six digits (zero-padded) and ',' as uint64 bytes."""
    with _LOW_TEXT_LOCK:
        if not _LOW_TEXT:
            _LOW_TEXT.append(_digit_words(np.arange(10**_LOW_DIGITS, dtype=np.int64), _LOW_DIGITS)
                             | _U64(ord(",") << (8 * _LOW_DIGITS)))
        return _LOW_TEXT[0]


def _pack(parts: Sequence[tuple[int, np.ndarray, int]], n: int, width: int) -> np.ndarray:
    """(n, words) uint64 holding byte strings placed side by side: parts are
    (byte offset, uint64 bytes, length <= 8)."""
    words = np.zeros((n, -(-width // 8)), dtype=_U64)
    for at, v, length in parts:
        q, r = divmod(at, 8)
        words[:, q] |= (v << _U64(8 * r)) if r else v
        if r + length > 8:
            words[:, q + 1] |= v >> _U64(8 * (8 - r))
    return words


def _stride1(buf: np.ndarray, width: int) -> np.ndarray:
    """Every `width` bytes of buf as one void item, one item per starting byte."""
    return np.ndarray((buf.size - width + 1,), dtype=f"V{width}", buffer=buf, strides=(1,))


class FramesText:
    """The samples table's lines from its frames' form, without the word matrix.

    A batch shaped as TableSink writes samples (constants; columns with one
    value per frame; a Stepped tick; Coded values with the constants after
    them) is placed piece by piece into the output: each row's end is known
    from the lengths of its pieces, so the value text (right-aligned, from a
    table per code), the frame's text and the tick's text are copied to their
    places in that order. A piece copied right-aligned may cover bytes to its
    left, and the frame's text may reach past its end; the pieces written after
    it restore those bytes, and every piece stays inside its own row. Anything
    else, and any block the checks refuse, goes through the word matrix.
    """

    def __init__(self, form: _CsvFormat) -> None:
        self.form = form
        self._local = threading.local()  # each thread's output buffer, used again

    def text(self, cols: Sequence[Column], n: int) -> list[Any] | None:
        plan = self._plan(cols)
        if plan is None:
            return None
        self._local.at = 0
        pieces: list[Any] = []
        for lo in range(0, n, FRAME_ROWS):
            hi = min(n, lo + FRAME_ROWS)
            part = slice_batch(cols, lo, hi)
            placed = self._place(plan, part, hi - lo)
            pieces.append(placed if placed is not None else self.form.lines(part, hi - lo))
        return pieces

    def _plan(self, cols: Sequence[Column]) -> int | None:
        """The tick's column: the columns before it have one value per frame,
        those after it are Coded (and constants)."""
        kinds = self.form._kinds
        i = 0
        while i < len(cols) and isinstance(cols[i], (Const, PerFrame)):
            i += 1
        if i + 1 >= len(cols) or not isinstance(cols[i], Stepped) or kinds[i] != INT:
            return None
        rest = cols[i + 1 :]
        if not isinstance(rest[0], Coded) or not all(
                isinstance(c, Const) or (isinstance(c, Coded) and c.codes is rest[0].codes)
                for c in rest):
            return None
        return i

    def _frame_texts(self, cols: Sequence[Column], frames: int) -> tuple[np.ndarray, np.ndarray]:
        """Each frame's text (its leading cells, each with its comma), left-aligned
        in one width, and their lengths."""
        quick = self._frame_texts_by_code(cols, frames)
        if quick is not None:
            return quick
        per = [c.values if isinstance(c, PerFrame) else c for c in cols]
        m = self.form.matrix(per, self.form._kinds[: len(cols)], [b","] * len(cols), frames)
        b = m.view(np.uint8).reshape(frames, -1)
        keep = b != 0
        lengths = np.count_nonzero(keep, axis=1).astype(np.int64)
        flat = np.concatenate([b[keep], np.zeros(1, np.uint8)])
        width = max(1, int(lengths.max()) if frames else 1)
        col = np.arange(width)
        idx = np.minimum((np.cumsum(lengths) - lengths)[:, None] + col, flat.size - 1)
        text = np.where(col < lengths[:, None], flat[idx], 0).astype(np.uint8)
        return np.ascontiguousarray(text).view(f"V{width}").reshape(-1), lengths

    def _frame_texts_by_code(self, cols: Sequence[Column], frames: int
                             ) -> tuple[np.ndarray, np.ndarray] | None:
        """_frame_texts when the leading cells are constants, then columns coded
        per frame by one code (a stream's description), then a count (seq): the
        text before the count from a table per code, the count's digits placed
        after it, and the comma."""
        kinds = self.form._kinds
        i = 0
        while i < len(cols) and isinstance(cols[i], Const):
            i += 1
        coded = cols[i:-1]
        last = cols[-1] if cols else None
        if not coded or not isinstance(last, PerFrame) or kinds[len(cols) - 1] != INT:
            return None
        code = coded[0].values.codes if isinstance(coded[0], PerFrame) and isinstance(
            coded[0].values, Coded) else None
        if code is None or not all(isinstance(c, PerFrame) and isinstance(c.values, Coded)
                                   and c.values.codes is code for c in coded):
            return None
        count = np.asarray(last.values)
        if count.dtype.kind not in "iu" or not frames or int(count.min()) < 0:
            return None
        head = b"".join(cell_texts([c.value], k)[0] + b"," for c, k in zip(cols[:i], kinds))
        table: list[bytes] = [head] * len(np.asarray(coded[0].values.values))
        for c, k in zip(coded, kinds[i:]):
            table = [t + v + b"," for t, v in zip(table, cell_texts(
                np.asarray(c.values.values), k))]
        texts = _RightTexts(len(table))
        texts.add(np.arange(len(table)), table)
        w_p, d_max = texts.text.shape[1], len(str(int(count.max())))
        head_len = texts.length[code].astype(np.int64)
        digits = np.ones(frames, dtype=np.int64)
        for j in range(1, d_max):
            digits += count >= _P10[j]
        margin = max(w_p, d_max)
        width = margin + w_p + d_max + 1
        buf = np.zeros(frames * width, dtype=np.uint8)
        ends = np.arange(frames) * width + margin + head_len  # where each head ends
        zero_padded = ((count[:, None] // _P10[d_max - 1 :: -1][: d_max]) % 10 + 48).astype(
            np.uint8)
        _stride1(buf, d_max)[ends + digits - d_max] = np.ascontiguousarray(
            zero_padded).view(f"V{d_max}").reshape(-1)  # leading zeros land on the head
        _stride1(buf, w_p)[ends - w_p] = texts.text[code].view(f"V{w_p}")[:, 0]  # over them
        buf[ends + digits] = ord(",")
        lengths = head_len + digits + 1
        text = np.ndarray((frames,), dtype=f"V{int(lengths.max())}", buffer=buf, offset=margin,
                          strides=(width,))
        return np.ascontiguousarray(text), lengths

    def _buffer(self, size: int) -> np.ndarray:
        """size bytes of this thread's buffer after what this batch used so far."""
        local = self._local
        buf: np.ndarray | None = getattr(local, "buf", None)
        at = local.at
        if buf is None or at + size > buf.size:  # earlier pieces keep the old one alive
            buf = local.buf = np.empty(max(size, 2 * (buf.size if buf is not None else 0),
                                           1 << 20), dtype=np.uint8)
            at = 0
        local.at = at + size
        return buf[at : at + size]

    def _place(self, t: int, cols: Sequence[Column], n: int) -> memoryview | None:
        step: Stepped = cols[t]
        counts = step.counts
        frames = len(counts)
        tick = step.expand()
        low, high = int(tick.min()), int(tick.max())
        if low < 0 or high >= _P10[_LOW_DIGITS + _MAX_HIGH_DIGITS]:
            return None
        shapes = _TickShapes(tick, low, high, n)
        codes = cols[t + 1].codes
        v_text, v_len = self.form.right_lut(cols[t + 1 :], self.form._kinds[t + 1 :],
                                            self.form._seps[t + 1 :], codes)
        a_text, a_len = self._frame_texts(cols[:t], frames)
        fr = np.repeat(np.arange(frames), counts)
        len_v = v_len[codes]
        row_a = a_len[fr]
        size = row_a + shapes.width
        size += len_v
        end = np.cumsum(size)
        out = self._buffer(int(end[-1]))
        _write_value_texts(out, end, v_text, codes, len_v, size)
        start = end - size
        _write_frame_texts(out, start, a_text, a_len, fr, shapes.narrowest)
        start += row_a  # now where the tick begins
        shapes.write(out, start)
        return memoryview(out.data)


def _write_value_texts(out: np.ndarray, end: np.ndarray, text: np.ndarray, codes: np.ndarray,
                       length: np.ndarray, room: np.ndarray) -> None:
    """Each row's value text, right-aligned to end at the row's end. A copy of the
    table's whole width reaches before the text, so rows shorter than that width
    take a narrower copy (the last bytes of each text), or their own lengths."""
    width = text.shape[1]
    narrow = int(room.min())
    if narrow >= width or int(length.max()) <= narrow:
        _copy_right(out, end, text, codes, min(width, narrow))
        return
    short = room < width
    rows = np.flatnonzero(~short)
    _copy_right(out, end[rows], text, codes[rows], width)
    rows = np.flatnonzero(short)
    narrow = int(room[rows].min())
    if int(length[rows].max()) <= narrow:
        _copy_right(out, end[rows], text, codes[rows], narrow)
        return
    lengths = length[rows]
    for n in np.unique(lengths).tolist():
        these = rows[lengths == n]
        _copy_right(out, end[these], text, codes[these], n)


def _copy_right(out: np.ndarray, end: np.ndarray, text: np.ndarray, codes: np.ndarray,
                width: int) -> None:
    """The last `width` bytes of each code's text, copied to end at `end`."""
    # every np.take here gathers by indices made in range: "clip" skips the bounds
    # check, which costs ten times the gather itself for int32 indices
    got = np.take(text, codes, axis=0, mode="clip")
    if width < text.shape[1]:
        got = np.ascontiguousarray(got[:, text.shape[1] - width :])
    _stride1(out, width)[end - width] = got.view(f"V{width}")[:, 0]


def _write_frame_texts(out: np.ndarray, start: np.ndarray, text: np.ndarray,
                       length: np.ndarray, fr: np.ndarray, room: int) -> None:
    """Each row's frame text at its start. A text is copied in the width of the
    longest, so a shorter one reaches past its end: by at most `room` bytes (the
    tick text written after it) in each copy, so frames whose texts differ more
    in length are copied in separate widths."""
    lengths = np.unique(length)
    width = text.dtype.itemsize
    if int(lengths[-1] - lengths[0]) <= room:
        _stride1(out, width)[start] = np.take(text, fr, mode="clip")
        return
    as_bytes = text.view(np.uint8).reshape(len(text), width)
    low = 0
    while low < len(lengths):
        high = int(np.searchsorted(lengths, lengths[low] + room, side="right"))
        w = int(lengths[high - 1])
        frames = (length >= lengths[low]) & (length <= w)
        rows = np.flatnonzero(frames[fr])
        part = np.ascontiguousarray(as_bytes[:, :w]).view(f"V{w}").reshape(-1)
        _stride1(out, w)[start[rows]] = np.take(part, fr[rows], mode="clip")
        low = high


class _TickShapes:
    """Each row's tick and its comma ('12345000,'), written in groups of one
    width: the digits above the last six (rows share them: made once each when
    the block spans few), the last six from a table, ','. A tick below 10**6
    has no leading zeros: its own digits and ','."""

    def __init__(self, tick: np.ndarray, low: int, high: int, n: int) -> None:
        k = _LOW_DIGITS
        self.high, self.u = np.divmod(tick, _P10[k])
        self.h0, h1 = max(low // _P10[k], 1), max(high // _P10[k], 1)
        self.highs = np.arange(self.h0, h1 + 1, dtype=np.int64) if h1 - self.h0 <= n else None
        wh0, wh1 = len(str(self.h0)), len(str(h1))
        self.groups: list[tuple[int, int, np.ndarray | None]] = []  # (high part's digits or
        # 0, the digits of a tick below 10**6, rows)
        first = None if low >= _P10[k] else self.high == 0
        if first is None and wh0 == wh1:
            self.width: Any = wh0 + k + 1
            self.narrowest = self.width
            self.groups.append((wh0, 0, None))
            return
        width = np.zeros(len(tick), dtype=np.int64)
        for wh in range(wh0, wh1 + 1):
            rows = (self.high >= _P10[wh - 1]) & (self.high < _P10[wh])
            width[rows] = wh + k + 1
            self.groups.append((wh, 0, np.flatnonzero(rows)))
        if first is not None:
            u = self.u
            for d in range(1, k + 1):
                rows = first & (u < _P10[d]) & ((u >= _P10[d - 1]) if d > 1 else True)
                width[rows] = d + 1
                self.groups.append((0, d, np.flatnonzero(rows)))
        self.width = width
        self.narrowest = int(width.min())

    def write(self, out: np.ndarray, start: np.ndarray) -> None:
        k, low_text = _LOW_DIGITS, _low_text()
        for wh, d, rows in self.groups:
            if rows is not None and not rows.size:
                continue
            at, high, u = (start, self.high, self.u) if rows is None else (
                start[rows], self.high[rows], self.u[rows])
            if wh:
                if self.highs is not None:  # few distinct: each one's digits once
                    h_text = np.take(_digit_words(self.highs, wh), high - self.h0, mode="clip")
                else:
                    h_text = _digit_words(high, wh)
                width = wh + k + 1
                words = _pack([(0, h_text, wh), (wh, np.take(low_text, u, mode="clip"), k + 1)],
                              len(u), width)
            else:
                width = d + 1
                words = _pack([(0, _digit_words(u, d) | _U64(ord(",") << (8 * d)), d + 1)],
                              len(u), width)
            x = np.ndarray((len(u),), dtype=f"V{width}", buffer=words,
                           strides=(words.shape[1] * 8,))
            _stride1(out, width)[at] = x


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
