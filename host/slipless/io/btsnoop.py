"""btsnoop HCI logs as decoder input: the board's notifications and the
laptop's commands, out of a log that a phone, BlueZ or bumble wrote.

What is read (byte layouts and sources: /work/shared/references.md 7a, 7b):

- File header, 16 bytes, big-endian: magic "btsnoop\\0", version u32 = 1,
  datalink u32 = 1001 (H1: the packet type follows from the record flags) or
  1002 (H4: the first packet byte is the type). Anything else: InputError.
- Records, big-endian: original length, included length, flags, cumulative
  drops (u32 each), timestamp (i64, microseconds since year 0), packet.
  Flags bit 0: 0 sent to the controller, 1 received; bit 1: 1 command or
  event, 0 data. wall_ns = (timestamp - 0x00DCDDB30F2F8000) * 1000, the
  constant being the count at the Unix epoch; mono_ns = wall_ns, as the log
  has one clock. Stamps before 1970 (a relative clock) give wall_ns = -1 and
  mono_ns from the raw count.
- HCI events with status 0: LE Connection Complete (LE meta event 0x3E,
  subevent 0x01, 0x0A or 0x29) and Disconnection Complete (0x05). Each
  restarts that connection's byte stream: (None, Arrival(source)).
- HCI ACL data: connection handle (12 bits), PB flag (first, continuing,
  complete). L2CAP PDUs are reassembled per connection and direction; only
  channel 0x0004 (ATT) is kept, at most MAX_ATT_PDU bytes of it (longer PDUs
  and fragments without a start are counted and dropped).
- ATT: a Read By Type Response (0x09) with 21-byte entries lists
  characteristic declarations (declaration handle, properties, value handle,
  128-bit UUID little-endian); those of wire.DATA_UUID and wire.COMMAND_UUID
  give our value handles. A Handle Value Notification (0x1B) on the data
  handle is the board's bytes (Arrival source = connection index, origin
  "radio"); a Write Command (0x52) or Write Request (0x12) on the command
  handle is the laptop's (source TX_SOURCE_BASE + connection index).

Which handles: the caller's (`handles=`, for a log recorded on the laptop's
side), else each connection's own GATT discovery, else the first discovery
anywhere in the log (a stack that cached the handles does not discover
again). A log with no discovery at all falls back to a guess: the notified
handle whose values carry the most slipless frames, and the written handle
likewise; BtsnoopReport.note() says so. The source index counts connection
handles in order of appearance.

Damage: records carry no sync word or CRC. A record is taken when its header
is plausible, its HCI packet's own length field agrees with it, and a
plausible record follows (or no other reading of the bytes starts inside it).
Otherwise the reader moves to the next offset where that holds, so everything
intact before and after a damaged stretch is read; an unfinished last record
counts as truncated. The file is memory-mapped, never read whole.
"""

from __future__ import annotations

import mmap
import re
import struct
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from slipless.decode.decoder import Arrival
from slipless.decode.deframe import FastDeframer
from slipless.errors import InputError
from slipless.io.pieces import BTSNOOP_MAGIC, TX_SOURCE_BASE, Piece
from slipless.protocol import wire

H1, H4 = 1001, 1002  # the datalinks read here
EPOCH_UNIX_US = 0x00DCDDB30F2F8000  # timestamp of 1970-01-01T00:00Z, used literally (references 7a)
SENT, RECEIVED = 0, 1  # flags bit 0
CMD, ACL, SCO, EVENT, ISO = 1, 2, 3, 4, 5  # H4 packet indicators
CUT = -1  # packet type of a record that runs past the end of the file

_FILE_HEAD = struct.Struct(">8sII")
_REC_HEAD = struct.Struct(">IIIIq")
_U16 = struct.Struct("<H")
_L2CAP_HEAD = struct.Struct("<HH")  # length of the payload, channel id

MAX_PACKET = 1 + 4 + 0xFFFF  # H4 byte + ACL header + the largest u16 length: no HCI packet is longer
# Largest ATT PDU kept: NimBLE's ATT_MTU ceiling of 527, the highest of the stacks in references 6
# (Bluedroid 517 = a 512-octet value + 5). A notification of ours is at most 247.
MAX_ATT_PDU = 527
MAX_GUESS_KEYS = 64  # handles followed while guessing; a GATT server has a few dozen [common practice]
PROGRESS_STEP = 1 << 20  # report progress in steps this big: the bar costs more than a record

