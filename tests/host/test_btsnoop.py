"""btsnoop HCI logs: hand-built records from the worked examples in
/work/shared/references.md (7a, 7b), cuts at every offset, random damage, and
a log written by a real BLE stack (bumble's snooper, on bumble's virtual
link) decoded to the same tables as our own capture of the same session."""

from __future__ import annotations

import asyncio
import csv
import random
import struct
import subprocess
import sys
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

import pytest
from bumble.core import UUID
from bumble.device import Device, Peer
from bumble.gatt import Characteristic, CharacteristicValue, Service
from bumble.gatt_client import CharacteristicProxy
from bumble.snoop import BtSnooper

from slipless.cli import decode_files
from slipless.errors import InputError
from slipless.io import btsnoop, capture
from slipless.io.btsnoop import BtsnoopReport, btsnoop_pieces
from slipless.io.pieces import TX_SOURCE_BASE
from slipless.protocol import wire
from slipless.sim.ble_board import virtual_pair
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import notifications

# ---- byte builders (layouts: references.md 7a/7b) ----------------------------

# H4 file header, the [computed] example in references.md 7a.
H4_HEADER = bytes.fromhex("62 74 73 6e 6f 6f 70 00 00 00 00 01 00 00 03 ea")
H1_HEADER = H4_HEADER[:12] + struct.pack(">I", 1001)  # datalink 1001 = H1 (references 7a [verified])
T0 = 0x00E2E7D727519090  # references 7b: 2023-11-14T22:13:20.25Z
SENT, RECEIVED, COMMAND, EVENT = 0, 1, 2, 3  # flags: bit 0 received, bit 1 command/event (7a [verified])


def record(pkt: bytes, flags: int, stamp_us: int = T0, drops: int = 0) -> bytes:
    return struct.pack(">IIIIq", len(pkt), len(pkt), flags, drops, stamp_us) + pkt


def acl(handle: int, pb: int, payload: bytes) -> bytes:
    """H4 ACL packet: indicator 0x02, handle | PB << 12, length (references 7b [verified])."""
    return b"\x02" + struct.pack("<HH", handle | pb << 12, len(payload)) + payload


def l2cap(payload: bytes, cid: int = 0x0004) -> bytes:
    return struct.pack("<HH", len(payload), cid) + payload  # CID 0x0004 = ATT (7b [verified])


def att(opcode: int, handle: int, value: bytes) -> bytes:
    return bytes([opcode]) + struct.pack("<H", handle) + value


def notify_rec(handle: int, value: bytes, conn: int = 0x0040, stamp_us: int = T0) -> bytes:
    return record(acl(conn, 0b10, l2cap(att(0x1B, handle, value))), RECEIVED, stamp_us)


def write_rec(handle: int, value: bytes, conn: int = 0x0040, opcode: int = 0x52) -> bytes:
    return record(acl(conn, 0b00, l2cap(att(opcode, handle, value))), SENT)


def event_rec(code: int, params: bytes) -> bytes:
    return record(bytes([0x04, code, len(params)]) + params, EVENT)  # H4 0x04 = event (7b [verified])


# HCI event layouts. Codes [verified: BlueZ lib/hci.h EVT_DISCONN_COMPLETE 0x05 with
# {status u8, handle u16, reason u8}, EVT_LE_META_EVENT 0x3E, EVT_LE_CONN_COMPLETE 0x01;
# EVT_LE_ENHANCED_CONN_COMPLETE 0x0A in a vendor HCI header]. Parameter layout after the
# subevent (status, handle, then 15 / 27 more octets) [from memory: Core Vol 4 Part E 7.7.65].
def le_connected(conn: int, subevent: int = 0x01) -> bytes:
    rest = 15 if subevent == 0x01 else 27
    return event_rec(0x3E, bytes([subevent, 0]) + struct.pack("<H", conn) + bytes(rest))


