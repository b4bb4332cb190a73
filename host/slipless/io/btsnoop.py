"""btsnoop HCI logs as decoder input: the board's notifications and the
laptop's commands, out of a log that a phone, BlueZ or bumble wrote.

What is read (byte layouts and sources: /work/shared/references.md 7a, 7b;
the Enhanced ATT and long-write layouts below, as noted):

- File header, 16 bytes, big-endian: magic "btsnoop\\0", version u32 = 1,
  datalink u32 = 1001 (H1: the packet type follows from the record flags) or
  1002 (H4: the first packet byte is the type). Anything else: InputError.
- Records, big-endian: original length, included length, flags, cumulative
  drops (u32 each), timestamp (i64, microseconds since year 0), packet.
  Flags bit 0: 0 sent to the controller, 1 received; bit 1: 1 command or
  event, 0 data. wall_ns = (timestamp - 0x00DCDDB30F2F8000) * 1000, the
  constant being the count at the Unix epoch; mono_ns = wall_ns, as the log
  has one clock. Stamps before 1970 (a relative clock) give wall_ns = -1 and
  mono_ns from the raw count. A record whose included length is below its
  original length was cut short by the logger: counted (records, bytes not
  logged), and the L2CAP PDU it belongs to is dropped as cut, never read.
- HCI events with status 0: LE Connection Complete (LE meta event 0x3E,
  subevent 0x01, 0x0A or 0x29) and Disconnection Complete (0x05). Each
  restarts that connection's byte stream: (None, Arrival(source)), and ends
  one link of the connection handle (a link: the traffic of one handle
  between two such events).
- HCI ACL data: connection handle (12 bits), PB flag (first, continuing,
  complete). L2CAP PDUs are reassembled per connection and direction on the
  channels read: 0x0004 (ATT), 0x0005 (LE signalling) and the Enhanced ATT
  channels; at most MAX_ATT_PDU bytes of ATT (longer PDUs and fragments
  without a start are counted and dropped).
- Enhanced ATT (Core 5.2+): ATT on L2CAP channels of PSM 0x0027 in Enhanced
  Credit Based Flow Control mode. On the LE signalling channel a command is
  code u8, identifier u8, length u16, data. L2CAP_CREDIT_BASED_CONNECTION_REQ
  (0x17): SPSM, MTU, MPS, initial credits (u16 each), then the requester's
  source CIDs; L2CAP_CREDIT_BASED_CONNECTION_RSP (0x18, same identifier, the
  other direction): MTU, MPS, initial credits, result, then the responder's
  CIDs in the request's order, 0x0000 for a refused one; results
  0x000D-0x000F are "pending" (a final response follows);
  L2CAP_DISCONNECTION_RSP (0x07): destination CID, source CID, closes one.
  An L2CAP header carries the receiver's CID, so packets in the request's
  direction carry the responder's CID and the others the requester's. Such a
  channel carries K-frames: the first of an SDU starts with the SDU length
  (u16), the others continue it; the SDU is one ATT PDU, read as on 0x0004.
  Followed: Core Vol 3 Part A (Enhanced Credit Based Flow Control mode, the
  commands 0x17/0x18 at 4.25/4.26) and Part F 3.2.11 / 3.4.7 (EATT bearers,
  notifications) by name and section only, the spec text not being at
  hand; the layouts as bumble 0.0.236 implements them [verified: l2cap.py
  L2CAP_Credit_Based_Connection_Request/_Response, L2CAP_Disconnection_
  Response, the pending results of its Result enum, the dynamic CID range
  0x0040-0x007F; LeCreditBasedChannel puts the SDU length on the first
  K-frame and sends to destination_cid, the peer's CID from the response;
  att.py EATT_PSM 0x0027], and a real bumble EATT session in the tests.
  From memory: that a refused CID is 0x0000 (bumble answers a refusal with
  no CIDs at all; both read alike), that Multiple Handle Value Notification
  may come on any bearer once the client asked for it. Channels opened
  before logging began are not read: nothing in the log says what they
  carry.
- ATT, on 0x0004 and on Enhanced ATT channels alike: a Read By Type
  Response (0x09) with 21-byte entries lists characteristic declarations
  (declaration handle, properties, value handle, 128-bit UUID little-endian);
  those of wire.DATA_UUID and wire.COMMAND_UUID give our value handles. A
  Handle Value Notification (0x1B) on the data handle, or a tuple of a
  Multiple Handle Value Notification (0x23: handle u16, length u16, value,
  repeated [verified: Zephyr att_internal.h struct bt_att_notify_mult]) is
  the board's bytes (Arrival source = connection index, origin "radio"); a
  Write Command (0x52) or Write Request (0x12) on the command handle is the
  laptop's (source TX_SOURCE_BASE + connection index).
- Long writes: Prepare Write Request (0x16: handle, value offset u16, part)
  parts are put together by offset, one queue per connection, direction and
  bearer; an Execute Write Request (0x18, flags 0x01 write, 0x00 cancel)
  hands the command handle's value over, stamped at the execute, as a Write
  Request would. A part that leaves a gap, one the logger cut, or a value
  over MAX_ATTRIBUTE_VALUE loses the whole value (the server refuses such an
  execute), counted. [verified: bumble att.py ATT_Prepare_Write_Request /
  ATT_Execute_Write_Request, gatt_client write_long_value, gatt_server
  on_att_execute_write_request (its queue per bearer, gap and length checks);
  Core Vol 3 Part F 3.4.6 for the queue per client and bearer, from memory.]
- A PDU the logger cut (it may span several records) is never read; when
  what was logged of it names our data or command handle, that byte stream
  restarts there ((None, Arrival(source))), so the decoder never glues the
  bytes on either side; a cut Prepare Write loses its long write.

Which handles, per link: the caller's (`handles=`, for a log recorded on the
laptop's side), else the link's own GATT discovery, else a choice from the
link's own traffic: the notified handle whose values carry the most slipless
frames, and the written handle likewise (a link without a written one that
carries frames takes the command handle of a discovery elsewhere in the log
that found the same data handle). A link with neither reads with the log's
default: its first discovery, else the handles carrying the most frames over
the whole log. So two boards on different handles in a log begun after
setup both come through. BtsnoopReport.links lists each link's choice and
note() says it whenever a link did not discover its own. The source index
counts connection handles in order of appearance.

Damage: records carry no sync word or CRC. A record is taken when its header
is plausible, its HCI packet's own length field agrees with it, and a
plausible record follows (or, for a record not cut by the logger, no other
reading of the bytes starts inside it). Otherwise the reader moves to the
next offset where that holds, so everything intact before and after a
damaged stretch is read; an unfinished last record counts as truncated. The
file is memory-mapped, never read whole. Unless the caller gives the
handles it is read twice: a first pass chooses each link's handles (and
passes over the data of links whose discovery has found both), the second
hands the pieces over.
"""

