"""btsnoop logs: each link (a connection handle between link events) gets
its own handles: its discovery, else its own traffic, else the log's
default; the note says which. Hand-built byte-exact logs (layouts beside the
builders in test_btsnoop.py) and a log a real stack wrote: one bumble central
and two bumble boards whose GATT tables differ, on one virtual link, logging
begun after discovery."""

from __future__ import annotations

import asyncio
from dataclasses import dataclass, field
from pathlib import Path

import pytest
from bumble.controller import Controller
from bumble.core import UUID
from bumble.device import Device, Peer
from bumble.gatt import Characteristic, Service
from bumble.gatt_client import CharacteristicProxy
from bumble.hci import Address
from bumble.host import Host
from bumble.link import LocalLink
from bumble.snoop import BtSnooper
from bumble.transport.common import AsyncPipeSink
from test_btsnoop import (
    DISCOVERY,
    MTU,
    _board_service,
    _discover,
    declarations,
    disconnected,
    le_connected,
    notify_rec,
    read,
    write_log,
    write_rec,
)

from slipless.cli import decode_files
from slipless.io.btsnoop import LinkHandles
from slipless.io.pieces import TX_SOURCE_BASE
from slipless.protocol import wire
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import notifications


def by_source(pieces: list) -> dict[int, list[bytes]]:
    out: dict[int, list[bytes]] = {}
    for p, a in pieces:
        if p is not None:
            out.setdefault(a.source, []).append(p)
    return out


def board_notes(board: int) -> list[bytes]:
    """A simulated board's second of frames in notifications of 244 bytes: each holds whole
    frames (none is longer), so its frames are its 0x00 delimiters (SPEC: COBS framing)."""
    frames = [f for _, f in simulate(SimConfig(seconds=1, board=board))]
    return list(notifications(frames, 244))


def frames_in(notes: list[bytes]) -> int:
    return sum(n.count(0) for n in notes)


def command(text: str) -> bytes:
    enc = wire.Encoder(0xFFFF, 0)
    return enc.frame(enc.start(1, 0, text))


def test_two_boards_without_discovery_both_come_through(tmp_path: Path) -> None:
    # logging began after setup: no connection events, no discovery; the boards' GATT
    # tables differ (data 0x0021 / 0x0031, commands 0x0024 / 0x0034)
    a, b = board_notes(1), board_notes(2)
    recs = [r for pair in zip(a, b) for r in (notify_rec(0x0021, pair[0], conn=0x0040),
                                              notify_rec(0x0031, pair[1], conn=0x0041))]
    recs.insert(4, write_rec(0x0024, command("to board 1"), conn=0x0040))
    recs.insert(7, write_rec(0x0034, command("to board 2"), conn=0x0041))
    pieces, report = read(write_log(tmp_path / "two.log", *recs))
    n = min(len(a), len(b))
    assert by_source(pieces) == {0: a[:n], 1: b[:n], TX_SOURCE_BASE: [command("to board 1")],
                                 TX_SOURCE_BASE + 1: [command("to board 2")]}
    fa, fb = frames_in(a[:n]), frames_in(b[:n])
    assert report.links == [LinkHandles(0x0040, "traffic", 0x0021, 0x0024, fa, 1),
                            LinkHandles(0x0041, "traffic", 0x0031, 0x0034, fb, 1)]
    assert report.note("two.log") == (
        "two.log: no GATT discovery in the log; connection 0x0040: no discovery of its own: "
        f"notifications on 0x0021 carry {fa} frames, writes to 0x0024 carry 1 frame; "
        "connection 0x0041: no discovery of its own: notifications on 0x0031 carry "
        f"{fb} frames, writes to 0x0034 carry 1 frame")