def disconnected(conn: int) -> bytes:
    return event_rec(0x05, b"\x00" + struct.pack("<H", conn) + b"\x13")


# Read By Type Response (opcode 0x09 [verified: BlueZ att-types.h]): length of each entry,
# then entries; a characteristic declaration is declaration handle, properties, value
# handle, UUID little-endian [from memory: Core Vol 3 Part F 3.4.4.2 and Part G 3.3.1].
def declaration_pdu(*chars: tuple[int, str, int]) -> bytes:
    return b"\x09\x15" + b"".join(struct.pack("<HBH", vh - 1, props, vh) + uuid.UUID(u).bytes[::-1]
                                   for vh, u, props in chars)


def declarations(*chars: tuple[int, str, int], conn: int = 0x0040) -> bytes:
    return record(acl(conn, 0b10, l2cap(declaration_pdu(*chars))), RECEIVED)


DISCOVERY = declarations((0x0010, wire.DATA_UUID, 0x10), (0x0012, wire.COMMAND_UUID, 0x0C))


def cut_record(pkt: bytes, flags: int, keep: int, stamp_us: int = T0) -> bytes:
    """A record the logger cut short: original length len(pkt), included length keep, only
    keep bytes logged (record layout: references 7a [verified])."""
    return struct.pack(">IIIIq", len(pkt), keep, flags, 0, stamp_us) + pkt[:keep]


# LE signalling channel 0x0005 (references 7b [verified]). A command: code u8, identifier
# u8, length u16 LE, data [verified: bumble l2cap.py L2CAP_Control_Frame.from_bytes "<BBH"].
def signal(code: int, ident: int, data: bytes) -> bytes:
    return l2cap(struct.pack("<BBH", code, ident, len(data)) + data, cid=0x0005)


# L2CAP_CREDIT_BASED_CONNECTION_REQ 0x17: SPSM, MTU, MPS, initial credits, source CIDs (u16
# LE each); L2CAP_CREDIT_BASED_CONNECTION_RSP 0x18: MTU, MPS, initial credits, result,
# destination CIDs [verified: bumble l2cap.py L2CAP_Credit_Based_Connection_Request and
# _Response field order, docstrings citing Core Vol 3 Part A 4.25 / 4.26]. EATT PSM 0x0027
# [verified: bumble att.py EATT_PSM]; results 0x000D-0x000F "pending" [verified: bumble's
# Result enum, ALL_CONNECTIONS_PENDING_*]; 0x0000 for a refused CID [from memory: Part A 4.26].
def credit_req(ident: int, cids: list[int], spsm: int = 0x0027, mtu: int = 247,
               mps: int = 64) -> bytes:
    return signal(0x17, ident, struct.pack("<HHHH", spsm, mtu, mps, 10)
                  + b"".join(struct.pack("<H", c) for c in cids))


def credit_rsp(ident: int, cids: list[int], result: int = 0, mtu: int = 247, mps: int = 64) -> bytes:
    return signal(0x18, ident, struct.pack("<HHHH", mtu, mps, 10, result)
                  + b"".join(struct.pack("<H", c) for c in cids))


# L2CAP_DISCONNECTION_RSP 0x07: destination CID, source CID [verified: bumble l2cap.py
# L2CAP_Disconnection_Response, citing Core Vol 3 Part A 4.7].
def disconnection_rsp(ident: int, dcid: int, scid: int) -> bytes:
    return signal(0x07, ident, struct.pack("<HH", dcid, scid))


def kframes(sdu: bytes, cid: int, mps: int = 64) -> list[bytes]:
    """An SDU as K-frames (L2CAP PDUs) of at most mps payload bytes, the first led by the SDU
    length u16 [verified: bumble l2cap.py LeCreditBasedChannel.process_output packs
    '<H' len + payload and sends peer_mps slices; Core Vol 3 Part A 3.4, from memory]."""
    body = struct.pack("<H", len(sdu)) + sdu
    return [l2cap(body[i : i + mps], cid=cid) for i in range(0, len(body), mps)]


