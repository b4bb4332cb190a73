"""The board's own firmware (board.py, link.py on the simulated hardware layer)
over bumble's virtual link at a 50 ms connection interval without Data
Length Extension (sim.links "slow-50ms"), to a laptop that never exchanges
the ATT MTU: the default ATT MTU 23 leaves 20-byte notifications (23 - 3:
references.md, Default ATT_MTU), so frames are split across notifications;
every frame the board built must come out whole and decode. The board's
stack raises _IRQ_CONNECTION_UPDATE with the link's parameters after
connecting and again when the laptop updates them. In simulated time.

The laptop here is a bare bumble central (Peer: discover, subscribe, write),
not the recorder, because the recorder always asks for MTU 247."""

from __future__ import annotations

import asyncio
import csv
from pathlib import Path
from typing import Any

import pytest
from bumble.core import UUID
from bumble.device import Device, Peer

from slipless.cli import decode_files
from slipless.protocol import wire
from slipless.sim import ble_board, virtual_time
from slipless.sim.links import LINKS
from slipless.sim.rotating_link import LinkPlan, RotatingLink

SLOW = LINKS["slow-50ms"]
CONFIG = {
    "board_id": 12, "name": "rotor-slow",
    "streams": [{"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 200,
                 "type": "h", "scale": 0.001, "offset": 0.0}],
    "link": {"status_every_ms": 500, "descriptor_every_ms": 2000, "ring_frames": 40,
             "queue_frames": 8},
}
STEP_US = 500  # board time per loop turn; the loop pauses 0.5 ms: board time keeps pace
RUN_S = 4.0


async def _find(laptop: Device) -> Any:
    found: asyncio.Future[Any] = asyncio.get_running_loop().create_future()

    def on_adv(adv: Any) -> None:
        if not found.done():
            found.set_result(adv.address)

    laptop.on(laptop.EVENT_ADVERTISEMENT, on_adv)
    await laptop.start_scanning(filter_duplicates=True)
    address = await asyncio.wait_for(found, 5)
    await laptop.stop_scanning()
    return address


async def session(update: tuple[float, int, float] | None = None) -> dict[str, Any]:
    """Run the firmware for RUN_S; `update`: (interval ms, latency, timeout ms) the
    laptop switches to halfway."""
    laptop, board = ble_board.virtual_pair(SLOW)
    await laptop.power_on()
    await board.power_on()
    produced: list[bytes] = []
    radio = RotatingLink(LinkPlan(seed=4, interval_s=SLOW.interval_ms / 1000,
                                  per_event=SLOW.packets_per_event, ll_payload=SLOW.ll_payload,
                                  elsewhere=0.0, dead_from_deg=0.0, dead_to_deg=0.0),
                         lambda _t: 0.0, lambda: -1)
    vb = ble_board.VirtualBoard(board, CONFIG, radio=radio,
                                on_frame=lambda slot, n: produced.append(bytes(slot[:n])))
    stop = asyncio.Event()
    board_task = asyncio.create_task(vb.run(stop, STEP_US))
    conn = await laptop.connect(await _find(laptop))
    peer = Peer(conn)  # no request_mtu: the link keeps ATT MTU 23
    (service,) = await peer.discover_service(UUID(wire.SERVICE_UUID))
    chars = {str(c.uuid).lower(): c for c in await service.discover_characteristics()}
    notes: list[bytes] = []
    await chars[str(UUID(wire.DATA_UUID)).lower()].subscribe(lambda v: notes.append(bytes(v)))
    enc = wire.Encoder(0xFFFF, 0)
    start = enc.frame(enc.start(1))
    for i in range(0, len(start), conn.att_mtu - 3):  # one write carries at most MTU - 3 bytes
        await chars[str(UUID(wire.COMMAND_UUID)).lower()].write_value(
            start[i : i + conn.att_mtu - 3], with_response=False)
    await asyncio.sleep(RUN_S / 2)
    if update is not None:
        interval, latency, timeout = update
        await laptop.update_connection_parameters(conn, interval, interval, latency, timeout)
    await asyncio.sleep(RUN_S / 2)
    stop.set()
    await board_task
    ble = vb.bt.BLE()
    out = {"notes": notes, "produced": produced, "mtu": conn.att_mtu, "updates": ble.updates,
           "dropped": vb.board.ring.dropped, "refused": ble.refused,
           "handle": next(iter(board.connections.values())).handle}
    vb.close()
    return out