ATT_CID = 0x0004
PB_CONTINUING = 0b01
ATT_READ_BY_TYPE_RSP = 0x09
ATT_WRITE_REQ = 0x12
ATT_NOTIFY = 0x1B
ATT_WRITE_CMD = 0x52
_WRITES = (ATT_WRITE_CMD, ATT_WRITE_REQ)
_DECLARATION_128 = 21  # declaration handle 2 + properties 1 + value handle 2 + UUID 16
EVT_DISCONNECTED = 0x05
EVT_LE_META = 0x3E
LE_CONNECTED = (0x01, 0x0A, 0x29)  # LE (Enhanced v1/v2) Connection Complete subevents

_DATA_UUID_LE = uuid.UUID(wire.DATA_UUID).bytes[::-1]  # ATT sends UUIDs little-endian
_COMMAND_UUID_LE = uuid.UUID(wire.COMMAND_UUID).bytes[::-1]

# Offsets where a record header could start: orig and incl below 2**17, incl not zero,
# flags 0..3. Found by the C regex engine, so long damaged or zero-filled stretches are quick.
_CANDIDATE = re.compile(rb"(?s)(?=\x00[\x00\x01]..\x00(?!\x00\x00\x00)[\x00\x01]..\x00\x00\x00[\x00-\x03])")

# HCI header size, offset and mask of its length field, per packet type.
_HCI_HEADS = {CMD: (3, 2, 0xFF), ACL: (4, 2, 0xFFFF), SCO: (3, 2, 0xFF), EVENT: (2, 1, 0xFF),
              ISO: (4, 2, 0x3FFF)}


@dataclass
class BtsnoopReport:
    """What reading a log found and skipped, for the decode summary."""

    records: int = 0
    damaged_bytes: int = 0  # bytes stepped over to find the next good record
    damaged_stretches: int = 0
    truncated_bytes: int = 0  # an unfinished record at the end (a cut log)
    oversize_pdus: int = 0  # ATT PDUs longer than MAX_ATT_PDU, dropped
    broken_pdus: int = 0  # L2CAP PDUs with fragments missing, dropped
    logger_drops: int = 0  # packets the logging stack itself says it lost
    handles: tuple[int, int] = (0, 0)  # data and command value handles used by default
    handles_from: str = ""  # "given", "discovered" or "guessed"

    def note(self, name: str) -> str:
        parts = []
        if self.handles_from == "guessed":
            data, command = self.handles
            parts.append(f"no GATT discovery in the log: read notifications on handle 0x{data:04X} "
                         "(it carries frames)" + (f" and writes to 0x{command:04X}" if command else ""))
        if self.damaged_bytes:
            parts.append(f"{self.damaged_bytes} damaged bytes in {self.damaged_stretches} "
                         "stretch(es) skipped")
        if self.truncated_bytes:
            parts.append(f"{self.truncated_bytes} bytes of an unfinished last record")
        if self.oversize_pdus or self.broken_pdus:
            parts.append(f"{self.oversize_pdus + self.broken_pdus} L2CAP PDUs dropped "
                         "(too long or fragments missing)")
        if self.logger_drops:
            parts.append(f"the logging stack reports {self.logger_drops} packets it did not log")
        return f"{name}: " + "; ".join(parts) if parts else ""


@dataclass
class Handles:
    """Value handles of our characteristics on one GATT server (0: not known)."""

    data: int = 0
    command: int = 0
    server_dir: int = RECEIVED  # flags bit 0 of packets from the server (the board)


@dataclass(frozen=True)
class _Rec:
    flags: int
    stamp_us: int
    drops: int
    end: int  # file offset just past the record
    ptype: int  # HCI packet type; 0: the packet contradicts its length; CUT: past the end
    pkt: bytes  # the HCI packet without the H4 indicator


def btsnoop_pieces(path: Path, on_progress: Callable[[int], None] | None = None,
                   handles: tuple[int, int] | None = None,
                   report: BtsnoopReport | None = None) -> Iterator[Piece]:
    """The log's notifications and commands as decoder pieces, in log order.

    handles = (data value handle, command value handle) overrides discovery
    (0 for a command handle not known). report, if given, is filled in.
    """
    report = BtsnoopReport() if report is None else report
    with _open_log(path) as log:
        default = _default_handles(path, log, handles, report)
        units = _att_units(log, report, on_progress)
        yield from _pieces(units, default, discover=handles is None)


@contextmanager
def _open_log(path: Path) -> Iterator[_Log]:
    try:
        f = path.open("rb")
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from exc
    with f:
        datalink = _check_header(path, f.read(_FILE_HEAD.size))
        try:
            mm = mmap.mmap(f.fileno(), 0, access=mmap.ACCESS_READ)
        except (OSError, ValueError) as exc:  # ValueError: a file that cannot be mapped
            raise InputError(f"{path}: cannot read ({exc})") from exc
        with mm:
            yield _Log(mm, datalink)