# ATT_MULTIPLE_HANDLE_VALUE_NTF 0x23: (handle u16, length u16, value) repeated [verified:
# Zephyr subsys/bluetooth/host/att_internal.h BT_ATT_OP_NOTIFY_MULT 0x23, struct
# bt_att_notify_mult {handle, len, value[]}; Core Vol 3 Part F 3.4.7.4, from memory].
def multi_notify(*values: tuple[int, bytes]) -> bytes:
    return b"\x23" + b"".join(struct.pack("<HH", h, len(v)) + v for h, v in values)


# ATT_PREPARE_WRITE_REQ 0x16: handle, value offset (u16 LE each), part value;
# ATT_EXECUTE_WRITE_REQ 0x18: flags u8, 0x01 write, 0x00 cancel [verified: bumble att.py
# ATT_Prepare_Write_Request / ATT_Execute_Write_Request, citing Core Vol 3 Part F 3.4.6.1 /
# 3.4.6.3; gatt_client.write_long_value sends flags 0x00 to cancel, 0x01 to commit].
def prepare(handle: int, offset: int, part: bytes) -> bytes:
    return b"\x16" + struct.pack("<HH", handle, offset) + part


def execute(flags: int = 0x01) -> bytes:
    return bytes([0x18, flags])


def sent(payload: bytes, conn: int = 0x0040) -> bytes:
    """A complete L2CAP PDU the logging host sent (PB 0b00, flags 0: references 7b)."""
    return record(acl(conn, 0b00, payload), SENT)


def received(payload: bytes, conn: int = 0x0040) -> bytes:
    """A complete L2CAP PDU the logging host received (PB 0b10, flags 1: references 7b)."""
    return record(acl(conn, 0b10, payload), RECEIVED)


def write_log(path: Path, *records: bytes, header: bytes = H4_HEADER) -> Path:
    path.write_bytes(header + b"".join(records))
    return path


def read(path: Path, **kw: object) -> tuple[list[tuple[bytes | None, btsnoop.Arrival]], BtsnoopReport]:
    report = BtsnoopReport()
    return list(btsnoop_pieces(path, report=report, **kw)), report  # type: ignore[arg-type]


def rx_values(pieces: list) -> list[bytes]:
    return [p for p, a in pieces if p is not None and a.source < TX_SOURCE_BASE]


# ---- worked examples -----------------------------------------------------------

# references.md 7b, worked record [computed there from the 7a/7b layouts]: a received
# notification, connection 0x0040, PB 0b10, ATT handle 0x0010, value 01 02 03, at Unix time
# 1700000000.25 s; and a sent Write Command to handle 0x0012, value AA, PB 0b00, flags 0.
WORKED_NOTIFY = bytes.fromhex(
    "00 00 00 0f 00 00 00 0f 00 00 00 01 00 00 00 00 00 e2 e7 d7 27 51 90 90"
    "02 40 20 0a 00 06 00 04 00 1b 10 00 01 02 03")
WORKED_WRITE_PKT = bytes.fromhex("02 40 00 08 00 04 00 04 00 52 12 00 aa")


def test_worked_record_decodes(tmp_path: Path) -> None:
    log = write_log(tmp_path / "w.log", WORKED_NOTIFY, record(WORKED_WRITE_PKT, SENT))
    pieces, report = read(log, handles=(0x0010, 0x0012))
    (value, rx), (cmd, tx) = pieces
    assert value == b"\x01\x02\x03" and rx.source == 0 and rx.origin == "radio"
    # 63868256000250000 us since year 0 = 1700000000.25 s Unix (references 7b)
    assert rx.wall_ns == rx.mono_ns == 1_700_000_000_250_000_000
    assert cmd == b"\xaa" and tx.source == TX_SOURCE_BASE
    assert report.records == 2 and report.handles_from == "given"


