"""btsnoop logs with Enhanced ATT: channels opened on the LE signalling
channel, K-frames put together into ATT PDUs, Multiple Handle Value
Notifications; hand-built byte-exact logs (each layout's source beside its
builder in test_btsnoop.py) and a log a real stack wrote: bumble's EATT
client and server on bumble's virtual link, its snooper recording."""

from __future__ import annotations

import asyncio
import random
from dataclasses import dataclass
from pathlib import Path

import pytest
from bumble import gatt_client, l2cap
from bumble.core import UUID
from bumble.snoop import BtSnooper
from test_btsnoop import (
    DISCOVERY,
    H4_HEADER,
    RECEIVED,
    _board_service,
    acl,
    att,
    credit_req,
    credit_rsp,
    cut_record,
    declaration_pdu,
    disconnected,
    disconnection_rsp,
    execute,
    kframes,
    le_connected,
    multi_notify,
    prepare,
    read,
    received,
    record,
    rx_values,
    sent,
    sim_notes,
    write_log,
)
from test_btsnoop import (
    l2cap as l2cap_pdu,
)

from slipless.errors import InputError
from slipless.io import btsnoop
from slipless.io.btsnoop import BtsnoopReport
from slipless.io.pieces import TX_SOURCE_BASE
from slipless.protocol import wire
from slipless.sim.ble_board import virtual_pair
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import notifications

LAPTOP_CID, BOARD_CID = 0x0040, 0x0041  # the requester's and the responder's CIDs
DATA, COMMAND = 0x0010, 0x0012
OPEN = [sent(credit_req(1, [LAPTOP_CID])), received(credit_rsp(1, [BOARD_CID]))]


def from_board(pdu: bytes, mps: int = 64) -> list[bytes]:
    """The board's ATT PDU on the channel: a header names its receiver, the laptop's CID."""
    return [received(k) for k in kframes(pdu, LAPTOP_CID, mps)]


def from_laptop(pdu: bytes) -> list[bytes]:
    return [sent(k) for k in kframes(pdu, BOARD_CID)]


def test_notifications_and_writes_on_an_eatt_channel(tmp_path: Path) -> None:
    long = bytes(range(200))  # four K-frames at MPS 64
    log = write_log(
        tmp_path / "e.log", le_connected(0x0040), *OPEN,
        *from_board(declaration_pdu((DATA, wire.DATA_UUID, 0x10), (COMMAND, wire.COMMAND_UUID, 0x0C))),
        *from_board(att(0x1B, DATA, b"one")), *from_board(att(0x1B, DATA, long)),
        received(l2cap_pdu(att(0x1B, DATA, b"fixed channel too"))),
        *from_laptop(att(0x52, COMMAND, b"cmd")),
        *from_board(att(0x1B, DATA + 1, b"not ours")))
    pieces, report = read(log)
    assert rx_values(pieces) == [b"one", long, b"fixed channel too"]
    assert [p for p, a in pieces if a.source == TX_SOURCE_BASE] == [b"cmd"]
    assert report.eatt_channels == 1 and report.handles_from == "discovered"
    assert report.broken_pdus == report.oversize_pdus == 0


def test_channel_opened_by_the_board_and_refused_cids(tmp_path: Path) -> None:
    # the board asks (received) with CIDs 0x0050, 0x0051; the laptop answers 0x0060 and
    # refuses the second (0x0000). To the laptop: CID 0x0060; to the board: 0x0050.
    log = write_log(
        tmp_path / "b.log", DISCOVERY,
        received(credit_req(7, [0x0050, 0x0051])), sent(credit_rsp(7, [0x0060, 0x0000])),
        *[received(k) for k in kframes(att(0x1B, DATA, b"from board"), 0x0060)],
        *[sent(k) for k in kframes(att(0x52, COMMAND, b"to board"), 0x0050)],
        *[sent(k) for k in kframes(att(0x52, COMMAND, b"wrong way"), 0x0060)],
        *[received(k) for k in kframes(att(0x1B, DATA, b"refused"), 0x0051)])
    pieces, report = read(log)
    assert [p for p, _ in pieces] == [b"from board", b"to board"] and report.eatt_channels == 1