from __future__ import annotations

import dataclasses
import mmap
import re
import struct
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
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
_U16_PAIR = struct.Struct("<HH")  # (handle, length), (handle, offset), (destination, source CID)
_SIGNAL_HEAD = struct.Struct("<BBH")  # code, identifier, length

MAX_PACKET = 1 + 4 + 0xFFFF  # H4 byte + ACL header + the largest u16 length: no HCI packet is longer
# Largest ATT PDU kept: NimBLE's ATT_MTU ceiling of 527, the highest of the stacks in references 6
# (Bluedroid 517 = a 512-octet value + 5). A notification of ours is at most 247.
MAX_ATT_PDU = 527
SDU_LENGTH = 2  # the u16 ahead of an SDU's first K-frame
MAX_ATTRIBUTE_VALUE = 512  # longest attribute value (bumble gatt.py GATT_MAX_ATTRIBUTE_VALUE_SIZE)
MAX_GUESS_KEYS = 64  # handles followed while guessing; a GATT server has a few dozen [common practice]
MAX_QUEUES = 64  # prepare queues open at once; a client runs one long write at a time [common practice]
PROGRESS_STEP = 1 << 20  # report progress in steps this big: the bar costs more than a record
# The first pass (choosing handles) gets this fraction of the progress bar: it costs about a
# tenth of decoding the log (measured here on simulated logs, 6 MB).
FIRST_PASS_SHARE = 8
_NEVER = 1 << 30  # bytes still to come of a PDU whose length was not logged: it ends at the next start

ATT_CID = 0x0004
LE_SIGNALLING_CID = 0x0005
LE_DYNAMIC_CIDS = range(0x0040, 0x0080)  # LE dynamic channel ids (bumble l2cap.py)
EATT_PSM = 0x0027
SIG_DISCONNECTION_RSP = 0x07
SIG_CREDIT_CONNECTION_REQ = 0x17
SIG_CREDIT_CONNECTION_RSP = 0x18
CREDIT_RESULTS_PENDING = range(0x000D, 0x0010)
PB_CONTINUING = 0b01
ATT_READ_BY_TYPE_RSP = 0x09
ATT_WRITE_REQ = 0x12
ATT_PREPARE_WRITE_REQ = 0x16
ATT_EXECUTE_WRITE_REQ = 0x18
ATT_NOTIFY = 0x1B
ATT_NOTIFY_MULTIPLE = 0x23
ATT_WRITE_CMD = 0x52
EXECUTE_WRITE = 0x01  # Execute Write flags: 0x01 write the queue, 0x00 cancel it
_WRITES = (ATT_WRITE_CMD, ATT_WRITE_REQ)
_NOTIFIES = (ATT_NOTIFY, ATT_NOTIFY_MULTIPLE)
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


@dataclass(frozen=True)
class LinkHandles:
    """How one link (a connection handle between link events) got its handles."""

    conn: int
    how: str  # "discovered" (its own discovery), "traffic" (its own frames), "log" (the log's default)
    data: int
    command: int
    data_frames: int = 0  # frames its notifications on `data` carried (how == "traffic")
    command_frames: int = 0  # likewise its writes to `command`; -1: taken from a discovery elsewhere
    link: int = 1  # which link of this connection handle (counting those with ATT traffic)


