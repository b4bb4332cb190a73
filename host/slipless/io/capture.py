"""Capture files: what the laptop heard and said, with its own clock.

Layout (protocol/CAPTURE.md has the diagrams):
  file header   magic b"SLCAP\\r\\n\\x1a", u16 version, u16 meta length,
                u32 CRC-32 of meta, meta (UTF-8 JSON)
  records       u16 sync 0x5AA5, u8 type, u8 source, u16 length,
                i64 mono_ns, i64 wall_ns, payload, u32 CRC-32 of all before it

Every record carries its own CRC and a sync word, so a reader stops cleanly at
a cut and re-finds its footing after a damaged stretch; nothing past the
damage is lost. Little-endian throughout, like the wire format.
"""

from __future__ import annotations

import json
import os
import struct
import time
import zlib
from collections.abc import Callable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, BinaryIO

from slipless.errors import CaptureError  # noqa: F401

MAGIC = b"SLCAP\r\n\x1a"  # \r\n and ^Z catch text-mode mangling of the file
VERSION = 1
_FILE_HEAD = struct.Struct("<8sHHI")
_REC_HEAD = struct.Struct("<HBBHqq")
SYNC = 0x5AA5
MAX_PAYLOAD = 4096  # longest record payload; longer lengths mean damage

# Record types.
RX = 1  # bytes the board sent (one notification, or one serial read)
TX = 2  # bytes the laptop wrote (a command frame)
EVENT = 3  # link event, payload is UTF-8 JSON: {"event": "connected", ...}
TYPE_NAMES = {RX: "rx", TX: "tx", EVENT: "event"}


class SystemClock:
    """The laptop's own clocks: monotonic and wall time, in nanoseconds.
    Simulations hand the recorder and the writer a simulated one instead."""

    @staticmethod
    def mono_ns() -> int:
        return time.monotonic_ns()

    @staticmethod
    def wall_ns() -> int:
        return time.time_ns()




@dataclass
class Record:
    type: int
    source: int
    mono_ns: int
    wall_ns: int
    payload: bytes
    offset: int = 0  # file offset of the record


@dataclass
class ReadStats:
    """What the reader met besides good records.

    A damaged stretch is a run of bytes between two good records (or before
    the end) that is no good record: the reader steps over it, byte by byte to
    the next sync word that starts one. Each stretch counts once, with its
    bytes; the decoder counts it as one damaged segment (the frames it held are
    lost to damage, SPEC section 6), beside the segments the deframer rejects.
    An unfinished last record (the file was cut, or the recorder stopped) is
    not damage: it is counted apart, as truncated bytes.
    """

    records: int = 0
    damaged_bytes: int = 0  # bytes skipped to find the next good record
    damaged_stretches: int = 0
    truncated_bytes: int = 0  # an unfinished record at the end (a cut or crash)


class CaptureWriter:
    """Append records; every `sync_every_s` seconds hand them to the OS (flush)
    and have a helper thread fsync them, so a slow disk never stalls the loop
    that takes notifications. close() flushes and fsyncs before it returns."""

    def __init__(self, path: Path, meta: dict[str, Any], sync_every_s: float = 1.0,
                 clock: Any = None, exclusive: bool = False) -> None:
        """exclusive: refuse (FileExistsError) rather than replace an existing file."""
        self.path = path
        self.clock = clock if clock is not None else SystemClock()
        # few write calls per second
        self._f: BinaryIO = path.open("xb" if exclusive else "wb", buffering=1 << 16)
        raw = json.dumps(meta, sort_keys=True).encode()
        self._f.write(_FILE_HEAD.pack(MAGIC, VERSION, len(raw), zlib.crc32(raw)) + raw)
        self.sync_every_s = sync_every_s
        self._last_sync = time.monotonic()
        self._fsync: Future[None] | None = None
        self._syncer: ThreadPoolExecutor | None = None
        self.records = 0
        self.bytes = self._f.tell()

    def write(self, type_: int, source: int, payload: bytes, mono_ns: int | None = None,
              wall_ns: int | None = None) -> None:
        if len(payload) > MAX_PAYLOAD:
            raise ValueError(f"record payload of {len(payload)} bytes exceeds {MAX_PAYLOAD}")
        head = _REC_HEAD.pack(SYNC, type_, source, len(payload),
                              self.clock.mono_ns() if mono_ns is None else mono_ns,
                              self.clock.wall_ns() if wall_ns is None else wall_ns)
        body = head + payload
        self._f.write(body + struct.pack("<I", zlib.crc32(body)))
        self.records += 1
        self.bytes += len(body) + 4
        if time.monotonic() - self._last_sync >= self.sync_every_s:
            self.sync()

    def event(self, source: int, name: str, **fields: Any) -> None:
        self.write(EVENT, source, json.dumps({"event": name, **fields}).encode())

    def sync(self) -> None:
        """Flush to the OS now; fsync in the background (one at a time)."""
        self._f.flush()
        self._last_sync = time.monotonic()
        if self._fsync is not None and not self._fsync.done():
            return  # the one running covers what was flushed before it began; the next sync the rest
        if self._syncer is None:
            self._syncer = ThreadPoolExecutor(1, thread_name_prefix="capture-fsync")
        self._fsync = self._syncer.submit(os.fsync, self._f.fileno())

    def close(self) -> None:
        if not self._f.closed:
            self._f.flush()
            if self._syncer is not None:
                self._syncer.shutdown(wait=True)
            os.fsync(self._f.fileno())
            self._f.close()