def test_k_frames_cut_into_acl_fragments(tmp_path: Path) -> None:
    # each K-frame in 27-byte ACL fragments (PB 0b10 then 0b01: references 7b), interleaved
    # with notifications on the fixed channel of another connection
    value = bytes(range(150))
    frags = []
    for k in kframes(att(0x1B, DATA, value), LAPTOP_CID):
        frags += [record(acl(0x0040, 0b10 if i == 0 else 0b01, k[i : i + 27]), RECEIVED)
                  for i in range(0, len(k), 27)]
    other = received(l2cap_pdu(att(0x1B, DATA, b"other link")), conn=0x0041)
    log = write_log(tmp_path / "f.log", DISCOVERY, *OPEN, *frags[:3], other, *frags[3:])
    assert rx_values(read(log)[0]) == [b"other link", value]


def test_pending_response_then_the_final_one(tmp_path: Path) -> None:
    log = write_log(tmp_path / "p.log", DISCOVERY, sent(credit_req(2, [LAPTOP_CID])),
                    received(credit_rsp(2, [0x0000], result=0x000D)),
                    *from_board(att(0x1B, DATA, b"too early")),
                    received(credit_rsp(2, [BOARD_CID])), *from_board(att(0x1B, DATA, b"open")))
    assert rx_values(read(log)[0]) == [b"open"]


def test_other_psm_closed_and_reconnected_channels_not_read(tmp_path: Path) -> None:
    log = write_log(
        tmp_path / "c.log", le_connected(0x0040), DISCOVERY,
        sent(credit_req(3, [0x0045], spsm=0x0080)), received(credit_rsp(3, [0x0046])),
        *[received(k) for k in kframes(att(0x1B, DATA, b"another protocol"), 0x0045)],
        *OPEN, *from_board(att(0x1B, DATA, b"a")),
        # the board closed the channel; the laptop's response names its own CID as the
        # destination, the board's as the source (those of the request it answers)
        sent(disconnection_rsp(4, LAPTOP_CID, BOARD_CID)),
        *from_board(att(0x1B, DATA, b"closed")),
        *OPEN, *from_board(att(0x1B, DATA, b"b")),
        disconnected(0x0040), le_connected(0x0040), DISCOVERY,
        *from_board(att(0x1B, DATA, b"old link")))
    pieces, report = read(log)
    assert rx_values(pieces) == [b"a", b"b"] and report.eatt_channels == 2


def test_multiple_handle_value_notifications(tmp_path: Path) -> None:
    log = write_log(
        tmp_path / "m.log", DISCOVERY, *OPEN,
        *from_board(multi_notify((DATA, b"x1"), (0x0030, b"battery"), (DATA, b"x2"))),
        received(l2cap_pdu(multi_notify((DATA, b"y1"), (DATA, b"")))),  # on 0x0004 as well
        received(l2cap_pdu(multi_notify((DATA, b"z1")) + b"\x10\x00\x09\x00abc")))  # runs past
    assert rx_values(read(log)[0]) == [b"x1", b"x2", b"y1", b"z1"]


def test_oversize_and_broken_sdus_lose_only_themselves(tmp_path: Path) -> None:
    big = att(0x1B, DATA, bytes(700))  # SDU over MAX_ATT_PDU: its K-frames are stepped over
    first, *rest = from_board(att(0x1B, DATA, bytes(range(100))))
    log = write_log(tmp_path / "o.log", DISCOVERY, *OPEN, *from_board(big),
                    *from_board(att(0x1B, DATA, b"after big")),
                    first, *from_board(att(0x1B, DATA, b"x")), *rest,  # K-frames out of place
                    *from_board(att(0x1B, DATA, b"last")))
    pieces, report = read(log)
    assert rx_values(pieces) == [b"after big", b"last"]  # "x" went into the SDU it interrupted
    assert report.oversize_pdus == 1 and report.broken_pdus == 1