@dataclass
class BtsnoopReport:
    """What reading a log found and skipped, for the decode summary."""

    records: int = 0
    damaged_bytes: int = 0  # bytes stepped over to find the next good record
    damaged_stretches: int = 0
    truncated_bytes: int = 0  # an unfinished record at the end (a cut log)
    cut_records: int = 0  # records the logger cut short (included length < original length)
    cut_bytes: int = 0  # the bytes those records did not log
    cut_pdus: int = 0  # L2CAP PDUs on the channels read that were lost with them
    oversize_pdus: int = 0  # ATT PDUs longer than MAX_ATT_PDU, dropped
    broken_pdus: int = 0  # L2CAP PDUs with fragments missing, dropped
    logger_drops: int = 0  # packets the logging stack itself says it lost
    eatt_channels: int = 0  # Enhanced ATT channels opened in the log
    long_writes: int = 0  # prepare/execute writes to the command handle, handed over
    long_writes_cancelled: int = 0
    long_writes_lost: int = 0  # a part missing, cut, or the value too long (the server refuses it)
    handles: tuple[int, int] = (0, 0)  # data and command value handles used by default
    handles_from: str = ""  # "given", "discovered" or "guessed"
    links: list[LinkHandles] = field(default_factory=list)  # each link with ATT traffic, in order

    def note(self, name: str) -> str:
        parts = self._handle_notes()
        if self.damaged_bytes:
            parts.append(f"{self.damaged_bytes} damaged bytes in {self.damaged_stretches} "
                         "stretch(es) skipped")
        if self.truncated_bytes:
            parts.append(f"{self.truncated_bytes} bytes of an unfinished last record")
        if self.cut_records:
            lost = f", {self.cut_pdus} ATT or signalling PDU(s) lost" if self.cut_pdus else ""
            parts.append(f"the logger cut {self.cut_records} record(s) short "
                         f"({self.cut_bytes} bytes not logged{lost})")
        if self.oversize_pdus or self.broken_pdus:
            parts.append(f"{self.oversize_pdus + self.broken_pdus} L2CAP PDUs dropped "
                         "(too long or fragments missing)")
        if self.long_writes or self.long_writes_cancelled or self.long_writes_lost:
            parts.append(_long_write_note(self))
        if self.logger_drops:
            parts.append(f"the logging stack reports {self.logger_drops} packets it did not log")
        return f"{name}: " + "; ".join(parts) if parts else ""

    def _handle_notes(self) -> list[str]:
        if self.handles_from == "given" or all(k.how == "discovered" for k in self.links):
            return []
        groups: dict[tuple[int, str, int, int, bool], list[LinkHandles]] = {}
        for k in self.links:
            groups.setdefault((k.conn, k.how, k.data, k.command, k.command_frames < 0), []).append(k)
        out = ["no GATT discovery in the log"] if self.handles_from == "guessed" else []
        several = {k.conn for k in self.links if k.link > 1}
        for same in groups.values():
            conn = same[0].conn
            which = "" if conn not in several else (
                f" ({len(same)} links)" if len(same) > 1 else f" (link {same[0].link})")
            out.append(f"connection 0x{conn:04X}{which}: {_how(same, self.handles_from)}")
        return out


def _how(same: list[LinkHandles], default_from: str) -> str:
    k = same[0]
    if k.how == "discovered":
        command = f"commands 0x{k.command:04X}" if k.command else "no command characteristic"
        return f"its own GATT discovery (data 0x{k.data:04X}, {command})"
    if k.how == "log":
        source = "discovery" if default_from == "discovered" else "busiest handles"
        command = f", commands 0x{k.command:04X}" if k.command else ""
        return (f"no discovery of its own and no frames in its traffic: read with the log's {source} "
                f"(data 0x{k.data:04X}{command})")
    frames = sum(s.data_frames for s in same)
    text = f"no discovery of its own: notifications on 0x{k.data:04X} carry {_count(frames, 'frame')}"
    if k.command_frames < 0:
        return text + f", writes to 0x{k.command:04X} (as discovered elsewhere in the log)"
    if k.command:
        written = _count(sum(s.command_frames for s in same), "frame")
        return text + f", writes to 0x{k.command:04X} carry {written}"
    return text + ", no writes carrying frames"


def _long_write_note(r: BtsnoopReport) -> str:
    text = f"{_count(r.long_writes, 'long write')} (prepare/execute) read as commands"
    if r.long_writes_cancelled:
        text += f", {r.long_writes_cancelled} cancelled"
    if r.long_writes_lost:
        text += f", {r.long_writes_lost} not read (a part missing, cut, or over {MAX_ATTRIBUTE_VALUE} bytes)"
    return text


def _count(n: int, what: str) -> str:
    return f"{n} {what}" + ("" if n == 1 else "s")


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
    cut: int = 0  # bytes the logger left out (original - included length)


def btsnoop_pieces(path: Path, on_progress: Callable[[int], None] | None = None,
                   handles: tuple[int, int] | None = None,
                   report: BtsnoopReport | None = None,
                   on_damage: Callable[[int], None] | None = None) -> Iterator[Piece]:
    """The log's notifications and commands as decoder pieces, in log order.

    handles = (data value handle, command value handle) overrides discovery
    (0 for a command handle not known). report, if given, is filled in.
    on_damage(nbytes): a damaged stretch stepped over, told before the piece
    after it (the decoder's skip_damaged: one damaged segment, as in a capture).
    """
    report = BtsnoopReport() if report is None else report
    with _open_log(path) as log:
        if handles is not None:
            report.handles, report.handles_from = handles, "given"
            plan = _Plan(Handles(handles[0], handles[1], RECEIVED))
            yield from _pieces(_att_units(log, report, on_progress, None, on_damage), plan,
                               report)
            return
        first = log.size // FIRST_PASS_SHARE
        plan = _make_plan(path, log, report, _share(on_progress, log.size, 0, first))
        units = _att_units(log, report, _share(on_progress, log.size, first, log.size), None,
                           on_damage)
        yield from _pieces(units, plan, report)


