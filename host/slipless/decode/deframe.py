"""Fast host deframer: same behaviour as protocol/wire.Deframer, bulk speed.

Two entry points share one state. feed() splits on the 0x00 delimiter with
bytes.split (C speed), COBS-decodes each segment with the `cobs` package's C
code when it is installed (falling back to wire.cobs_decode), and checks the
CRC with one zlib call against the CRC-32 residue: three C calls a frame, the
right cost for a notification at a time. feed_block() takes a large chunk
(a file read) and hands back all its frames as one FrameBlock: delimiters
found by numpy, every segment of the chunk COBS-decoded by one C call (see
_decode_runs for why that is exact), one zlib call per frame. Tests feed the
deframers the same damaged streams and require the same frames and counters.

What counts as damage, the one rule every summary and note follows:

- damaged segments = corrupt + overlong segments (SPEC section 4, rules 2-3),
  the ones after an input's first delimiter, plus the stretches of the input
  its reader stepped over (a damaged stretch of a capture file or btsnoop log:
  skip_damaged),
  each stretch one segment. All of them are `damaged`, so all count in SPEC
  section 6's D: frames lost to a damaged stretch are corrupt frames, as
  frames lost to a corrupt segment are. file_damaged counts the stretches apart.
- damaged bytes = the bytes of those segments and stretches (corrupt_bytes +
  file_damaged_bytes), and, not as a segment, the bytes of a frame an input's
  end or a stretch cut off (SPEC 4 rule 5).
- not damage: bytes before an input's first delimiter (`skipped`, SPEC 4
  rule 4: the reader joined inside a frame), and an unfinished last record of
  a capture (the capture reader counts those as truncated).
"""

from __future__ import annotations

import struct
import zlib
from dataclasses import dataclass

import numpy as np

from slipless.protocol import wire

try:
    from cobs.cobs import DecodeError as _CobsError
    from cobs.cobs import decode as _cobs_decode
except ImportError:  # pragma: no cover - optional accelerator
    _CobsError = ValueError
    _cobs_decode = wire.cobs_decode

# zlib.crc32(body + crc_le) for any intact body (CRC-32/ISO-HDLC residue, xor'ed).
_CRC_RESIDUE = 0x2144DF1C
_MIN_DECODED = wire.MIN_BODY + wire.CRC_SIZE
_MIN_ENCODED = _MIN_DECODED + 1  # a segment shorter than this decodes to too few bytes
_PER_SEGMENT = 8  # a failing run of at most this many segments is decoded one by one


@dataclass(frozen=True)
class FrameBlock:
    """The good frames of one feed_block() call, in stream order.

    Body i is data[starts[i] : starts[i] + lens[i]] (CRC excluded); offsets[i]
    is the stream offset of its frame's first byte and damaged[i] the damaged
    count when it ended, as in feed()'s tuples. first is the frame before all
    of them (the one that ended at the chunk's first delimiter), as a tuple.
    """

    data: bytes
    starts: np.ndarray
    lens: np.ndarray
    offsets: np.ndarray
    damaged: np.ndarray
    first: tuple[bytes, int, int] | None = None

    def __len__(self) -> int:
        return len(self.starts)

    def body(self, i: int) -> bytes:
        start = int(self.starts[i])
        return self.data[start : start + int(self.lens[i])]


_CUTS: dict[tuple[int, int], struct.Struct] = {}  # (length, count) -> layout of `count` decodings
_CUT_MAX = 64  # decodings cut by one struct call at most (and so at most 7 layouts a length)