def _check_header(path: Path, head: bytes) -> int:
    if not head.startswith(BTSNOOP_MAGIC[: len(head)]) or not head:
        raise InputError(f"{path}: not a btsnoop file (bad magic)")
    if len(head) < _FILE_HEAD.size:
        raise InputError(f"{path}: btsnoop header cut short ({len(head)} of {_FILE_HEAD.size} bytes)")
    _, version, datalink = _FILE_HEAD.unpack(head)
    if version != 1:
        raise InputError(f"{path}: btsnoop version {version} not supported (1 is)")
    if datalink not in (H1, H4):
        raise InputError(f"{path}: btsnoop datalink {datalink} not supported (H1 {H1} and H4 {H4} are)")
    return datalink


class _Log:
    """The records of a mapped btsnoop file, stepping over damage."""

    def __init__(self, mm: mmap.mmap, datalink: int) -> None:
        self.mm = mm
        self.size = len(mm)
        self.datalink = datalink

    def record(self, pos: int) -> _Rec | None:
        """The record at pos, or None when no record header can start there."""
        if self.size - pos < _REC_HEAD.size:
            return None
        orig, incl, flags, drops, stamp = _REC_HEAD.unpack_from(self.mm, pos)
        if flags > 3 or not 0 < incl <= orig <= MAX_PACKET:
            return None
        start = pos + _REC_HEAD.size
        end = start + incl
        if end > self.size:
            return _Rec(flags, stamp, drops, end, CUT, b"")
        ptype, pkt = _packet(self.datalink, flags, self.mm[start:end], orig)
        return _Rec(flags, stamp, drops, end, ptype, pkt)

    def plausible_at(self, pos: int) -> bool:
        """Could a record start at pos? The end of the file (or a cut header) counts."""
        if self.size - pos < _REC_HEAD.size:
            return True
        rec = self.record(pos)
        return rec is not None and rec.ptype != 0

    def good_at(self, pos: int) -> bool:
        rec = self.record(pos)
        return rec is not None and rec.ptype > 0 and self.plausible_at(rec.end)

    def resync(self, pos: int) -> int:
        """The first offset from pos where a good record starts, or the file size."""
        while (m := _CANDIDATE.search(self.mm, pos)) is not None:
            if self.good_at(m.start()):
                return m.start()
            pos = m.start() + 1
        return self.size

    def records(self, report: BtsnoopReport,
                on_progress: Callable[[int], None] | None = None) -> Iterator[_Rec]:
        pos, ahead, in_damage, shown = _FILE_HEAD.size, 0, False, 0
        while self.size - pos >= _REC_HEAD.size:
            if on_progress is not None and pos - shown >= PROGRESS_STEP:
                on_progress(pos - shown)
                shown = pos
            rec = self.record(pos)
            ok = rec is not None and rec.ptype > 0
            if rec is not None and ok and not self.plausible_at(rec.end):
                ahead = self.resync(pos + 1)
                ok = ahead >= rec.end  # no other reading starts inside it: the damage follows it
            if rec is not None and ok:
                report.records += 1
                report.logger_drops = max(report.logger_drops, rec.drops)
                in_damage = False
                yield rec
                pos = rec.end
                continue
            nxt = ahead if ahead > pos else self.resync(pos + 1)
            if nxt == self.size and rec is not None and rec.ptype == CUT:
                break  # the last record was cut short
            report.damaged_bytes += nxt - pos
            report.damaged_stretches += not in_damage
            in_damage = True
            pos = nxt
        report.truncated_bytes += self.size - pos
        if on_progress is not None:
            on_progress(self.size - shown)


def _packet(datalink: int, flags: int, data: bytes, orig: int) -> tuple[int, bytes]:
    """(HCI packet type, packet without the H4 byte); type 0 if the packet contradicts its length."""
    if datalink == H4:
        ptype, pkt, orig = data[0], data[1:], orig - 1
    elif flags & 2:
        ptype, pkt = (EVENT if flags & RECEIVED else CMD), data
    else:  # H1 data: ACL or SCO, told apart by which header agrees with the length
        ptype, pkt = (ACL if _agrees(ACL, data, orig) else SCO), data
    return (ptype if _agrees(ptype, pkt, orig) else 0), pkt


def _agrees(ptype: int, pkt: bytes, orig: int) -> bool:
    head = _HCI_HEADS.get(ptype)
    if head is None or len(pkt) < head[0]:
        return False
    size, at, mask = head
    return size + (int.from_bytes(pkt[at:size], "little") & mask) == orig