def _share(out: Callable[[int], None] | None, size: int, lo: int,
           hi: int) -> Callable[[int], None] | None:
    """One pass's progress as the part lo..hi of the file, so two passes report its size once."""
    if out is None:
        return None
    done = [0, lo]  # bytes this pass has read, progress shown so far

    def step(n: int) -> None:
        done[0] += n
        at = lo + done[0] * (hi - lo) // size
        if at > done[1]:
            out(at - done[1])
            done[1] = at
    return step


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
        self._last: tuple[int, _Rec | None] = (-1, None)  # the lookahead read is read again next

    def record(self, pos: int) -> _Rec | None:
        """The record at pos, or None when no record header can start there."""
        if self._last[0] == pos:
            return self._last[1]
        rec = self._read(pos)
        self._last = (pos, rec)
        return rec

    def _read(self, pos: int) -> _Rec | None:
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
        return _Rec(flags, stamp, drops, end, ptype, pkt, orig - incl)

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
                on_progress: Callable[[int], None] | None = None,
                on_damage: Callable[[int], None] | None = None) -> Iterator[_Rec]:
        """The records in file order, damaged stretches stepped over: each is
        told to on_damage(nbytes) before the record after it."""
        pos, ahead, in_damage, shown, stretch = _FILE_HEAD.size, 0, False, 0, 0
        while self.size - pos >= _REC_HEAD.size:
            if on_progress is not None and pos - shown >= PROGRESS_STEP:
                on_progress(pos - shown)
                shown = pos
            rec = self.record(pos)
            ok = rec is not None and rec.ptype > 0
            if rec is not None and ok and not self.plausible_at(rec.end):
                # a record the logger cut must end where the next begins: else its length is damage
                ahead = self.resync(pos + 1)
                ok = ahead >= rec.end and not rec.cut  # no other reading starts inside it
            if rec is not None and ok:
                report.records += 1
                report.logger_drops = max(report.logger_drops, rec.drops)
                report.cut_records += rec.cut > 0
                report.cut_bytes += rec.cut
                if in_damage and on_damage is not None:
                    on_damage(stretch)
                in_damage, stretch = False, 0
                yield rec
                pos = rec.end
                continue
            nxt = ahead if ahead > pos else self.resync(pos + 1)
            if nxt == self.size and rec is not None and rec.ptype == CUT:
                break  # the last record was cut short
            report.damaged_bytes += nxt - pos
            report.damaged_stretches += not in_damage
            in_damage, stretch = True, stretch + nxt - pos
            pos = nxt
        if in_damage and on_damage is not None:
            on_damage(stretch)
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

# connection, direction, stamp_us, ATT PDU (None: the link started or ended), bearer (its
# CID), cut (the PDU is what the logger kept of one it cut short: to be dropped, not read)
Unit = tuple[int, int, int, bytes | None, int, bool]


def _att_units(log: _Log, report: BtsnoopReport, on_progress: Callable[[int], None] | None,
               skip: set[int] | None = None,
               on_damage: Callable[[int], None] | None = None) -> Iterator[Unit]:
    """ATT PDUs in log order; None for the PDU: the connection started or ended. ACL data
    of the connections in skip (the caller may change it as it goes) is passed over;
    on_damage: see _Log.records."""
    channels = _Channels(report)
    l2cap = _Reassembly(report, channels)
    for rec in log.records(report, on_progress, on_damage):
        direction = rec.flags & RECEIVED
        if rec.ptype == EVENT:
            conn = _link_event(rec.pkt)
            if conn is not None:
                l2cap.forget(conn)
                channels.forget(conn)
                yield conn, direction, rec.stamp_us, None, 0, False
        elif rec.ptype == ACL:
            if skip and (_U16.unpack_from(rec.pkt)[0] & 0x0FFF) in skip:
                continue
            got = l2cap.feed(rec.pkt, direction)
            if got is not None:
                conn, cid, payload, length = got
                att = channels.feed(conn, direction, cid, payload, length)
                if att is not None and att[0]:
                    yield conn, direction, rec.stamp_us, att[0], cid, att[1]


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
    cid: int  # -1: not known (the logger cut the header)
    length: int  # the L2CAP payload length; -1: not known
    keep: bytearray | None  # the payload so far; None: a channel not read, or too long
    cut: bool = False  # the logger cut a fragment short: the PDU is lost, the rest stepped over