def test_handles_guessed_from_eatt_traffic(tmp_path: Path) -> None:
    notes = sim_notes(1, payload=100)
    log = write_log(tmp_path / "g.log", *OPEN,
                    *[k for n in notes for k in from_board(att(0x1B, 0x0021, n))])
    pieces, report = read(log)
    assert rx_values(pieces) == notes and report.handles_from == "guessed"


def test_the_signalling_layouts_byte_for_byte() -> None:
    # Hand-assembled from the field orders (bumble l2cap.py, Core Vol 3 Part A 4.25/4.26):
    # L2CAP header len 0x0010 CID 0x0005; code 0x17, id 1, length 0x000C; SPSM 0x0027, MTU 247,
    # MPS 64, credits 10, CIDs 0x0040 0x0041.
    assert credit_req(1, [0x0040, 0x0041]) == bytes.fromhex(
        "1000 0500 17 01 0c00 2700 f700 4000 0a00 4000 4100")
    # the same request as bumble's own serialiser writes it
    frame = l2cap.L2CAP_Credit_Based_Connection_Request(
        identifier=1, spsm=0x27, mtu=247, mps=64, initial_credits=10, source_cid=[0x40, 0x41])
    assert bytes(frame) == credit_req(1, [0x0040, 0x0041])[4:]
    rsp = l2cap.L2CAP_Credit_Based_Connection_Response(
        identifier=1, mtu=247, mps=64, initial_credits=10, destination_cid=[0x41],
        result=l2cap.L2CAP_Credit_Based_Connection_Response.Result.ALL_CONNECTIONS_SUCCESSFUL)
    assert bytes(rsp) == credit_rsp(1, [0x0041])[4:]
    # K-frames: SDU length 0x0005 ahead of the first; MPS 4 cuts "\x1b\x10\x00ab" as 2+2, 3
    assert kframes(b"\x1b\x10\x00ab", 0x0040, mps=4) == [
        bytes.fromhex("0400 4000 0500 1b10"), bytes.fromhex("0300 4000 00 6162")]


# ---- a real stack: bumble's Enhanced ATT bearer --------------------------------
#
# The central opens one EATT channel (MPS 64, so a 247-byte SDU takes four K-frames),
# discovers, subscribes and writes on that bearer only; the board's notifications go to
# the subscribed bearer. bumble gives an EATT client ATT_MTU 23, so its command, longer than
# 20 bytes, goes as a long write (prepare/execute).

SPEC = l2cap.LeCreditBasedChannelSpec(psm=0x0027, mtu=247, mps=64)


@dataclass
class EattSession:
    log: Path
    received: list[bytes]
    commands: list[bytes]  # what the board's command characteristic got
    written: list[bytes]  # what the central wrote


async def _eatt_session(tmp: Path) -> EattSession:
    central, board = virtual_pair()
    s = EattSession(tmp / "eatt.log", [], [], [])
    data = _board_service(board, s.commands)
    board.gatt_server.register_eatt(SPEC)
    notes = list(notifications([f for _, f in simulate(SimConfig(seconds=2))], 244))
    enc = wire.Encoder(0xFFFF, 0)
    with s.log.open("wb") as snoop:
        central.host.snooper = BtSnooper(snoop)
        await central.power_on()
        await board.power_on()
        await board.start_advertising()
        conn = await central.connect(board.random_address)
        client = await gatt_client.Client.connect_eatt(conn, SPEC)
        [service] = await client.discover_services([UUID(wire.SERVICE_UUID)])
        chars = {c.uuid: c for c in await client.discover_characteristics([], service)}
        done = asyncio.Event()

        def on_note(value: bytes) -> None:
            s.received.append(bytes(value))
            if len(s.received) == len(notes):
                done.set()

        await client.subscribe(chars[UUID(wire.DATA_UUID)], on_note)
        s.written.append(enc.frame(enc.start(1, 0, "an EATT session, long enough")))
        await client.write_value(chars[UUID(wire.COMMAND_UUID)].handle, s.written[-1],
                                 with_response=True)
        for n in notes:
            await board.notify_subscribers(data, n)
        await asyncio.wait_for(done.wait(), 10)
        await conn.disconnect()
        central.host.snooper = None
    assert s.received == notes and s.commands == s.written
    return s


