"""btsnoop records the logger cut short (included length below the original,
as a filtering logger writes them): counted and said, their PDUs never read,
the byte stream not glued across them; hand-built byte-exact logs (layouts
beside the builders in test_btsnoop.py) and a real stack's log cut by us the
way such a filter would."""

from __future__ import annotations

import asyncio
import struct
from pathlib import Path

import pytest
from test_btsnoop import (
    DISCOVERY,
    H4_HEADER,
    RECEIVED,
    SENT,
    Session,
    _session,
    acl,
    att,
    credit_req,
    credit_rsp,
    cut_record,
    execute,
    kframes,
    l2cap,
    notify_rec,
    prepare,
    read,
    received,
    record,
    rx_values,
    sent,
    write_log,
)

from slipless.cli import decode_files
from slipless.io.pieces import TX_SOURCE_BASE

DATA, COMMAND = 0x0010, 0x0012


def notify_pkt(value: bytes, handle: int = DATA) -> bytes:
    return acl(0x0040, 0b10, l2cap(att(0x1B, handle, value)))  # H4 ACL (references 7b)


def test_a_cut_notification_is_counted_not_read(tmp_path: Path) -> None:
    pkt = notify_pkt(bytes(range(100)))
    log = write_log(tmp_path / "c.log", DISCOVERY, notify_rec(DATA, b"before"),
                    cut_record(pkt, RECEIVED, 40), notify_rec(DATA, b"after"))
    pieces, report = read(log)
    # the stream restarts where the cut value was: bytes on either side are not glued
    assert [(p, a.source) for p, a in pieces] == [(b"before", 0), (None, 0), (b"after", 0)]
    assert (report.cut_records, report.cut_bytes, report.cut_pdus) == (1, len(pkt) - 40, 1)
    assert report.damaged_bytes == report.broken_pdus == 0
    assert report.note("c.log") == (f"c.log: the logger cut 1 record(s) short ({len(pkt) - 40} "
                                    "bytes not logged, 1 ATT or signalling PDU(s) lost)")


def test_cut_fragments_lose_their_pdu_only(tmp_path: Path) -> None:
    pdu = l2cap(att(0x1B, DATA, bytes(range(1, 80))))
    start, middle, end = (acl(0x0040, 0b10, pdu[:30]), acl(0x0040, 0b01, pdu[30:60]),
                          acl(0x0040, 0b01, pdu[60:]))
    log = write_log(
        tmp_path / "f.log", DISCOVERY,
        cut_record(start, RECEIVED, 12), record(middle, RECEIVED), record(end, RECEIVED),
        notify_rec(DATA, b"one"),
        record(start, RECEIVED), cut_record(middle, RECEIVED, 9), record(end, RECEIVED),
        notify_rec(DATA, b"two"),
        cut_record(start, RECEIVED, 7), record(middle, RECEIVED), record(end, RECEIVED),  # 2 of
        notify_rec(DATA, b"three"))  # the L2CAP header logged: its channel is not known
    pieces, report = read(log)
    assert rx_values(pieces) == [b"one", b"two", b"three"]
    assert (report.cut_records, report.cut_pdus, report.broken_pdus) == (3, 2, 0)
    assert [p for p, _ in pieces].count(None) == 2  # the third: not known to be ours


def test_cut_values_not_ours_leave_the_stream_alone(tmp_path: Path) -> None:
    log = write_log(tmp_path / "o.log", DISCOVERY, notify_rec(DATA, b"a"),
                    cut_record(notify_pkt(bytes(50), handle=0x0030), RECEIVED, 30),
                    cut_record(notify_pkt(bytes(50)), RECEIVED, 11),  # handle not logged
                    notify_rec(DATA, b"b"))
    pieces, report = read(log)
    assert [p for p, _ in pieces] == [b"a", b"b"] and report.cut_pdus == 2


def test_cut_write_and_cut_prepare(tmp_path: Path) -> None:
    write = acl(0x0040, 0b00, l2cap(att(0x52, COMMAND, bytes(40))))
    part = acl(0x0040, 0b00, l2cap(prepare(COMMAND, 18, bytes(18))))
    log = write_log(tmp_path / "w.log", DISCOVERY, cut_record(write, SENT, 20),
                    sent(l2cap(prepare(COMMAND, 0, bytes(18)))), cut_record(part, SENT, 15),
                    sent(l2cap(execute())), sent(l2cap(att(0x52, COMMAND, b"ok"))))
    pieces, report = read(log)
    assert [(p, a.source) for p, a in pieces] == [(None, TX_SOURCE_BASE), (b"ok", TX_SOURCE_BASE)]
    assert report.long_writes_lost == 1 and report.long_writes == 0