def test_worked_record_as_h1(tmp_path: Path) -> None:
    # H1 (1001) carries no indicator byte; flags bit 1 = 0 says data (references 7a [verified]).
    log = write_log(tmp_path / "h1.log", record(WORKED_NOTIFY[25:], RECEIVED),
                    record(WORKED_WRITE_PKT[1:], SENT), header=H1_HEADER)
    pieces, _ = read(log, handles=(0x0010, 0x0012))
    assert [p for p, _ in pieces] == [b"\x01\x02\x03", b"\xaa"]


def test_epoch_constants(tmp_path: Path) -> None:
    # 0x00E03AB44A676000 is 2000-01-01 (Frontline manual [verified]) = 946684800 s Unix
    # (references 7a, consistency check [computed]); a stamp before 1970 is a relative
    # clock: no wall time, the count kept as the monotonic time.
    log = write_log(tmp_path / "e.log", notify_rec(0x10, b"a", stamp_us=0x00E03AB44A676000),
                    notify_rec(0x10, b"b", stamp_us=5_000_000))
    (_, a), (_, b) = read(log, handles=(0x10, 0))[0]
    assert a.wall_ns == 946_684_800 * 10**9
    assert (b.wall_ns, b.mono_ns) == (-1, 5_000_000_000)


# ---- discovery, connections, reassembly ----------------------------------------

def test_discovered_handles_and_connection_events(tmp_path: Path) -> None:
    log = write_log(
        tmp_path / "d.log",
        le_connected(0x0040), DISCOVERY,
        notify_rec(0x0010, b"one"), notify_rec(0x0011, b"not ours"),
        write_rec(0x0012, b"cmd"), write_rec(0x0012, b"req", opcode=0x12),  # 0x52, 0x12 (7b)
        write_rec(0x0010, b"wrong handle"),
        le_connected(0x0041, subevent=0x0A), notify_rec(0x0010, b"two", conn=0x0041),
        disconnected(0x0040), notify_rec(0x0010, b"three", conn=0x0041))
    pieces, report = read(log)
    assert [(p, a.source) for p, a in pieces] == [
        (None, 0), (b"one", 0), (b"cmd", TX_SOURCE_BASE), (b"req", TX_SOURCE_BASE),
        (None, 1), (b"two", 1), (None, 0), (b"three", 1)]
    assert report.handles == (0x0010, 0x0012) and report.handles_from == "discovered"


def test_each_connection_uses_its_own_discovery(tmp_path: Path) -> None:
    other = declarations((0x0030, wire.DATA_UUID, 0x10), conn=0x0041)
    log = write_log(tmp_path / "o.log", DISCOVERY, other, notify_rec(0x0010, b"a"),
                    notify_rec(0x0030, b"b", conn=0x0041), notify_rec(0x0010, b"x", conn=0x0041))
    assert rx_values(read(log)[0]) == [b"a", b"b"]


def test_fragmented_pdus_are_reassembled(tmp_path: Path) -> None:
    # PB 0b10 first / 0b01 continuing (references 7b [verified]); CID 0x0005 is LE
    # signalling, not ATT (7b [verified]).
    pdu = l2cap(att(0x1B, 0x0010, bytes(range(1, 60))))
    log = write_log(
        tmp_path / "f.log", DISCOVERY,
        record(acl(0x0040, 0b10, pdu[:27]), RECEIVED),
        record(acl(0x0041, 0b10, l2cap(att(0x1B, 0x0010, b"other link"))), RECEIVED),
        record(acl(0x0040, 0b01, pdu[27:40]), RECEIVED),
        record(acl(0x0040, 0b01, pdu[40:]), RECEIVED),
        record(acl(0x0040, 0b01, b"orphan"), RECEIVED),  # continuation with no start
        record(acl(0x0040, 0b10, pdu[:27]), RECEIVED),  # a start that never finishes ...
        notify_rec(0x0010, b"after"),  # ... is dropped when the next one starts
        record(acl(0x0040, 0b10, l2cap(b"\x1b\x10\x00" + bytes(600))), RECEIVED),  # over the cap
        record(acl(0x0040, 0b10, l2cap(b"\x1b\x10\x00zz", cid=0x0005)), RECEIVED),  # not ATT
        notify_rec(0x0010, b"last"))
    pieces, report = read(log)
    # a PDU counts where its last fragment is: the other link's notification comes first
    assert rx_values(pieces) == [b"other link", bytes(range(1, 60)), b"after", b"last"]
    assert report.broken_pdus == 2 and report.oversize_pdus == 1
    assert "3 L2CAP PDUs dropped" in report.note("f.log")