def _cut(decoded: bytes, at: np.ndarray, size: np.ndarray) -> list[bytes]:
    """decoded[at[k] : at[k] + size[k]] for every k, in order. Where a run of
    them lie back to back with one separator byte between (the rule after a
    glued decoding) and have one length, one struct call cuts up to _CUT_MAX."""
    n = len(at)
    # a run goes on while the length is the same and the next starts one byte after
    breaks = np.flatnonzero((size[1:] != size[:-1]) | (at[1:] != at[:-1] + size[:-1] + 1)) + 1
    out: list[bytes] = []
    starts, lengths = at.tolist(), size.tolist()
    for a, b in zip([0, *breaks.tolist()], [*breaks.tolist(), n]):
        pos, length = starts[a], lengths[a]
        while a < b:
            count = min(_CUT_MAX, 1 << ((b - a).bit_length() - 1))
            layout = _CUTS.get((length, count))
            if layout is None:
                layout = _CUTS[(length, count)] = struct.Struct(
                    "<" + f"{length}sx" * (count - 1) + f"{length}s")
            out += layout.unpack_from(decoded, pos)
            pos += count * (length + 1)
            a += count
    return out


_NONE = np.zeros(0, dtype=np.int64)
EMPTY_BLOCK = FrameBlock(b"", _NONE, _NONE, _NONE, _NONE)