def test_cut_k_frames_step_over_their_sdu(tmp_path: Path) -> None:
    # an SDU of four K-frames; the first one cut: its SDU length still says how much follows
    lost = [acl(0x0040, 0b10, k) for k in kframes(att(0x1B, DATA, bytes(200)), 0x0040)]
    log = write_log(
        tmp_path / "k.log", DISCOVERY, sent(credit_req(1, [0x0040])), received(credit_rsp(1, [0x0041])),
        cut_record(lost[0], RECEIVED, 20), *[record(k, RECEIVED) for k in lost[1:]],
        *[received(k) for k in kframes(att(0x1B, DATA, b"next"), 0x0040)],
        *[record(k, RECEIVED) for k in lost[:2]], cut_record(lost[2], RECEIVED, 10),
        record(lost[3], RECEIVED), *[received(k) for k in kframes(att(0x1B, DATA, b"last"), 0x0040)])
    pieces, report = read(log)
    assert [p for p, _ in pieces] == [None, b"next", None, b"last"]
    assert (report.cut_pdus, report.broken_pdus, report.oversize_pdus) == (2, 0, 0)


def test_a_cut_length_field_followed_by_damage_is_damage(tmp_path: Path) -> None:
    # a corrupted included length that reads as "cut" but leaves no record where it ends
    good = notify_rec(DATA, bytes(30))
    bad = good[:4] + struct.pack(">I", len(good) - 24 - 10) + good[8:]
    log = write_log(tmp_path / "d.log", DISCOVERY, notify_rec(DATA, b"a"), bad, notify_rec(DATA, b"b"))
    pieces, report = read(log)
    assert rx_values(pieces) == [b"a", b"b"]
    assert report.cut_records == 0 and report.damaged_stretches == 1


def test_a_log_header_then_only_cut_records(tmp_path: Path) -> None:
    log = write_log(tmp_path / "x.log", DISCOVERY, cut_record(notify_pkt(bytes(60)), RECEIVED, 8))
    pieces, report = read(log)
    assert pieces == [] and report.cut_records == 1 and log.read_bytes().startswith(H4_HEADER)


# ---- a real stack's log, cut as a filtering logger cuts ------------------------

def records(data: bytes) -> list[tuple[int, int]]:
    """(offset, size) of each record of a btsnoop file (references 7a: 16-byte file header,
    24-byte record header with the included length at offset 4)."""
    out, pos = [], 16
    while pos < len(data):
        size = 24 + struct.unpack_from(">I", data, pos + 4)[0]
        out.append((pos, size))
        pos += size
    return out


def cut(data: bytes, at: int, size: int, keep: int) -> bytes:
    head = data[at : at + 4] + struct.pack(">I", keep) + data[at + 8 : at + 24]
    return data[:at] + head + data[at + 24 : at + 24 + keep] + data[at + size :]


@pytest.fixture(scope="module")
def session(tmp_path_factory: pytest.TempPathFactory) -> Session:
    return asyncio.run(_session(tmp_path_factory.mktemp("bumble")))


def test_real_log_with_a_notification_cut(session: Session, tmp_path: Path) -> None:
    data = session.log.read_bytes()
    notes = [(at, size) for at, size in records(data)
             if data[at + 24] == 0x02 and data[at + 24 + 9] == 0x1B]  # H4 ACL, ATT 0x1B
    at, size = notes[10]
    cut_log = tmp_path / "cut.log"
    cut_log.write_bytes(cut(data, at, size, 40))
    pieces, report = read(cut_log)
    lost = session.received[10]
    assert rx_values(pieces) == session.received[:10] + session.received[11:]
    assert report.cut_records == 1 and report.cut_bytes == size - 24 - 40
    assert report.damaged_bytes == 0
    whole = decode_files([session.log], tmp_path / "whole", "csv", None)
    dec = decode_files([cut_log], tmp_path / "cut", "csv", None)
    assert dec.counters.corrupt == 0  # the lost value's frames are missing, not damaged
    assert whole.counters.frames - dec.counters.frames == lost.count(b"\x00")
    assert any("the logger cut 1 record(s) short" in n for n in dec.notes)