class _Reassembly:
    """L2CAP PDUs out of ACL fragments, per connection and direction."""

    def __init__(self, report: BtsnoopReport, channels: _Channels) -> None:
        self.report = report
        self.channels = channels
        self.open: dict[tuple[int, int], _Partial] = {}

    def forget(self, conn: int) -> None:
        for key in [k for k in self.open if k[0] == conn]:
            self._drop(key)

    def feed(self, acl: bytes, direction: int) -> tuple[int, int, bytes, int] | None:
        """(connection, channel, payload, its length) of a PDU on a channel read that this
        fragment completes, or that the logger cut short in it (the payload is then the
        part logged, shorter than the length)."""
        head, n = _L2CAP_HEAD.unpack_from(acl)  # ACL header: same shape, two u16
        conn, pb, data = head & 0x0FFF, (head >> 12) & 3, acl[4:]
        key = (conn, direction)
        if pb == PB_CONTINUING:
            part = self.open.get(key)
            if part is None:
                self.report.broken_pdus += 1
                self.channels.lost(conn, direction, -1)
                return None
            part.need -= n
            if part.keep is not None and part.need >= 0 and len(data) == n:
                part.keep += data
        else:
            part = self._start(key, data, n)
            if part is None:
                return None
        cut = self._cut(key, part) if len(data) < n else None  # the logger cut this fragment
        done = self._finish(key, part)
        return cut or done

    def _start(self, key: tuple[int, int], data: bytes, n: int) -> _Partial | None:
        self._drop(key)  # a new start: whatever was open never finished
        if len(data) < _L2CAP_HEAD.size:
            if len(data) < n:  # cut inside the L2CAP header: step over its fragments
                self.open[key] = _Partial(_NEVER, -1, -1, None)
                return self.open[key]
            self.report.broken_pdus += 1
            self.channels.lost(*key, -1)
            return None
        length, cid = _L2CAP_HEAD.unpack_from(data)
        cap, keep = self.channels.cap(key[0], key[1], cid), None
        if cap and length > cap:
            self.report.oversize_pdus += 1
            self.channels.lost(*key, cid)
        elif cap:
            keep = bytearray(data[_L2CAP_HEAD.size:])
        part = self.open[key] = _Partial(_L2CAP_HEAD.size + length - n, cid, length, keep)
        return part

    def _cut(self, key: tuple[int, int], part: _Partial) -> tuple[int, int, bytes, int] | None:
        """The PDU is lost: its logged part, if on a channel read (once)."""
        if part.cut:
            return None
        part.cut, keep, part.keep = True, part.keep, None
        if keep is None:
            if part.cid < 0:
                self.channels.lost(*key, -1)
            return None
        self.report.cut_pdus += 1
        return key[0], part.cid, bytes(keep), part.length

    def _finish(self, key: tuple[int, int], part: _Partial) -> tuple[int, int, bytes, int] | None:
        if part.need > 0:
            return None
        del self.open[key]
        if part.cut:
            return None
        if part.need < 0:  # more bytes than the L2CAP length said
            self.report.broken_pdus += 1
            self.channels.lost(*key, part.cid)
            return None
        return (key[0], part.cid, bytes(part.keep), part.length) if part.keep is not None else None

    def _drop(self, key: tuple[int, int]) -> None:
        part = self.open.pop(key, None)
        if part is not None and not part.cut:
            self.report.broken_pdus += 1
            self.channels.lost(*key, part.cid)


@dataclass
class _Sdu:
    """One direction of an Enhanced ATT channel: the SDU being put together from K-frames."""

    buf: bytearray | None = None  # the SDU so far; None: the next K-frame starts one
    need: int = 0  # its length, from the SDU length field
    skip: int = 0  # bytes still to come of an SDU that is lost (cut, or too long)