class FastDeframer:
    """feed(chunk) -> list of (body, stream offset of its first byte, damaged count).

    The third item is `damaged` as it stood when the frame ended, so a caller
    can tell which gaps in the sequence had damaged segments in them.
    """

    def __init__(self) -> None:
        self._tail = b""
        self._tail_overlong = False
        self._tail_dropped = 0  # bytes of an overlong tail already thrown away
        self._synced = False
        self._pos = 0  # stream offset of the first byte of self._tail
        self.frames = 0
        self.corrupt = 0
        self.corrupt_bytes = 0
        self.overlong = 0
        self.skipped = 0
        self.file_damaged = 0  # stretches the input's reader stepped over (skip_damaged)
        self.file_damaged_bytes = 0
        self._cut_open = False  # cut(): the next segment is the rest of a frame cut off
        self._first_damaged = 0  # feed_block: damaged count after its first segment's frame
        self._is_zero = np.empty(0, dtype=bool)  # feed_block's scratch, as long as its longest chunk

    @property
    def damaged(self) -> int:
        """Segments rejected after the first delimiter (corrupt or overlong), and
        the stretches the input's reader stepped over (each one segment)."""
        return self.corrupt + self.overlong + self.file_damaged

    def skip_damaged(self, nbytes: int) -> None:
        """The input's reader stepped over nbytes it could not read (a damaged
        stretch of a capture file) between the bytes fed so far and the next:
        one damaged segment of nbytes. The frame in progress ends there (cut)."""
        self.cut()
        self.file_damaged += 1
        self.file_damaged_bytes += nbytes

    def cut(self) -> None:
        """Bytes went missing here: never glue what came before to what follows.
        The held tail (a frame's start) is counted as close() counts it, and the
        bytes up to the next delimiter (that frame's rest) as damaged bytes too,
        not as another segment."""
        n = self._count_tail()
        self._pos += n
        self._tail = b""
        self._tail_overlong = False
        self._tail_dropped = 0
        self._cut_open = self._synced

    def feed(self, data: bytes) -> list[tuple[bytes, int, int]]:
        if not data:
            return []
        buf = self._tail + data if self._tail else bytes(data)
        parts = buf.split(b"\x00")
        tail = parts.pop()
        out: list[tuple[bytes, int, int]] = []
        pos = self._pos
        first = True
        for seg in parts:
            n = len(seg)
            extra = 0
            cut = False
            if first:
                extra = self._tail_dropped
                overlong = self._tail_overlong or n > wire.MAX_ENCODED
                cut, self._cut_open = self._cut_open, False
            else:
                overlong = n > wire.MAX_ENCODED
            first = False
            start = pos
            pos += n + 1 + extra
            synced = self._synced
            self._synced = True
            if n == 0:
                continue
            if overlong:
                self._reject(synced, n + extra, overlong=True, cut=cut)
                continue
            try:
                dec = _cobs_decode(seg)
            except _CobsError:
                self._reject(synced, n, cut=cut)
                continue
            if len(dec) < _MIN_DECODED or zlib.crc32(dec) != _CRC_RESIDUE:
                self._reject(synced, n, cut=cut)
                continue
            self.frames += 1
            out.append((dec[: -wire.CRC_SIZE], start, self.damaged))
        if parts:
            self._tail_overlong = False
            self._tail_dropped = 0
        self._keep_tail(tail, pos)
        return out

    def _keep_tail(self, tail: bytes, pos: int) -> None:
        # Cap the held tail: an overlong segment can never be valid, keep only a flag.
        if len(tail) > wire.MAX_ENCODED:
            self._tail_overlong = True
            drop = len(tail) - wire.MAX_ENCODED
            tail = tail[drop:]
            self._tail_dropped += drop
        self._tail = tail
        self._pos = pos

    def feed_block(self, data: bytes) -> FrameBlock:
        """feed() for a large chunk: the same frames, counters and state, as arrays.

        The frame ending at the chunk's first delimiter (it may have begun in
        an earlier chunk) comes apart, as FrameBlock.first.
        """
        if not data:
            return EMPTY_BLOCK
        data = bytes(data)
        u8 = np.frombuffer(data, dtype=np.uint8)
        if len(self._is_zero) < len(u8):
            self._is_zero = np.empty(len(u8), dtype=bool)
        is_zero = self._is_zero[: len(u8)]
        np.equal(u8, 0, out=is_zero)
        zeros = np.flatnonzero(is_zero)
        if not len(zeros):
            self._keep_tail(self._tail + data, self._pos)
            return EMPTY_BLOCK
        base = self._pos + self._tail_dropped + len(self._tail)  # stream offset of data[0]
        first_at = self._pos
        head = self._first_segment(self._tail + data[: zeros[0]])
        first = None if head is None else (head[: -wire.CRC_SIZE], first_at, self._first_damaged)
        # Segments 1.. lie between consecutive delimiters, all after the first one.
        starts = zeros[:-1] + 1
        sizes = zeros[1:] - starts
        overlong = sizes > wire.MAX_ENCODED
        cand = np.flatnonzero((sizes >= _MIN_ENCODED) & ~overlong)
        dec_at = np.full(len(cand), -1, dtype=np.int64)  # where each decodes to in `decoded`
        decoded = b""
        if len(cand):
            lo = int(starts[0])
            packed = data[lo : int(zeros[-1])].replace(b"\x00", b"")  # delimiters dropped
            decoded = self._decode_runs(packed, starts[cand] - lo - cand, sizes[cand], dec_at)
        ok = dec_at >= 0
        good = np.zeros(len(cand), dtype=bool)
        if ok.any():
            crc = list(map(zlib.crc32, _cut(decoded, dec_at[ok], sizes[cand[ok]] - 1)))
            good[ok] = True if crc.count(_CRC_RESIDUE) == len(crc) else np.array(crc) == _CRC_RESIDUE
        bad = (sizes > 0) & ~overlong
        bad[cand[good]] = False  # left: corrupt segments
        self.corrupt += int(bad.sum())
        self.overlong += int(overlong.sum())
        bad |= overlong
        self.corrupt_bytes += int((sizes[bad] + 1).sum())
        damaged = self.damaged - int(bad.sum()) + np.cumsum(bad)
        frames = cand[good]
        self.frames += len(frames)
        block = FrameBlock(decoded, dec_at[good], sizes[frames] - 1 - wire.CRC_SIZE,
                           base + starts[frames], damaged[frames], first)
        self._tail_overlong = False
        self._tail_dropped = 0
        end = int(zeros[-1]) + 1
        self._keep_tail(data[end:], base + end)
        return block

    def _first_segment(self, seg: bytes) -> bytes | None:
        """The segment that ends at a chunk's first delimiter (it may continue the
        held tail): feed()'s rules for one segment; the decoded bytes if good."""
        n = len(seg)
        extra = self._tail_dropped
        synced = self._synced
        self._synced = True
        cut, self._cut_open = self._cut_open, False
        if n == 0:
            return None
        if self._tail_overlong or n > wire.MAX_ENCODED:
            self._reject(synced, n + extra, overlong=True, cut=cut)
            return None
        try:
            dec = _cobs_decode(seg)
        except _CobsError:
            self._reject(synced, n, cut=cut)
            return None
        if len(dec) < _MIN_DECODED or zlib.crc32(dec) != _CRC_RESIDUE:
            self._reject(synced, n, cut=cut)
            return None
        self.frames += 1
        self._first_damaged = self.damaged
        return dec  # type: ignore[no-any-return]

    @staticmethod
    def _decode_runs(packed: bytes, at: np.ndarray, sizes: np.ndarray, dec_at: np.ndarray) -> bytes:
        """COBS-decode the segments packed[at[k] : at[k] + sizes[k]] (all 14..243
        bytes, in order); return the decodings, and set dec_at[k] to where
        segment k's begins in them (left -1 if it is not COBS).

        Decoding a run of segments glued together in one call is exact when it
        checks out: COBS writes a 0x00 at every block boundary and copies the data
        bytes, none of them zero, so the gluing is sound when the decoded run is
        one byte shorter than the input (no 0xFF block, which no segment under
        255 bytes holds) and has a 0x00 just before every segment's first byte:
        then the block chain started on each segment and ended exactly at its end,
        which is what decoding that segment alone checks. A run that fails is
        halved until the damaged segments are found; they are decoded one by one.
        """
        ends = at + sizes
        cut = (np.flatnonzero(at[1:] != ends[:-1]) + 1).tolist()  # a skipped segment between
        todo = list(zip([0, *cut], [*cut, len(at)]))[::-1]
        pieces: list[bytes] = []
        used = 0
        while todo:
            a, b = todo.pop()
            lo, hi = int(at[a]), int(ends[b - 1])
            try:
                dec = _cobs_decode(packed if hi - lo == len(packed) else packed[lo:hi])
            except _CobsError:
                dec = b""
            if len(dec) == hi - lo - 1 and (
                    b - a == 1 or not np.frombuffer(dec, np.uint8)[at[a + 1 : b] - lo - 1].any()):
                dec_at[a:b] = at[a:b] - lo + used
                pieces.append(dec)
                used += len(dec)
            elif b - a > _PER_SEGMENT:
                mid = (a + b) // 2
                todo += [(mid, b), (a, mid)]
            else:
                for k in range(a, b):
                    try:
                        dec = _cobs_decode(packed[int(at[k]) : int(ends[k])])
                    except _CobsError:
                        continue
                    dec_at[k] = used
                    pieces.append(dec)
                    used += len(dec)
        return pieces[0] if len(pieces) == 1 else b"".join(pieces)

    def _reject(self, synced: bool, n: int, overlong: bool = False, cut: bool = False) -> None:
        # Before the first delimiter a failing segment is the tail of a frame we
        # joined in the middle of, not damage. Right after a cut it is the rest of
        # the frame the cut ended: its bytes are damaged, the cut is the segment.
        if cut:
            self.corrupt_bytes += n + 1
        elif not synced:
            self.skipped += n + 1
        elif overlong:
            self.overlong += 1
            self.corrupt_bytes += n + 1
        else:
            self.corrupt += 1
            self.corrupt_bytes += n + 1

    def close(self) -> int:
        """End of input: count an unterminated tail; return its length."""
        n = self._count_tail()
        self._tail = b""
        return n

    def _count_tail(self) -> int:
        """The held tail's bytes: damaged once in sync, else skipped before it."""
        n = len(self._tail) + self._tail_dropped
        if n:
            if self._synced:
                self.corrupt_bytes += n
            else:
                self.skipped += n
        return n