def test_fragmented_write_is_reassembled(tmp_path: Path) -> None:
    pdu = l2cap(att(0x52, 0x0012, b"a command longer than one fragment"))
    log = write_log(tmp_path / "w.log", DISCOVERY, record(acl(0x0040, 0b00, pdu[:27]), SENT),
                    record(acl(0x0040, 0b01, pdu[27:]), SENT))
    assert [p for p, _ in read(log)[0]] == [b"a command longer than one fragment"]


def sim_notes(seconds: float, payload: int = 244) -> list[bytes]:
    frames = [f for _, f in simulate(SimConfig(seconds=seconds))]
    return list(notifications(frames, payload))


def test_guess_without_discovery(tmp_path: Path) -> None:
    notes = sim_notes(1, payload=100)
    enc = wire.Encoder(0xFFFF, 0)
    recs = [notify_rec(0x0021, n) for n in notes]
    recs.insert(3, notify_rec(0x0030, b"battery level, not frames"))
    recs.insert(5, write_rec(0x0024, enc.frame(enc.command(wire.CMD_STATUS, 1))))
    pieces, report = read(write_log(tmp_path / "g.log", *recs))
    assert rx_values(pieces) == notes
    assert sum(a.source == TX_SOURCE_BASE for _, a in pieces) == 1
    assert report.handles == (0x0021, 0x0024) and report.handles_from == "guessed"
    assert "no GATT discovery in the log" in report.note("g.log")


def test_progress_adds_up_to_the_file_size(tmp_path: Path) -> None:
    log = write_log(tmp_path / "p.log", DISCOVERY, *[notify_rec(0x10, bytes(200))] * 10)
    seen: list[int] = []
    list(btsnoop_pieces(log, seen.append))
    assert sum(seen) == log.stat().st_size


# ---- cuts and damage -----------------------------------------------------------

@dataclass
class SmallLog:
    data: bytes
    values: list[bytes] = field(default_factory=list)
    ends: list[int] = field(default_factory=list)  # file offset just past each notification record
    starts: list[int] = field(default_factory=list)


def small_log() -> SmallLog:
    rng = random.Random(7)
    log = SmallLog(H4_HEADER + le_connected(0x0040) + DISCOVERY)
    for i in range(8):
        value = rng.randbytes(12 + 9 * i)
        log.starts.append(len(log.data))
        log.data += notify_rec(0x0010, value, stamp_us=T0 + i)
        log.values.append(value)
        log.ends.append(len(log.data))
        if i == 4:
            log.data += write_rec(0x0012, b"cmd")
    log.data += disconnected(0x0040)
    return log


def one_line_error(path: Path) -> str:
    with pytest.raises(InputError) as exc:
        list(btsnoop_pieces(path))
    assert "\n" not in str(exc.value)
    return str(exc.value)


