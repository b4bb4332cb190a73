"""btsnoop logs with long writes: Prepare Write Requests put together by
offset, handed over at the Execute Write Request (layouts and sources beside
the builders in test_btsnoop.py); hand-built byte-exact logs and a log a real
stack wrote (bumble's Write Long Characteristic Values on bumble's link)."""

from __future__ import annotations

import asyncio
from pathlib import Path

from bumble.device import Peer
from bumble.snoop import BtSnooper
from test_btsnoop import (
    DISCOVERY,
    SENT,
    T0,
    _board_service,
    _discover,
    acl,
    att,
    credit_req,
    credit_rsp,
    disconnected,
    execute,
    kframes,
    l2cap,
    le_connected,
    notify_rec,
    prepare,
    read,
    received,
    record,
    rx_values,
    sent,
    sim_notes,
    write_log,
)

from slipless.cli import decode_files
from slipless.io.pieces import TX_SOURCE_BASE
from slipless.protocol import wire
from slipless.sim.ble_board import virtual_pair

COMMAND = 0x0012


def long_write(value: bytes, handle: int = COMMAND, part: int = 18, conn: int = 0x0040,
               stamp_us: int = T0) -> list[bytes]:
    """A Write Long Characteristic Values procedure as a laptop with ATT_MTU 23 sends it:
    parts of ATT_MTU - 5 = 18 bytes (bumble gatt_client.write_long_value), then execute."""
    parts = [sent(l2cap(prepare(handle, i, value[i : i + part])), conn)
             for i in range(0, len(value), part)]
    return parts + [record(acl(conn, 0b00, l2cap(execute())), SENT, stamp_us)]


def tx(pieces: list) -> list[bytes]:
    return [p for p, a in pieces if p is not None and a.source >= TX_SOURCE_BASE]


def test_parts_put_together_and_handed_over_at_execute(tmp_path: Path) -> None:
    value = bytes(range(50))
    log = write_log(tmp_path / "l.log", DISCOVERY, *long_write(value, stamp_us=T0 + 7),
                    notify_rec(0x0010, b"after"))
    pieces, report = read(log)
    assert [p for p, _ in pieces] == [value, b"after"]
    cmd = pieces[0][1]
    assert cmd.source == TX_SOURCE_BASE and cmd.origin == "radio"  # as a Write Request's
    assert cmd.wall_ns == 1_700_000_000_250_007_000  # the execute's stamp (references 7b)
    assert report.long_writes == 1
    assert "1 long write (prepare/execute) read as commands" in report.note("l.log")


def test_offsets_cancel_gaps_and_other_handles(tmp_path: Path) -> None:
    log = write_log(
        tmp_path / "o.log", DISCOVERY,
        # overlapping parts: the later bytes win where they overlap (bumble's server)
        sent(l2cap(prepare(COMMAND, 0, b"aaaa"))), sent(l2cap(prepare(0x0030, 0, b"zz"))),
        sent(l2cap(prepare(COMMAND, 2, b"bbbb"))), sent(l2cap(execute())),
        sent(l2cap(prepare(COMMAND, 0, b"cancelled"))), sent(l2cap(execute(0x00))),
        sent(l2cap(execute())),  # an execute with nothing queued
        sent(l2cap(prepare(COMMAND, 0, b"0123456789"))),
        sent(l2cap(prepare(COMMAND, 20, b"gap"))), sent(l2cap(execute())),
        *long_write(bytes(513), part=240),  # over 512 bytes: the server refuses it
        *long_write(b"done"))
    pieces, report = read(log)
    assert tx(pieces) == [b"aabbbb", b"done"]
    assert (report.long_writes, report.long_writes_cancelled, report.long_writes_lost) == (2, 1, 2)
    assert report.note("o.log").endswith(
        "2 long writes (prepare/execute) read as commands, 1 cancelled, "
        "2 not read (a part missing, cut, or over 512 bytes)")