def is_capture(head: bytes) -> bool:
    return head.startswith(MAGIC)


_NAME = MAGIC[:5]  # b"SLCAP": what survives a text-mode copy of the magic
# What text-mode copies make of the magic's CR LF and ^Z, and the reason given.
_MANGLED = ((_NAME + b"\n\x1a", "its CR LF became LF"),
            (_NAME + b"\r\r\n\x1a", "its LF became CR LF"),
            (_NAME + b"\r\n", "it stops at the ^Z after its CR LF"))


def mangled(head: bytes, size: int) -> str | None:
    """Why a file that starts like a capture is not one (a text-mode copy), or None.
    head: the file's first bytes; size: its length."""
    if not head.startswith(_NAME) or head.startswith(MAGIC):
        return None
    for start, why in _MANGLED:
        if head.startswith(start) and (start[-1:] != b"\n" or size == len(start)):
            return (f"not a usable capture: {why} (the file went through a text-mode copy; "
                    "copy it again in binary mode)")
    return None


def read_header(f: BinaryIO) -> dict[str, Any]:
    head = f.read(_FILE_HEAD.size)
    if len(head) < _FILE_HEAD.size or not head.startswith(MAGIC):
        raise CaptureError(mangled(head, len(head)) or "not a slipless capture (bad magic)")
    _, version, n, crc = _FILE_HEAD.unpack(head)
    if version != VERSION:
        raise CaptureError(f"capture format version {version}; this slipless reads {VERSION}")
    raw = f.read(n)
    if len(raw) < n or zlib.crc32(raw) != crc:
        raise CaptureError("capture header is damaged")
    try:
        meta = json.loads(raw)
    except (ValueError, RecursionError) as exc:
        raise CaptureError("capture header is not JSON") from exc
    if not isinstance(meta, dict):
        raise CaptureError("capture header is not a JSON object")
    return meta


@dataclass
class CaptureReader:
    """Iterate the records of a capture, skipping damage, stopping at a cut.

    on_damage(offset, nbytes), when set, is told of each damaged stretch as it
    ends: before the record after it is handed out (or at the end), so a
    reader of the records learns where in their order the damage sat.
    """

    f: BinaryIO
    chunk: int = 1 << 20
    stats: ReadStats = field(default_factory=ReadStats)
    meta: dict[str, Any] = field(default_factory=dict)
    on_damage: Callable[[int, int], None] | None = None

    def __post_init__(self) -> None:
        self.meta = read_header(self.f)

    def __iter__(self) -> Iterator[Record]:
        buf = b""
        base = self.f.tell()  # file offset of buf[0]
        pos = 0
        eof = False
        head = _REC_HEAD.size
        stretch: list[int] = []  # [file offset, bytes] of the damaged stretch we are in
        while True:
            if len(buf) - pos < head + MAX_PAYLOAD + 4 and not eof:
                parts = [buf[pos:]]
                have = len(parts[0])
                while have < head + MAX_PAYLOAD + 4:  # room for the longest record
                    more = self.f.read(self.chunk)
                    if not more:
                        eof = True
                        break
                    parts.append(more)
                    have += len(more)
                base += pos
                buf = b"".join(parts)
                pos = 0
            if len(buf) - pos < head + 4:
                self._end_stretch(stretch)
                self.stats.truncated_bytes += len(buf) - pos
                return
            sync, type_, source, n, mono, wall = _REC_HEAD.unpack_from(buf, pos)
            end = pos + head + n
            if sync == SYNC and n <= MAX_PAYLOAD and end + 4 <= len(buf):
                (crc,) = struct.unpack_from("<I", buf, end)
                if zlib.crc32(buf[pos:end]) == crc:
                    self._end_stretch(stretch)
                    self.stats.records += 1
                    yield Record(type_, source, mono, wall, buf[pos + head : end], base + pos)
                    pos = end + 4
                    continue
            elif sync == SYNC and n <= MAX_PAYLOAD and eof:
                self._end_stretch(stretch)
                self.stats.truncated_bytes += len(buf) - pos  # cut inside the last record
                return
            # Damage: look for the next sync word that starts a good record.
            nxt = buf.find(b"\xa5\x5a", pos + 1)
            skip_to = nxt if nxt >= 0 else len(buf) - 1
            self.stats.damaged_bytes += skip_to - pos
            if not stretch:
                self.stats.damaged_stretches += 1
                stretch += [base + pos, 0]
            stretch[1] += skip_to - pos
            pos = skip_to

    def _end_stretch(self, stretch: list[int]) -> None:
        """A damaged stretch ended (a good record, a cut or the end follows): tell on_damage."""
        if stretch:
            if self.on_damage is not None:
                self.on_damage(stretch[0], stretch[1])
            stretch.clear()


def open_capture(path: Path) -> tuple[BinaryIO, CaptureReader]:
    f = path.open("rb")
    try:
        return f, CaptureReader(f)
    except CaptureError:
        f.close()
        raise