# ---- HCI events and L2CAP ----------------------------------------------------

Unit = tuple[int, int, int, bytes | None]  # connection, direction, stamp_us, ATT PDU or None


def _att_units(log: _Log, report: BtsnoopReport,
               on_progress: Callable[[int], None] | None) -> Iterator[Unit]:
    """ATT PDUs in log order; None for the PDU: the connection started or ended."""
    l2cap = _Reassembly(report)
    for rec in log.records(report, on_progress):
        direction = rec.flags & RECEIVED
        if rec.ptype == EVENT:
            conn = _link_event(rec.pkt)
            if conn is not None:
                l2cap.forget(conn)
                yield conn, direction, rec.stamp_us, None
        elif rec.ptype == ACL:
            conn, pdu = l2cap.feed(rec.pkt, direction)
            if pdu is not None:
                yield conn, direction, rec.stamp_us, pdu


def _link_event(pkt: bytes) -> int | None:
    """Connection handle of a successful LE connection or a disconnection, else None."""
    if pkt[0] == EVT_DISCONNECTED and len(pkt) >= 5 and pkt[2] == 0:
        return _U16.unpack_from(pkt, 3)[0] & 0x0FFF
    if pkt[0] == EVT_LE_META and len(pkt) >= 6 and pkt[2] in LE_CONNECTED and pkt[3] == 0:
        return _U16.unpack_from(pkt, 4)[0] & 0x0FFF
    return None


@dataclass
class _Partial:
    need: int  # bytes of the L2CAP PDU still to come
    keep: bytearray | None  # the ATT bytes so far; None: another channel, or too long


class _Reassembly:
    """L2CAP PDUs out of ACL fragments, per connection and direction."""

    def __init__(self, report: BtsnoopReport) -> None:
        self.report = report
        self.open: dict[tuple[int, int], _Partial] = {}

    def forget(self, conn: int) -> None:
        for key in [k for k in self.open if k[0] == conn]:
            del self.open[key]
            self.report.broken_pdus += 1

    def feed(self, acl: bytes, direction: int) -> tuple[int, bytes | None]:
        head, n = _L2CAP_HEAD.unpack_from(acl)  # ACL header: same shape, two u16
        conn, pb, data = head & 0x0FFF, (head >> 12) & 3, acl[4:]
        key = (conn, direction)
        if len(data) != n:  # the logger cut the packet short
            self._drop(key)
            return conn, None
        if pb == PB_CONTINUING:
            part = self.open.get(key)
            if part is None:
                self.report.broken_pdus += 1
                return conn, None
            part.need -= n
            if part.keep is not None and part.need >= 0:
                part.keep += data
        else:
            part = self._start(key, data)
            if part is None:
                return conn, None
        return conn, self._finish(key, part)

    def _start(self, key: tuple[int, int], data: bytes) -> _Partial | None:
        self._drop(key)  # a new start: whatever was open never finished
        if len(data) < _L2CAP_HEAD.size:
            self.report.broken_pdus += 1
            return None
        length, cid = _L2CAP_HEAD.unpack_from(data)
        keep = None
        if cid == ATT_CID and length > MAX_ATT_PDU:
            self.report.oversize_pdus += 1
        elif cid == ATT_CID:
            keep = bytearray(data[_L2CAP_HEAD.size:])
        part = self.open[key] = _Partial(_L2CAP_HEAD.size + length - len(data), keep)
        return part

    def _finish(self, key: tuple[int, int], part: _Partial) -> bytes | None:
        if part.need > 0:
            return None
        del self.open[key]
        if part.need < 0:  # more bytes than the L2CAP length said
            self.report.broken_pdus += 1
            return None
        return bytes(part.keep) if part.keep is not None else None

    def _drop(self, key: tuple[int, int]) -> None:
        if self.open.pop(key, None) is not None:
            self.report.broken_pdus += 1


# ---- ATT: which handles, and the pieces ---------------------------------------

def _declarations(pdu: bytes) -> Iterator[tuple[int, bytes]]:
    """(value handle, UUID bytes as sent) of each 128-bit characteristic declaration."""
    if len(pdu) < 2 or pdu[1] != _DECLARATION_128:
        return
    for off in range(2, len(pdu) - _DECLARATION_128 + 1, _DECLARATION_128):
        yield _U16.unpack_from(pdu, off + 3)[0], pdu[off + 5 : off + _DECLARATION_128]