def test_discovered_cached_and_silent_links(tmp_path: Path) -> None:
    notes, other = board_notes(1), board_notes(2)
    log = write_log(
        tmp_path / "m.log",
        le_connected(0x0040), DISCOVERY, notify_rec(0x0010, notes[0]),
        # another board, its own layout, no discovery: its own traffic
        le_connected(0x0041), *[notify_rec(0x0030, n, conn=0x0041) for n in other[:3]],
        # a board like the first, cached: data from its traffic, the command as discovered
        le_connected(0x0042), *[notify_rec(0x0010, n, conn=0x0042) for n in notes[1:3]],
        write_rec(0x0012, b"not a frame", conn=0x0042),
        # no frames at all: read with the log's discovery
        le_connected(0x0043), notify_rec(0x0010, b"battery 90%", conn=0x0043))
    pieces, report = read(log)
    assert by_source(pieces) == {0: notes[:1], 1: other[:3], 2: notes[1:3],
                                 TX_SOURCE_BASE + 2: [b"not a frame"], 3: [b"battery 90%"]}
    assert [(k.conn, k.how, k.data, k.command, k.command_frames) for k in report.links] == [
        (0x0040, "discovered", 0x0010, 0x0012, 0), (0x0041, "traffic", 0x0030, 0, 0),
        (0x0042, "traffic", 0x0010, 0x0012, -1), (0x0043, "log", 0x0010, 0x0012, 0)]
    assert report.note("m.log").split("; ") == [
        "m.log: connection 0x0040: its own GATT discovery (data 0x0010, commands 0x0012)",
        f"connection 0x0041: no discovery of its own: notifications on 0x0030 carry "
        f"{frames_in(other[:3])} frames, no writes carrying frames",
        f"connection 0x0042: no discovery of its own: notifications on 0x0010 carry "
        f"{frames_in(notes[1:3])} frames, writes to 0x0012 (as discovered elsewhere in the log)",
        "connection 0x0043: no discovery of its own and no frames in its traffic: read with "
        "the log's discovery (data 0x0010, commands 0x0012)"]


def test_links_of_one_handle_are_told_apart_and_grouped(tmp_path: Path) -> None:
    a, b = board_notes(1), board_notes(2)
    recs = [le_connected(0x0040), DISCOVERY, notify_rec(0x0010, a[0]), disconnected(0x0040)]
    for i in range(3):  # the same handle, reconnected to another board (cached handles)
        recs += [le_connected(0x0040), notify_rec(0x0050, b[i]), disconnected(0x0040)]
    pieces, report = read(write_log(tmp_path / "r.log", *recs))
    assert by_source(pieces)[0] == [a[0], *b[:3]]
    assert "connection 0x0040 (3 links): no discovery of its own: notifications on 0x0050" in (
        report.note("r.log"))


def test_own_discovery_counts_from_the_link_start(tmp_path: Path) -> None:
    late = declarations((0x0030, wire.DATA_UUID, 0x10), conn=0x0041)
    log = write_log(tmp_path / "l.log", DISCOVERY, notify_rec(0x0030, b"early", conn=0x0041), late,
                    notify_rec(0x0030, b"late", conn=0x0041), notify_rec(0x0010, b"x", conn=0x0041))
    pieces, report = read(log)
    assert by_source(pieces) == {1: [b"early", b"late"]}
    assert report.note("l.log") == ""  # every link discovered its own handles


# ---- a real stack: two boards, logging begun after setup ------------------------
#
# One bumble central and two bumble peripherals on one LocalLink (bumble's in-process
# link, no radio). Board 2 carries a Battery service ahead of ours (UUIDs 0x180F / 0x2A19,
# from memory), so its value handles differ. The central connects to both, exchanges
# MTU 247, discovers and subscribes, and only then starts bumble's snooper: the log has no
# connection event and no discovery, as when a phone's logging is switched on mid-session.

ADDRESSES = ("F0:F0:F0:F0:F0:F0", "F1:F1:F1:F1:F1:F1", "F2:F2:F2:F2:F2:F2")


@dataclass
class TwoBoards:
    log: Path
    received: dict[int, list[bytes]] = field(default_factory=dict)  # by board
    written: dict[int, list[bytes]] = field(default_factory=dict)
    handles: dict[int, tuple[int, int, int, int]] = field(default_factory=dict)