class _Channels:
    """The channels ATT is read on: 0x0004, and the Enhanced ATT channels the
    LE signalling channel opens (per connection and direction, by the CID the
    packets carry)."""

    def __init__(self, report: BtsnoopReport) -> None:
        self.report = report
        self.eatt: dict[tuple[int, int, int], _Sdu] = {}
        self.asked: dict[tuple[int, int, int], list[int]] = {}  # (conn, direction, identifier)

    def cap(self, conn: int, direction: int, cid: int) -> int:
        """Longest L2CAP payload kept on this channel; 0: the channel is not read."""
        if cid in (ATT_CID, LE_SIGNALLING_CID):
            return MAX_ATT_PDU
        return MAX_ATT_PDU + SDU_LENGTH if (conn, direction, cid) in self.eatt else 0

    def forget(self, conn: int) -> None:
        for table in (self.eatt, self.asked):
            for key in [k for k in table if k[0] == conn]:
                del table[key]

    def feed(self, conn: int, direction: int, cid: int, payload: bytes,
             length: int) -> tuple[bytes, bool] | None:
        """(the ATT PDU this L2CAP payload completes, False), or (what was logged of an
        ATT PDU lost with it, True) when the logger cut it (payload shorter than length)."""
        cut = len(payload) < length
        if cid == ATT_CID:
            return payload, cut
        if cid == LE_SIGNALLING_CID:
            if not cut:
                self._signal(conn, direction, payload)
            return None
        s = self.eatt.get((conn, direction, cid))
        if s is None:
            return None
        att = self._cut_kframe(s, payload, length) if cut else self._kframe(s, payload)
        return None if att is None else (att, cut)

    def _kframe(self, s: _Sdu, payload: bytes) -> bytes | None:
        if s.skip:
            s.skip = max(s.skip - len(payload), 0)
            return None
        if s.buf is None:
            if len(payload) < SDU_LENGTH:
                self.report.broken_pdus += 1
                return None
            s.need, s.buf = _U16.unpack_from(payload)[0], bytearray(payload[SDU_LENGTH:])
            if s.need > MAX_ATT_PDU:
                self.report.oversize_pdus += 1
                s.skip, s.buf = max(s.need - len(s.buf), 0), None
                return None
        else:
            s.buf += payload
        if len(s.buf) < s.need:
            return None
        sdu, s.buf = s.buf, None
        if len(sdu) > s.need:  # K-frames past the SDU's length: it lost its start
            self.report.broken_pdus += 1
            return None
        return bytes(sdu)

    def lost(self, conn: int, direction: int, cid: int) -> None:
        """A PDU on cid (-1: any channel) was lost: the SDU it belonged to with it."""
        for s in self._states(conn, direction, cid):
            s.buf, s.skip = None, 0

    @staticmethod
    def _cut_kframe(s: _Sdu, prefix: bytes, length: int) -> bytes | None:
        """A K-frame the logger cut: its SDU is lost; step over the rest of it (its length says
        how much) and hand back what was logged of the SDU."""
        if s.skip:
            s.skip = max(s.skip - length, 0)
            return None
        if s.buf is not None:
            lost = bytes(s.buf)
            s.skip, s.buf = max(s.need - len(s.buf) - length, 0), None
            return lost
        if len(prefix) < SDU_LENGTH:
            return None
        s.skip = max(_U16.unpack_from(prefix)[0] + SDU_LENGTH - length, 0)
        return prefix[SDU_LENGTH:]

    def _states(self, conn: int, direction: int, cid: int) -> list[_Sdu]:
        if cid >= 0:
            s = self.eatt.get((conn, direction, cid))
            return [] if s is None else [s]
        return [s for k, s in self.eatt.items() if k[:2] == (conn, direction)]

    def _signal(self, conn: int, direction: int, pdu: bytes) -> None:
        if len(pdu) < _SIGNAL_HEAD.size:
            return
        code, ident, length = _SIGNAL_HEAD.unpack_from(pdu)
        data = pdu[_SIGNAL_HEAD.size : _SIGNAL_HEAD.size + length]
        if code == SIG_CREDIT_CONNECTION_REQ and len(data) >= 10 and _U16.unpack_from(data)[0] == EATT_PSM:
            self.asked[(conn, direction, ident)] = _cids(data[8:])
        elif code == SIG_CREDIT_CONNECTION_RSP and len(data) >= 8:
            if _U16.unpack_from(data, 6)[0] in CREDIT_RESULTS_PENDING:
                return
            asked = self.asked.pop((conn, 1 - direction, ident), None)
            for requester, responder in zip(asked or (), _cids(data[8:])):  # 0x0000: refused
                if requester in LE_DYNAMIC_CIDS and responder in LE_DYNAMIC_CIDS:
                    self.eatt[(conn, 1 - direction, responder)] = _Sdu()  # a header names its receiver
                    self.eatt[(conn, direction, requester)] = _Sdu()
                    self.report.eatt_channels += 1
        elif code == SIG_DISCONNECTION_RSP and len(data) >= 4:
            dcid, scid = _U16_PAIR.unpack_from(data)
            self.eatt.pop((conn, 1 - direction, dcid), None)
            self.eatt.pop((conn, direction, scid), None)


def _cids(data: bytes) -> list[int]:
    return [_U16.unpack_from(data, i)[0] for i in range(0, len(data) - 1, 2)]


# ---- ATT: what a PDU carries ---------------------------------------------------

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


def _notified(pdu: bytes) -> Iterator[tuple[int, bytes]]:
    """(handle, value) of a Handle Value Notification, or of each tuple of a Multiple one."""
    if pdu[0] == ATT_NOTIFY:
        if len(pdu) >= 3:
            yield _U16.unpack_from(pdu, 1)[0], pdu[3:]
        return
    off = 1
    while off + 4 <= len(pdu):
        handle, n = _U16_PAIR.unpack_from(pdu, off)
        off += 4
        if off + n > len(pdu):  # a tuple longer than the PDU: the rest is not to be trusted
            return
        yield handle, pdu[off : off + n]
        off += n


QueueKey = tuple[int, int, int]  # connection, direction, bearer


class _LongWrites:
    """Prepare Write queues, one per connection, direction and bearer; a
    handle's parts put together by offset (None: the server would refuse it)."""

    def __init__(self) -> None:
        self.queues: dict[QueueKey, dict[int, bytearray | None]] = {}

    def prepare(self, key: QueueKey, pdu: bytes, only: int = 0) -> None:
        if len(pdu) < 5:
            return
        handle, offset = _U16_PAIR.unpack_from(pdu, 1)
        if (only and handle != only) or (key not in self.queues and len(self.queues) >= MAX_QUEUES):
            return
        queue = self.queues.setdefault(key, {})
        if handle not in queue and len(queue) >= MAX_GUESS_KEYS:
            return
        buf = queue.setdefault(handle, bytearray())
        part = pdu[5:]
        if buf is None:
            return
        if offset > len(buf) or offset + len(part) > MAX_ATTRIBUTE_VALUE:
            queue[handle] = None  # a gap, or too long: the server refuses the whole execute
        else:
            buf[offset : offset + len(part)] = part

    def execute(self, key: QueueKey, pdu: bytes) -> tuple[bool, dict[int, bytearray | None]]:
        """(written or cancelled, the queue) for an Execute Write Request."""
        return len(pdu) >= 2 and pdu[1] == EXECUTE_WRITE, self.queues.pop(key, {})

    def spoil(self, key: QueueKey, handle: int) -> None:
        """A part of handle's value was lost: the value cannot be put together."""
        queue = self.queues.get(key)
        if queue is None and len(self.queues) < MAX_QUEUES:
            queue = self.queues[key] = {}
        if queue is not None:
            queue[handle] = None

    def forget(self, conn: int) -> None:
        for key in [k for k in self.queues if k[0] == conn]:
            del self.queues[key]