def test_cut_at_every_offset(tmp_path: Path) -> None:
    log = small_log()
    path = tmp_path / "cut.log"
    usable = len(H4_HEADER) + len(le_connected(0x0040)) + len(DISCOVERY)
    for cut in range(len(log.data)):
        path.write_bytes(log.data[:cut])
        if cut < usable:  # header, or no discovery and nothing carrying frames yet
            one_line_error(path)
            continue
        pieces, report = read(path)
        assert rx_values(pieces) == [v for v, e in zip(log.values, log.ends) if e <= cut], cut
        assert report.damaged_bytes == 0, cut


def damaged(data: bytes, at: int, junk: bytes) -> bytes:
    return data[:at] + junk + data[at + len(junk):]


@pytest.mark.parametrize("where,junk", [
    (4, b"\xff\xff\xff\xff"),  # included length impossible
    (3, b"\x30"),  # original length disagrees with the packet
    (7, b"\x40"),  # included length too long but plausible: swallows the next header
    (24 + 3, b"\x7f"),  # ACL length inside the packet disagrees
    (8, b"\x00\x00\x01\x00"),  # flags with bits no logger sets
])
def test_damage_loses_only_the_damaged_record(tmp_path: Path, where: int, junk: bytes) -> None:
    log = small_log()
    k = 3
    path = tmp_path / "d.log"
    path.write_bytes(damaged(log.data, log.starts[k] + where, junk))
    pieces, report = read(path)
    assert rx_values(pieces) == log.values[:k] + log.values[k + 1:]
    assert report.damaged_stretches == 1 and report.damaged_bytes > 0


def test_garbage_between_records_is_stepped_over(tmp_path: Path) -> None:
    log = small_log()
    at = log.starts[5]
    rng = random.Random(1)
    for junk in (rng.randbytes(37), bytes(1 << 20), b"\x00\x00\x00\x10" * 300):
        path = tmp_path / "g.log"
        path.write_bytes(log.data[:at] + junk + log.data[at:] + bytes(5000))  # and a zeroed tail
        pieces, report = read(path)
        assert rx_values(pieces) == log.values
        assert report.damaged_bytes == len(junk) + 5000 and report.damaged_stretches == 2


def test_random_corruption_never_raises_nor_invents(tmp_path: Path) -> None:
    log = small_log()
    path = tmp_path / "r.log"
    rng = random.Random(5)
    for _ in range(400):
        data = bytearray(log.data)
        for _ in range(rng.randint(1, 12)):
            data[rng.randrange(16, len(data))] = rng.randrange(256)
        path.write_bytes(bytes(data))
        try:
            pieces, _ = read(path)
        except InputError as exc:  # discovery hit: nothing left to go by
            assert "\n" not in str(exc)
            continue
        for value in [p for p, _ in pieces if p is not None]:
            assert value in data  # every notification here is one record: its bytes are in the file


@pytest.mark.parametrize("data,expect", [
    (b"snoop\x00\x00\x00" + bytes(8), "not a btsnoop file (bad magic)"),
    (H4_HEADER[:10], "btsnoop header cut short (10 of 16 bytes)"),
    (H4_HEADER[:8] + struct.pack(">II", 2, 1002), "btsnoop version 2 not supported (1 is)"),
    (H4_HEADER[:12] + struct.pack(">I", 2001),
     "btsnoop datalink 2001 not supported (H1 1001 and H4 1002 are)"),
    (H4_HEADER, "no readable btsnoop records"),
    (H4_HEADER + random.Random(3).randbytes(5000), "no readable btsnoop records"),
])
def test_unusable_file_is_one_line(tmp_path: Path, data: bytes, expect: str) -> None:
    path = tmp_path / "x.log"
    path.write_bytes(data)
    assert one_line_error(path) == f"{path}: {expect}"


def test_cli_bad_datalink_is_one_line(tmp_path: Path) -> None:
    path = tmp_path / "x.log"
    path.write_bytes(H4_HEADER[:12] + struct.pack(">I", 2001) + WORKED_NOTIFY)
    r = subprocess.run([sys.executable, "-m", "slipless", "decode", str(path), "--out",
                        str(tmp_path / "o")], capture_output=True, text=True, timeout=60)
    assert r.returncode == 2 and r.stderr.splitlines() == [
        f"slipless: error: {path}: btsnoop datalink 2001 not supported (H1 1001 and H4 1002 are)"]