def test_20_byte_notifications_at_50_ms_without_dle_carry_every_frame_whole(tmp_path: Path) -> None:
    out = virtual_time.run(session())
    notes, produced = out["notes"], out["produced"]
    assert out["mtu"] == 23  # Core default ATT_MTU (references.md)
    assert notes and max(len(n) for n in notes) == 20  # ATT MTU 23 - 3
    assert any(len(p) > 20 for p in produced)  # so some frames span notifications
    stream, built = b"".join(notes), b"".join(produced)
    # nothing dropped, nothing lost: what arrived is the board's stream, in order, up to
    # where the run was cut (the tail may stop inside a frame)
    assert out["dropped"] == 0 and built.startswith(stream) and len(stream) > len(built) // 2
    (tmp_path / "radio.bin").write_bytes(stream)
    (tmp_path / "board.bin").write_bytes(built[: stream.rfind(b"\x00") + 1])
    radio = decode_files([tmp_path / "radio.bin"], tmp_path / "r", "csv", None)
    truth = decode_files([tmp_path / "board.bin"], tmp_path / "t", "csv", None)
    run, want = radio.runs[(12, 2)], truth.runs[(12, 2)]
    assert run.received == want.received > 0 and run.samples == want.samples
    assert run.samples >= 200 * RUN_S / 2  # 200 samples/s, for at least half the run


def test_the_stack_raises_connection_update_with_the_links_parameters() -> None:
    out = virtual_time.run(session(update=(30.0, 2, 600.0)))
    h = out["handle"]
    # MicroPython's _IRQ_CONNECTION_UPDATE (27) data: conn_handle, conn_interval,
    # conn_latency, supervision_timeout, status (MicroPython docs, bluetooth.rst); the
    # values in HCI's units, 1.25 ms and 10 ms (Android's onConnectionUpdated docs say the
    # same units; that MicroPython passes them unchanged is from memory).
    # 50 ms / 1.25 = 40, 420 ms / 10 = 42; 30 ms / 1.25 = 24, 600 ms / 10 = 60
    # (references.md: interval units 24 -> 30 ms). At connect bumble's own peripheral
    # controller reports placeholders (10, 0, 10): the pair's board controller reports the
    # CONNECT_IND's values.
    assert out["updates"] == [(h, 40, 0, 42, 0), (h, 24, 2, 60, 0)]


def test_the_firmware_logs_the_connection_parameters(tmp_path: Path) -> None:
    fw = ble_board.FIRMWARE
    if not ("_IRQ_CONNECTION_UPDATE" in (fw / "link.py").read_text()
            and "def conn_params" in (fw / "board.py").read_text()):
        pytest.skip("the firmware does not log connection parameters yet")
    out = virtual_time.run(session(update=(30.0, 2, 600.0)))
    (tmp_path / "radio.bin").write_bytes(b"".join(out["notes"]))
    decode_files([tmp_path / "radio.bin"], tmp_path / "r", "csv", None)
    with (tmp_path / "r" / "events.csv").open() as f:
        rows = sorted(csv.DictReader(f), key=lambda r: (int(r["run"]), int(r["seq"])))
    conn = (wire.EV_CONN_INTERVAL, wire.EV_CONN_LATENCY, wire.EV_CONN_TIMEOUT)
    got = [(int(r["code"]), int(r["value"])) for r in rows if int(r["code"]) in conn]
    # the same numbers as the stack's IRQ, in the firmware's units: us, events, ms
    assert got == [(conn[0], 50_000), (conn[1], 0), (conn[2], 420),
                   (conn[0], 30_000), (conn[1], 2), (conn[2], 600)]