def test_one_queue_per_connection_and_bearer(tmp_path: Path) -> None:
    eatt = [sent(k) for k in kframes(prepare(COMMAND, 0, b"on the EATT bearer"), 0x0041)]
    log = write_log(
        tmp_path / "q.log", DISCOVERY, sent(credit_req(1, [0x0040])),
        received(credit_rsp(1, [0x0041])),
        sent(l2cap(prepare(COMMAND, 0, b"fixed "))), *eatt,
        sent(l2cap(prepare(COMMAND, 0, b"other link")), conn=0x0041),
        sent(l2cap(prepare(COMMAND, 6, b"channel"))), sent(l2cap(execute())),
        *[sent(k) for k in kframes(execute(), 0x0041)],
        sent(l2cap(execute()), conn=0x0041))
    assert tx(read(log)[0]) == [b"fixed channel", b"on the EATT bearer", b"other link"]


def test_a_link_event_empties_the_queue(tmp_path: Path) -> None:
    log = write_log(tmp_path / "e.log", le_connected(0x0040), DISCOVERY,
                    sent(l2cap(prepare(COMMAND, 0, b"before"))), disconnected(0x0040),
                    le_connected(0x0040), DISCOVERY, sent(l2cap(execute())), *long_write(b"new"))
    assert tx(read(log)[0]) == [b"new"]


def test_command_handle_guessed_from_long_writes(tmp_path: Path) -> None:
    notes = sim_notes(1, payload=100)
    enc = wire.Encoder(0xFFFF, 0)
    cmd = enc.frame(enc.start(1, 0, "a command sent as a long write"))
    log = write_log(tmp_path / "g.log", *[notify_rec(0x0021, n) for n in notes],
                    *long_write(cmd, handle=0x0024), sent(l2cap(att(0x12, 0x0025, b"\x01\x00"))))
    pieces, report = read(log)
    assert rx_values(pieces) == notes and tx(pieces) == [cmd]
    assert report.handles == (0x0021, 0x0024) and report.handles_from == "guessed"
    assert "writes to 0x0024 carry 1 frame" in report.note("g.log")


def test_decoder_counts_a_long_written_command(tmp_path: Path) -> None:
    notes = sim_notes(1, payload=100)
    enc = wire.Encoder(0xFFFF, 0)
    log = write_log(tmp_path / "d.log", DISCOVERY, *[notify_rec(0x0010, n) for n in notes],
                    *long_write(enc.frame(enc.start(2, 0, "long enough for three parts"))))
    dec = decode_files([log], tmp_path / "t", "csv", None)
    assert dec.counters.commands == 1 and dec.counters.corrupt == 0


# ---- a real stack: bumble's long write on the fixed ATT channel ------------------

async def _session(tmp: Path) -> tuple[Path, list[bytes], list[bytes]]:
    central, board = virtual_pair()
    commands: list[bytes] = []
    _board_service(board, commands)
    path = tmp / "long.log"
    enc = wire.Encoder(0xFFFF, 0)
    written = [enc.frame(enc.start(i, 0, f"long write {i}, over 20 bytes"))
               for i in (1, 2)]
    with path.open("wb") as snoop:
        central.host.snooper = BtSnooper(snoop)
        await central.power_on()
        await board.power_on()
        await board.start_advertising()
        peer = Peer(await central.connect(board.random_address))  # ATT_MTU stays 23
        handles = await _discover(peer)
        for w in written:
            await peer.write_value(handles[3], w, with_response=True)
        await peer.connection.disconnect()
        central.host.snooper = None
    assert commands == written
    return path, written, commands


def test_real_stack_long_writes(tmp_path: Path) -> None:
    path, written, _ = asyncio.run(_session(tmp_path))
    pieces, report = read(path)
    assert tx(pieces) == written and report.long_writes == 2
    assert report.handles_from == "discovered"