def _discover(pdu: bytes, direction: int, found: Handles | None) -> Handles | None:
    """Fold our characteristics found in a Read By Type Response into found."""
    for value_handle, uuid_le in _declarations(pdu):
        if uuid_le not in (_DATA_UUID_LE, _COMMAND_UUID_LE):
            continue
        if found is None or found.server_dir != direction:
            found = Handles(server_dir=direction)
        if uuid_le == _DATA_UUID_LE:
            found.data = value_handle
        else:
            found.command = value_handle
    return found


def _default_handles(path: Path, log: _Log, given: tuple[int, int] | None,
                     report: BtsnoopReport) -> Handles:
    if given is not None:
        report.handles, report.handles_from = given, "given"
        return Handles(given[0], given[1], RECEIVED)
    scan = BtsnoopReport()  # a first pass: its counts are not the reader's
    found, how = _plan(log, scan)
    if found is None:
        if scan.records == 0:
            raise InputError(f"{path}: no readable btsnoop records")
        raise InputError(f"{path}: no GATT discovery of the slipless service and no notification "
                         f"carrying slipless frames in {scan.records} btsnoop records")
    report.handles, report.handles_from = (found.data, found.command), how
    return found


def _plan(log: _Log, scan: BtsnoopReport) -> tuple[Handles | None, str]:
    """The first discovery in the log (stopping there), else a guess from which handles carry frames."""
    found: dict[int, Handles] = {}
    counts = _FrameCounts()
    for conn, direction, _, pdu in _att_units(log, scan, None):
        if pdu is None:
            continue
        if pdu[0] == ATT_READ_BY_TYPE_RSP:
            h = _discover(pdu, direction, found.get(conn))
            if h is not None:
                found[conn] = h
                if h.data and h.command:
                    return h, "discovered"
        else:
            counts.feed(direction, pdu)
    discovered = [h for h in found.values() if h.data]
    if discovered:
        return discovered[0], "discovered"
    return counts.guess(), "guessed"


class _FrameCounts:
    """Good frames carried per (direction, write?, handle), for a log without discovery."""

    def __init__(self) -> None:
        self.deframers: dict[tuple[int, bool, int], FastDeframer] = {}

    def feed(self, direction: int, pdu: bytes) -> None:
        if pdu[0] not in (ATT_NOTIFY, *_WRITES) or len(pdu) < 3:
            return
        key = (direction, pdu[0] != ATT_NOTIFY, _U16.unpack_from(pdu, 1)[0])
        d = self.deframers.get(key)
        if d is None and len(self.deframers) < MAX_GUESS_KEYS:
            d = self.deframers[key] = FastDeframer()
        if d is not None:
            d.feed(pdu[3:])

    def guess(self) -> Handles | None:
        notified = [(d.frames, k) for k, d in self.deframers.items() if not k[1] and d.frames]
        if not notified:
            return None
        _, (server_dir, _, data) = max(notified)
        written = [(d.frames, k[2]) for k, d in self.deframers.items()
                   if k[1] and k[0] != server_dir and d.frames]
        return Handles(data, max(written)[1] if written else 0, server_dir)


def _pieces(units: Iterator[Unit], default: Handles, discover: bool) -> Iterator[Piece]:
    sources: dict[int, int] = {}
    own: dict[int, Handles] = {}  # what each connection discovered itself
    for conn, direction, stamp_us, pdu in units:
        source = sources.setdefault(conn, len(sources))
        if pdu is None:
            own.pop(conn, None)  # a new connection may be another board
            yield None, Arrival(source)
        elif pdu[0] == ATT_READ_BY_TYPE_RSP and discover:
            h = _discover(pdu, direction, own.get(conn))
            if h is not None:
                own[conn] = h
        elif len(pdu) > 3:
            h = own.get(conn)
            piece = _piece(pdu, direction, h if h is not None and h.data else default)
            if piece is not None:
                yield piece[0], _arrival(piece[1] + source, stamp_us)


def _piece(pdu: bytes, direction: int, h: Handles) -> tuple[bytes, int] | None:
    """(value, source offset) of a notification or write on our characteristics."""
    handle = _U16.unpack_from(pdu, 1)[0]
    if pdu[0] == ATT_NOTIFY and handle == h.data and direction == h.server_dir:
        return pdu[3:], 0
    if pdu[0] in _WRITES and h.command and handle == h.command and direction != h.server_dir:
        return pdu[3:], TX_SOURCE_BASE
    return None


def _arrival(source: int, stamp_us: int) -> Arrival:
    if stamp_us >= EPOCH_UNIX_US:
        wall_ns = (stamp_us - EPOCH_UNIX_US) * 1000
        return Arrival(source, wall_ns, wall_ns, "radio")
    return Arrival(source, stamp_us * 1000 if stamp_us >= 0 else -1, -1, "radio")