# ---- a real BLE stack: bumble's snooper on bumble's virtual link ---------------
#
# Two bumble Devices on virtual controllers joined by a LocalLink (no radio). The
# peripheral plays the board: our GATT service, notifications carrying frames from the
# simulated board. The central plays the laptop: connects, exchanges MTU 247, discovers,
# subscribes, writes a command, and records twice: bumble's btsnoop snooper on its HCI
# traffic, and our capture writer from its notification callback. It then disconnects
# and connects again using the handles it cached (no characteristic discovery), as
# phones do, so the second connection tests the choice from a link's own traffic.

MTU = 247


@dataclass
class Session:
    log: Path
    capture: Path
    received: list[bytes]  # what the central's callback got, in order
    received_wall_ns: list[int]
    commands: list[bytes]  # what the board's command characteristic got


_devices = virtual_pair


def _board_service(board: Device, commands: list[bytes]) -> Characteristic:
    data = Characteristic(wire.DATA_UUID, Characteristic.Properties.NOTIFY,
                          Characteristic.READABLE, b"")
    cmd = Characteristic(wire.COMMAND_UUID, Characteristic.Properties.WRITE
                         | Characteristic.Properties.WRITE_WITHOUT_RESPONSE, Characteristic.WRITEABLE,
                         CharacteristicValue(write=lambda _conn, v: commands.append(bytes(v))))
    board.add_service(Service(wire.SERVICE_UUID, [data, cmd]))
    return data