class _Links:
    """Which link of its connection handle a unit belongs to: a link event starts the next."""

    def __init__(self) -> None:
        self.count: dict[int, int] = {}

    def key(self, conn: int) -> tuple[int, int]:
        return conn, self.count.get(conn, 0)

    def next(self, conn: int) -> None:
        self.count[conn] = self.count.get(conn, 0) + 1


# ---- which handles: a first pass over the log ----------------------------------

FrameKey = tuple[int, bool, int]  # direction, a write?, handle


class _FrameCounts:
    """Good frames carried per (direction, write?, handle), for a link without discovery."""

    def __init__(self) -> None:
        self.deframers: dict[FrameKey, FastDeframer] = {}

    def feed(self, direction: int, pdu: bytes, writes: _LongWrites, bearer: QueueKey) -> None:
        op = pdu[0]
        if op in _NOTIFIES:
            for handle, value in _notified(pdu):
                self._add((direction, False, handle), value)
        elif op in _WRITES and len(pdu) >= 3:
            self._add((direction, True, _U16.unpack_from(pdu, 1)[0]), pdu[3:])
        elif op == ATT_PREPARE_WRITE_REQ:
            writes.prepare(bearer, pdu)
        elif op == ATT_EXECUTE_WRITE_REQ:
            written, queue = writes.execute(bearer, pdu)
            for handle, buf in queue.items() if written else ():
                if buf is not None:
                    self._add((direction, True, handle), bytes(buf))

    def _add(self, key: FrameKey, value: bytes) -> None:
        d = self.deframers.get(key)
        if d is None and len(self.deframers) < MAX_GUESS_KEYS:
            d = self.deframers[key] = FastDeframer()
        if d is not None:
            d.feed(value)

    def frames(self) -> dict[FrameKey, int]:
        return {k: d.frames for k, d in self.deframers.items() if d.frames}


@dataclass(frozen=True)
class _Guess:
    handles: Handles
    data_frames: int
    command_frames: int


def _guess(frames: dict[FrameKey, int]) -> _Guess | None:
    """The notified handle carrying the most frames, and the written one (other direction) likewise."""
    notified = [(n, k) for k, n in frames.items() if not k[1]]
    if not notified:
        return None
    data_frames, (server_dir, _, data) = max(notified)
    written = [(n, k[2]) for k, n in frames.items() if k[1] and k[0] != server_dir]
    command_frames, command = max(written) if written else (0, 0)
    return _Guess(Handles(data, command, server_dir), data_frames, command_frames)


@dataclass
class _LinkScan:
    conn: int
    own: Handles | None = None  # its own discovery
    counts: _FrameCounts | None = field(default_factory=_FrameCounts)  # None: discovery says all


class _Plan:
    """The handles of each link, chosen before the pieces are read."""

    def __init__(self, default: Handles) -> None:
        self.default = default
        self.links: dict[tuple[int, int], Handles] = {}

    def handles(self, link: tuple[int, int]) -> Handles:
        return self.links.get(link, self.default)


def _make_plan(path: Path, log: _Log, report: BtsnoopReport,
               on_progress: Callable[[int], None] | None) -> _Plan:
    scan = BtsnoopReport()  # a first pass: its counts are not the reader's
    links, first = _scan(log, scan, on_progress)
    found = [s.own for s in links.values() if s.own is not None and s.own.data]
    default, how = (first or (found[0] if found else None)), "discovered"
    totals: dict[FrameKey, int] = {}
    for s in links.values():
        for k, n in (s.counts.frames() if s.counts else {}).items():
            totals[k] = totals.get(k, 0) + n
    if default is None:
        guess = _guess(totals)
        if guess is None:
            if scan.records == 0:
                raise InputError(f"{path}: no readable btsnoop records")
            raise InputError(f"{path}: no GATT discovery of the slipless service and no notification "
                             f"carrying slipless frames in {scan.records} btsnoop records")
        default, how = guess.handles, "guessed"
    report.handles, report.handles_from = (default.data, default.command), how
    plan = _Plan(default)
    seen: dict[int, int] = {}  # links so far per connection handle
    for key, s in links.items():
        seen[s.conn] = seen.get(s.conn, 0) + 1
        choice, plan.links[key] = _choose(s, found, default)
        report.links.append(dataclasses.replace(choice, link=seen[s.conn]))
    return plan


def _scan(log: _Log, scan: BtsnoopReport, on_progress: Callable[[int], None] | None
          ) -> tuple[dict[tuple[int, int], _LinkScan], Handles | None]:
    """Each link with ATT traffic: its discovery, or the frames its handles carry; and the
    log's first discovery that found both handles."""
    links: dict[tuple[int, int], _LinkScan] = {}
    first: Handles | None = None
    which, writes = _Links(), _LongWrites()
    settled: set[int] = set()  # connections whose link has discovered both handles: skipped
    for conn, direction, _, pdu, bearer, cut in _att_units(log, scan, on_progress, settled):
        if pdu is None:
            which.next(conn)
            writes.forget(conn)
            settled.discard(conn)
            continue
        key = which.key(conn)
        s = links.get(key) or links.setdefault(key, _LinkScan(conn))
        if cut:
            continue
        if pdu[0] == ATT_READ_BY_TYPE_RSP:
            s.own = _discover(pdu, direction, s.own)
            if s.own is not None and s.own.data and s.own.command:
                s.counts = None
                settled.add(conn)
                first = first or s.own
        elif s.counts is not None:
            s.counts.feed(direction, pdu, writes, (conn, direction, bearer))
    return links, first


