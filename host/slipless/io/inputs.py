"""Opening what the user names on the command line, with clear errors, and
turning each kind of input into (bytes, Arrival) pieces for the decoder.

Kinds: our capture files (recognised by their magic), btsnoop HCI logs (by
theirs), the board's file mirror (named with --mirror) and raw byte streams
(anything else: a serial log, a concatenation of frames).
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, BinaryIO, Protocol

from slipless.decode.decoder import Arrival, Decoder
from slipless.errors import InputError, ProtocolVersionError
from slipless.io import capture
from slipless.io.pieces import BTSNOOP_MAGIC, TX_SOURCE_BASE, Piece
from slipless.protocol import wire

if TYPE_CHECKING:  # read lazily: most inputs are captures
    from slipless.io.btsnoop import BtsnoopReport

CHUNK = 1 << 20
PROGRESS_OVER = 4 << 20  # show a progress bar for inputs larger than this
_passes = 0  # decoding passes over the inputs in this process (feed_all calls)


def decode_passes() -> int:
    """How many times this process has decoded its inputs (a test counts them:
    every command decodes once)."""
    return _passes


@dataclass
class Source:
    path: Path
    kind: str  # "capture", "btsnoop", "mirror", "stream"
    size: int
    # capture files and btsnoop logs: damage (damaged_stretches, damaged_bytes) and cut found
    stats: capture.ReadStats | BtsnoopReport | None = None
    note: str = ""  # what the reader had to skip, for the summary


def check_input(path: Path) -> int:
    """Return the file size, or raise InputError saying what is wrong."""
    if not path.exists():
        raise InputError(f"{path}: no such file")
    if path.is_dir():
        raise InputError(f"{path}: is a directory, expected a capture file")
    size = path.stat().st_size
    if size == 0:
        raise InputError(f"{path}: file is empty")
    return size


def classify(path: Path, mirror: bool = False) -> Source:
    size = check_input(path)
    try:
        with path.open("rb") as f:
            head = f.read(16)
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from exc
    why = capture.mangled(head, size)
    if why is not None:
        raise InputError(f"{path}: {why}")
    if capture.is_capture(head):
        kind = "capture"
    elif head.startswith(BTSNOOP_MAGIC):
        kind = "btsnoop"
    else:
        kind = "mirror" if mirror else "stream"
    return Source(path, kind, size)


def read_chunks(path: Path, on_progress: Callable[[int], None] | None = None) -> Iterator[bytes]:
    try:
        with path.open("rb") as f:
            while chunk := f.read(CHUNK):
                if on_progress is not None:
                    on_progress(len(chunk))
                yield chunk
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from exc


def pieces(src: Source, on_progress: Callable[[int], None] | None = None,
           on_damage: Callable[[int], None] | None = None) -> Iterator[Piece]:
    """The input as decoder feed pieces; (None, arrival) marks a fresh link.
    on_damage(nbytes): a capture's damaged stretch, told before the piece after it."""
    if src.kind in ("stream", "mirror"):
        arrival = Arrival(origin=src.kind)
        for chunk in read_chunks(src.path, on_progress):
            yield chunk, arrival
    elif src.kind == "capture":
        yield from _capture_pieces(src, on_progress, on_damage)
    elif src.kind == "btsnoop":
        from slipless.io.btsnoop import BtsnoopReport, btsnoop_pieces

        report = BtsnoopReport()
        yield from btsnoop_pieces(src.path, on_progress, report=report, on_damage=on_damage)
        src.stats = report
        src.note = report.note(src.path.name)
    else:  # pragma: no cover - classify() makes only the kinds above
        raise InputError(f"{src.path}: unknown input kind {src.kind}")