@pytest.fixture(scope="module")
def eatt(tmp_path_factory: pytest.TempPathFactory) -> EattSession:
    return asyncio.run(_eatt_session(tmp_path_factory.mktemp("eatt")))


def test_real_eatt_log_reads_as_received(eatt: EattSession) -> None:
    pieces, report = read(eatt.log)
    assert rx_values(pieces) == eatt.received
    assert [p for p, a in pieces if a.source == TX_SOURCE_BASE] == eatt.commands
    assert report.eatt_channels == 1 and report.long_writes == 1
    assert report.handles_from == "discovered" and report.broken_pdus == 0
    assert report.note("eatt.log") == "eatt.log: 1 long write (prepare/execute) read as commands"


def test_real_eatt_log_carries_its_att_on_the_channel(eatt: EattSession) -> None:
    # what the test exercises: after the channel opened, no ATT on the fixed channel 0x0004,
    # and the notifications' SDUs did span several K-frames
    with btsnoop._open_log(eatt.log) as log:
        units = [(u[4], u[3]) for u in btsnoop._att_units(log, BtsnoopReport(), None)
                 if u[3] is not None]
    first = next(i for i, (cid, _) in enumerate(units) if cid != btsnoop.ATT_CID)
    assert btsnoop.ATT_CID not in {cid for cid, _ in units[first:]}
    assert {pdu[0] for _, pdu in units[first:]} >= {0x09, 0x16, 0x18, 0x1B}
    assert max(len(pdu) for _, pdu in units) > SPEC.mps


def tx_values(pieces: list) -> list[bytes]:
    return [p for p, a in pieces if p is not None and a.source >= TX_SOURCE_BASE]


def test_random_corruption_of_eatt_long_writes_and_cuts(tmp_path: Path) -> None:
    # every new layout in one log, then random bytes changed and random cuts: one-line
    # errors at most, never an exception escaping, never anything but bytes handed over
    notes = sim_notes(1, payload=200)
    recs = [le_connected(0x0040), *OPEN,
            *from_board(declaration_pdu((DATA, wire.DATA_UUID, 0x10), (COMMAND, wire.COMMAND_UUID, 0x0C)))]
    for i, n in enumerate(notes[:6]):
        recs += from_board(att(0x1B, DATA, n)) if i % 2 else [received(l2cap_pdu(att(0x1B, DATA, n)))]
    recs += [received(l2cap_pdu(multi_notify((DATA, b"m1"), (DATA, b"m2")))),
             sent(l2cap_pdu(prepare(COMMAND, 0, b"abc"))), *from_laptop(prepare(COMMAND, 0, b"def")),
             sent(l2cap_pdu(execute())), *from_laptop(execute()),
             cut_record(acl(0x0040, 0b10, l2cap_pdu(att(0x1B, DATA, bytes(90)))), RECEIVED, 30),
             disconnected(0x0040)]
    clean = H4_HEADER + b"".join(recs)
    pieces, report = read(write_log(tmp_path / "clean.log", *recs))
    assert rx_values(pieces)[-2:] == [b"m1", b"m2"] and tx_values(pieces) == [b"abc", b"def"]
    rng = random.Random(11)
    path = tmp_path / "r.log"
    for _ in range(300):
        data = bytearray(clean)
        for _ in range(rng.randint(1, 12)):
            data[rng.randrange(16, len(data))] = rng.randrange(256)
        path.write_bytes(bytes(data[: rng.randrange(16, len(data) + 1)] if rng.random() < 0.2 else data))
        try:
            got, report = read(path)
        except InputError as exc:
            assert "\n" not in str(exc)
            continue
        assert all(p is None or isinstance(p, bytes) for p, _ in got)
        assert "\n" not in report.note("r.log")