def _choose(s: _LinkScan, found: list[Handles], default: Handles) -> tuple[LinkHandles, Handles]:
    """A link's handles: its own discovery, else its own traffic, else the log's default."""
    if s.own is not None and s.own.data:
        h = s.own
        return LinkHandles(s.conn, "discovered", h.data, h.command), h
    guess = _guess(s.counts.frames()) if s.counts else None
    if guess is None:
        return LinkHandles(s.conn, "log", default.data, default.command), default
    h, command_frames = guess.handles, guess.command_frames
    same = [d for d in found if d.command and (d.data, d.server_dir) == (h.data, h.server_dir)]
    if not h.command and same:  # no command carrying frames: the same server's discovered one
        h, command_frames = Handles(h.data, same[0].command, h.server_dir), -1
    return LinkHandles(s.conn, "traffic", h.data, h.command, guess.data_frames, command_frames), h


# ---- the pieces: the second pass ---------------------------------------------

def _pieces(units: Iterator[Unit], plan: _Plan, report: BtsnoopReport) -> Iterator[Piece]:
    sources: dict[int, int] = {}
    which, writes = _Links(), _LongWrites()
    now: dict[int, Handles] = {}  # each connection's handles on its current link
    for conn, direction, stamp_us, pdu, bearer, cut in units:
        source = sources.setdefault(conn, len(sources))
        if pdu is None:
            which.next(conn)
            writes.forget(conn)
            now.pop(conn, None)
            yield None, Arrival(source)
            continue
        h = now.get(conn) or now.setdefault(conn, plan.handles(which.key(conn)))
        if cut:  # bytes before and after a lost value of ours must not be glued together
            for offset in _lost(pdu, direction, h, writes, (conn, direction, bearer), report):
                yield None, Arrival(offset + source)
            continue
        for value, offset in _values(pdu, direction, h, writes, (conn, direction, bearer), report):
            yield value, _arrival(offset + source, stamp_us)


def _values(pdu: bytes, direction: int, h: Handles, writes: _LongWrites, bearer: QueueKey,
            report: BtsnoopReport) -> list[tuple[bytes, int]]:
    """(value, source offset) of each notification or write of our characteristics in pdu."""
    op = pdu[0]
    if direction == h.server_dir:
        if op not in _NOTIFIES:
            return []
        return [(value, 0) for handle, value in _notified(pdu) if handle == h.data and value]
    if not h.command:
        return []
    if op in _WRITES:
        ok = len(pdu) > 3 and _U16.unpack_from(pdu, 1)[0] == h.command
        return [(pdu[3:], TX_SOURCE_BASE)] if ok else []
    if op == ATT_PREPARE_WRITE_REQ:
        writes.prepare(bearer, pdu, only=h.command)
    elif op == ATT_EXECUTE_WRITE_REQ:
        written, queue = writes.execute(bearer, pdu)
        if h.command in queue:
            value = queue[h.command]
            if not written:
                report.long_writes_cancelled += 1
            elif value is None:
                report.long_writes_lost += 1
            else:
                report.long_writes += 1
                return [(bytes(value), TX_SOURCE_BASE)] if value else []
    return []


def _lost(prefix: bytes, direction: int, h: Handles, writes: _LongWrites, bearer: QueueKey,
          report: BtsnoopReport) -> list[int]:
    """The source offsets whose byte stream lost a value with this cut PDU (its logged start)."""
    op = prefix[0]
    if direction == h.server_dir:
        return [0] if op in _NOTIFIES and h.data in _handles_named(prefix) else []
    if not h.command:
        return []
    if op in _WRITES and h.command in _handles_named(prefix):
        return [TX_SOURCE_BASE]
    if op == ATT_PREPARE_WRITE_REQ and h.command in _handles_named(prefix):
        writes.spoil(bearer, h.command)
    elif op == ATT_EXECUTE_WRITE_REQ and h.command in writes.execute(bearer, b"")[1]:
        report.long_writes_lost += 1
    return []


def _handles_named(prefix: bytes) -> list[int]:
    """The attribute handles the logged start of an ATT PDU names (each tuple's, for 0x23)."""
    if prefix[0] != ATT_NOTIFY_MULTIPLE:
        return [_U16.unpack_from(prefix, 1)[0]] if len(prefix) >= 3 else []
    named, off = [], 1
    while off + 2 <= len(prefix):
        named.append(_U16.unpack_from(prefix, off)[0])
        if off + 4 > len(prefix):
            break
        off += 4 + _U16.unpack_from(prefix, off + 2)[0]
    return named


def _arrival(source: int, stamp_us: int) -> Arrival:
    if stamp_us >= EPOCH_UNIX_US:
        wall_ns = (stamp_us - EPOCH_UNIX_US) * 1000
        return Arrival(source, wall_ns, wall_ns, "radio")
    return Arrival(source, stamp_us * 1000 if stamp_us >= 0 else -1, -1, "radio")