def record_piece(rec: capture.Record) -> tuple[Piece | None, dict[str, Any] | None]:
    """A capture record as a decoder feed piece ((None, arrival) marks a fresh
    link), and its event's fields for an EVENT record (else None)."""
    if rec.type == capture.RX:
        return (rec.payload, Arrival(rec.source, rec.mono_ns, rec.wall_ns, "radio")), None
    if rec.type == capture.TX:
        return (rec.payload, Arrival(TX_SOURCE_BASE + rec.source, rec.mono_ns, rec.wall_ns,
                                     "radio")), None
    if rec.type != capture.EVENT:
        return None, None
    try:
        fields = json.loads(rec.payload)
    except (ValueError, RecursionError):
        return None, None
    if not isinstance(fields, dict):
        return None, None
    if fields.get("event") in ("connected", "disconnected"):
        return (None, Arrival(rec.source, rec.mono_ns, rec.wall_ns)), fields
    return None, fields


def open_capture_input(path: Path) -> tuple[BinaryIO, capture.CaptureReader]:
    """capture.open_capture with its failures as one-line InputErrors."""
    try:
        return capture.open_capture(path)
    except capture.CaptureError as exc:
        raise InputError(f"{path}: {exc}") from exc
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from exc


def _capture_pieces(src: Source, on_progress: Callable[[int], None] | None,
                    on_damage: Callable[[int], None] | None = None) -> Iterator[Piece]:
    f, reader = open_capture_input(src.path)
    if on_damage is not None:
        reader.on_damage = lambda _offset, nbytes: on_damage(nbytes)
    with f:
        last = 0
        for rec in reader:
            if on_progress is not None:
                on_progress(rec.offset - last)
                last = rec.offset
            piece, _ = record_piece(rec)
            if piece is not None:
                yield piece
        if on_progress is not None:
            on_progress(src.size - last)
    src.stats = reader.stats
    st = reader.stats
    if st.damaged_bytes or st.truncated_bytes:
        src.note = (f"{src.path.name}: {st.damaged_bytes} damaged bytes in {st.damaged_stretches} "
                    f"stretch(es) skipped, {st.truncated_bytes} bytes of an unfinished last record")


def classify_all(inputs: Sequence[Path], mirrors: Sequence[Path] = ()) -> list[Source]:
    """Every input, then every mirror file: the order the merge relies on
    (the first copy of a frame wins, so the radio comes first)."""
    return [classify(p) for p in inputs] + [classify(p, mirror=True) for p in mirrors]


class Progress(Protocol):
    """What feed_all reports reading to (the command line draws a bar)."""

    def task(self, name: str, total: int) -> Callable[[int], None]: ...
    def close(self) -> None: ...


def feed_all(dec: Decoder, sources: Sequence[Source], progress: Progress | None = None,
             tap: Callable[[bytes, Arrival], None] | None = None,
             on_source: Callable[[int, Source], None] | None = None) -> None:
    """Feed every source to the decoder, each as a separate input (never glued
    to the one before), telling `progress` of large inputs; then finish.

    tap sees every piece of data after the decoder; on_source is told which
    source starts.
    """
    global _passes
    _passes += 1
    show = progress is not None and sum(s.size for s in sources) > PROGRESS_OVER
    try:
        for i, src in enumerate(sources):
            advance = progress.task(src.path.name, src.size) if show and progress else None
            if on_source is not None:
                on_source(i, src)
            dec.new_input()
            for data, where in pieces(src, advance, dec.skip_damaged):
                if data is None:
                    dec.reset_source(where.source)
                    continue
                dec.feed(data, where)
                if tap is not None:
                    tap(data, where)
    finally:
        if progress is not None:
            progress.close()
    dec.finish()
    dec.notes += [s.note for s in sources if s.note]


def check_decoded(dec: Decoder, sources: Sequence[Source]) -> None:
    """One clear verdict when nothing decoded: a protocol version we do not
    read, or no slipless frames at all."""
    if dec.runs:
        return
    c = dec.counters
    if c.bad_version:
        seen = ", ".join(str(v) for v in sorted(c.versions_seen))
        raise ProtocolVersionError(
            f"frames use protocol version {seen}; this slipless reads version {wire.VERSION}")
    names = ", ".join(str(s.path) for s in sources)
    raise InputError(f"{names}: no slipless frames found (not a capture, or wholly damaged)")