async def _session(tmp: Path) -> Session:
    central, board = _devices()
    s = Session(tmp / "session.log", tmp / "session.slcap", [], [], [])
    data = _board_service(board, s.commands)
    frames = [f for _, f in simulate(SimConfig(seconds=4, status_every_s=1.0,
                                               descriptor_every_s=1.5))]
    notes = list(notifications(frames, MTU - 3))
    writer = capture.CaptureWriter(s.capture, {"backend": "bumble", "sources": [{}]})
    enc = wire.Encoder(0xFFFF, 0)
    with s.log.open("wb") as snoop:
        central.host.snooper = BtSnooper(snoop)
        await central.power_on()
        await board.power_on()
        cached: tuple[int, int, int, int] | None = None
        for i, part in enumerate((notes[: len(notes) // 2], notes[len(notes) // 2 :])):
            await board.start_advertising()
            conn = await central.connect(board.random_address)
            writer.event(0, "connected")
            peer = Peer(conn)
            assert await peer.request_mtu(MTU) == MTU
            if cached is None:
                cached = await _discover(peer)
            proxy: CharacteristicProxy[bytes] = CharacteristicProxy(
                peer.gatt_client, cached[0], cached[1], UUID(wire.DATA_UUID), cached[2])
            done = asyncio.Event()

            def on_note(value: bytes, part: list[bytes] = part, done: asyncio.Event = done) -> None:
                writer.write(capture.RX, 0, bytes(value))
                s.received.append(bytes(value))
                s.received_wall_ns.append(time.time_ns())
                if len(s.received) in (len(notes) // 2, len(notes)):
                    done.set()

            await peer.subscribe(proxy, on_note)
            # long enough to need two ACL fragments at bumble's 27-byte controller buffers
            cmd = enc.frame(enc.start(i + 1, 0, f"bumble session {i}"))
            writer.write(capture.TX, 0, cmd)
            await peer.write_value(cached[3], cmd, with_response=bool(i))  # 0x52, then 0x12
            for n in part:
                await board.notify_subscribers(data, n)
            await asyncio.wait_for(done.wait(), 10)
            await conn.disconnect()
            writer.event(0, "disconnected")
        central.host.snooper = None
    writer.close()
    assert s.received == notes and len(s.commands) == 2
    return s


async def _discover(peer: Peer) -> tuple[int, int, int, int]:
    await peer.discover_services([UUID(wire.SERVICE_UUID)])
    for service in peer.services:
        await peer.discover_characteristics(service=service)
    [dp] = peer.get_characteristics_by_uuid(UUID(wire.DATA_UUID))
    [cp] = peer.get_characteristics_by_uuid(UUID(wire.COMMAND_UUID))
    return dp.handle, dp.end_group_handle, int(dp.properties), cp.handle


@pytest.fixture(scope="module")
def session(tmp_path_factory: pytest.TempPathFactory) -> Session:
    return asyncio.run(_session(tmp_path_factory.mktemp("bumble")))


def table(path: Path, drop: tuple[str, ...] = ()) -> list[tuple[str, ...]]:
    with path.open(newline="") as f:
        rows = list(csv.DictReader(f))
    return sorted(tuple(v for k, v in r.items() if k not in drop) for r in rows)


def test_real_stack_log_reads_as_received(session: Session) -> None:
    pieces, report = read(session.log)
    assert report.handles_from == "discovered" and report.damaged_bytes == 0
    assert rx_values(pieces) == session.received
    assert [p for p, a in pieces if a.source == TX_SOURCE_BASE] == session.commands
    assert [p for p, _ in pieces].count(None) == 4  # two connections, each opened and closed
    # bumble stamps with the 2000-01-01 constant, we read with the 1970 one (references 7a):
    # the two agree, so each notification's log time is within a second of the callback's.
    walls = [a.wall_ns for p, a in pieces if p is not None and a.source < TX_SOURCE_BASE]
    assert max(abs(a - b) for a, b in zip(walls, session.received_wall_ns)) < 10**9


def test_real_stack_second_connection_did_not_discover(session: Session) -> None:
    with btsnoop._open_log(session.log) as log:
        units = list(btsnoop._att_units(log, BtsnoopReport(), None))
    second = [i for i, u in enumerate(units) if u[3] is None][2]  # the second connection's start
    assert any(u[3][0] == 0x09 for u in units[:second] if u[3] is not None)
    assert not any(u[3][0] == 0x09 for u in units[second:] if u[3] is not None)
    # so its handles come from its own traffic: the same as the first link discovered
    report = read(session.log)[1]
    first, again = report.links
    assert (first.how, again.how) == ("discovered", "traffic") and again.link == 2
    assert (again.data, again.command) == (first.data, first.command)
    assert f"(link 2): no discovery of its own: notifications on 0x{first.data:04X}" in (
        report.note("session.log"))


def test_real_stack_log_decodes_like_our_capture(session: Session, tmp_path: Path) -> None:
    a = decode_files([session.log], tmp_path / "snoop", "csv", None)
    b = decode_files([session.capture], tmp_path / "cap", "csv", None)
    for name in ("samples", "events", "status"):
        rows = table(tmp_path / "snoop" / f"{name}.csv")
        assert rows == table(tmp_path / "cap" / f"{name}.csv") and rows, name
    fates = table(tmp_path / "snoop" / "frames.csv", drop=("rx_wall_ns", "rx_wall_utc"))
    assert fates == table(tmp_path / "cap" / "frames.csv", drop=("rx_wall_ns", "rx_wall_utc"))
    assert {r[4] for r in fates} == {"received"}
    assert a.counters.commands == b.counters.commands == 2


def test_cli_decodes_a_real_stack_log(session: Session, tmp_path: Path) -> None:
    r = subprocess.run([sys.executable, "-m", "slipless", "decode", str(session.log), "--out",
                        str(tmp_path / "t")], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    for name in ("samples", "events", "status", "frames", "runs"):
        assert len((tmp_path / "t" / f"{name}.csv").read_text().splitlines()) > 1, name