def _devices() -> list[Device]:
    air = LocalLink()
    out = []
    for i, addr in enumerate(ADDRESSES):
        ctrl = Controller(f"C{i}", link=air, public_address=addr)
        ctrl.le_acl_data_packet_length = 251  # Data Length Extension, as sim.ble_board's link
        out.append(Device(address=Address(addr), host=Host(ctrl, AsyncPipeSink(ctrl))))
    return out


async def _two_boards(tmp: Path) -> TwoBoards:
    central, *boards = _devices()
    s = TwoBoards(tmp / "two.log")
    commands: dict[int, list[bytes]] = {1: [], 2: []}
    boards[1].add_service(Service("180F", [Characteristic(
        "2A19", Characteristic.Properties.READ | Characteristic.Properties.NOTIFY,
        Characteristic.READABLE, bytes([90]))]))
    data = [_board_service(b, commands[i + 1]) for i, b in enumerate(boards)]
    for d in (central, *boards):
        await d.power_on()
    peers = []
    for i, b in enumerate(boards, 1):
        await b.start_advertising()
        peer = Peer(await central.connect(Address(ADDRESSES[i])))
        assert await peer.request_mtu(MTU) == MTU
        s.handles[i] = await _discover(peer)
        peers.append(peer)
    notes = {i: list(notifications([f for _, f in simulate(SimConfig(seconds=2, board=i))],
                                   MTU - 3)) for i in (1, 2)}
    done = {i: asyncio.Event() for i in (1, 2)}
    for i, peer in enumerate(peers, 1):
        h = s.handles[i]
        s.received[i], s.written[i] = [], [command(f"board {i}")]

        def on_note(value: bytes, i: int = i) -> None:
            s.received[i].append(bytes(value))
            if len(s.received[i]) == len(notes[i]):
                done[i].set()

        proxy: CharacteristicProxy[bytes] = CharacteristicProxy(
            peer.gatt_client, h[0], h[1], UUID(wire.DATA_UUID), h[2])
        await peer.subscribe(proxy, on_note)
    with s.log.open("wb") as snoop:
        central.host.snooper = BtSnooper(snoop)  # logging begins now
        for i, peer in enumerate(peers, 1):
            await peer.write_value(s.handles[i][3], s.written[i][0], with_response=False)
        for k in range(max(map(len, notes.values()))):
            for i in (1, 2):
                if k < len(notes[i]):
                    await boards[i - 1].notify_subscribers(data[i - 1], notes[i][k])
        await asyncio.wait_for(asyncio.gather(*(e.wait() for e in done.values())), 10)
        await asyncio.sleep(0.1)
        central.host.snooper = None
    assert s.received == notes and commands == s.written
    assert s.handles[1][0] != s.handles[2][0]
    return s


@pytest.fixture(scope="module")
def two(tmp_path_factory: pytest.TempPathFactory) -> TwoBoards:
    return asyncio.run(_two_boards(tmp_path_factory.mktemp("two")))


def test_real_two_board_log_yields_both_boards(two: TwoBoards) -> None:
    pieces, report = read(two.log)
    got = by_source(pieces)
    assert [got[0], got[1]] == [two.received[1], two.received[2]]
    assert [got[TX_SOURCE_BASE], got[TX_SOURCE_BASE + 1]] == [two.written[1], two.written[2]]
    assert [(k.how, k.data, k.command) for k in report.links] == [
        ("traffic", two.handles[i][0], two.handles[i][3]) for i in (1, 2)]
    assert report.handles_from == "guessed"


def test_real_two_board_log_decodes_both_boards(two: TwoBoards, tmp_path: Path) -> None:
    dec = decode_files([two.log], tmp_path / "t", "csv", None)
    assert sorted({board for board, _ in dec.runs}) == [1, 2]
    assert dec.counters.corrupt == 0 and dec.counters.commands == 2
    assert any("no GATT discovery in the log" in n for n in dec.notes)
