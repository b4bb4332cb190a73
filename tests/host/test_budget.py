"""`slipless budget`: the board's data rate (measured on the firmware itself), the
link's capacity (Bluetooth Core Specification arithmetic), mirror and battery
arithmetic, verdicts, exit codes and one-line errors.

Sources beside each check; "from memory" where a value could not be read in
a document here, "common practice" where none exists.
"""

from __future__ import annotations

import json
import math
import struct
import sys
import zlib
from pathlib import Path
from typing import Any

import pytest
from cobs.cobs import encode as cobs_encode  # the `cobs` package (PyPI): a reference encoder

from slipless.board import budget
from slipless.board.files import firmware_dir, protocol_dir
from slipless.board.flash import load_board_config_module, load_profile
from slipless.cli import main
from slipless.protocol import wire

FW = firmware_dir()
CFG = load_board_config_module(FW)
PROFILE = load_profile(FW, "esp32-devkitc")
EXAMPLE = FW / "config.example.json"


def stream(sid: int, name: str, source: str, rate_hz: float, type_: str, unit: str = "V",
           **extra: Any) -> dict[str, Any]:
    return {"id": sid, "name": name, "unit": unit, "source": source, "rate_hz": rate_hz,
            "type": type_, "scale": 1.0, "offset": 0.0, **extra}


def config(streams: list[dict[str, Any]], **sections: Any) -> dict[str, Any]:
    return CFG.validate({"streams": streams, **sections})


TWO_KHZ_GYRO = [stream(0, "cap_amp", "adc0", 1000, "h"), stream(1, "coil_current", "adc1", 1000, "h", "A"),
                stream(2, "gyro_z", "gyro_z", 100, "h", "rad/s")]


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(["budget", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def write_config(tmp_path: Path, cfg: dict[str, Any]) -> Path:
    path = tmp_path / "board.json"
    path.write_text(json.dumps(cfg))
    return path


# ---- bytes on air per frame and per sample --------------------------------------------


def _sealed_len(body: bytes) -> int:
    """COBS (the `cobs` package) over body + CRC-32 (zlib), plus the 0x00 delimiter."""
    return len(cobs_encode(body + zlib.crc32(body).to_bytes(4, "little"))) + 1


@pytest.mark.parametrize("type_", list(CFG.TYPES))
def test_full_samples_frame_bytes_match_encoder_and_reference_cobs(type_: str) -> None:
    code = ord(type_)
    n = wire.max_samples(code)
    flow = budget.stream_flow(stream(0, "x", "adc0", 1000, type_), 5000)
    assert flow.samples_per_frame == n  # 1 kHz fills a block long before 2.5 s
    enc = wire.Encoder(1, 1)
    values = [1.5] * n if type_ == "f" else [1] * n
    assert enc.samples(0, 0, code, values) == flow.frame_bytes
    assert _sealed_len(bytes(enc.body[: flow.frame_bytes - budget.FRAME_OVERHEAD])) == flow.frame_bytes


def test_every_frame_kind_matches_the_encoder() -> None:
    enc = wire.Encoder(1, 1)
    flows = {f.what: f for f in budget.board_flows(config(TWO_KHZ_GYRO))}
    assert enc.status(0, 0, 0, 0, 0, 0, 0, 0) == flows["status"].frame_bytes == 43
    assert enc.sync(0, 0, 0, 0) == flows["sync (recorder pings)"].frame_bytes == 41
    assert enc.events([(0, 1, 1)]) == budget.wire_bytes(wire.HEADER_SIZE + wire.EVENT_ENTRY_SIZE)


def test_readme_bytes_per_sample() -> None:
    """SPEC "Efficiency" and README: a full int16 frame is 244 / 112 = 2.179 B per sample;
    with two 1 kHz int16 streams, STATUS every 5 s and DESCRIPTOR every 10 s (the
    bench's mix, no pings) 2.187, the README's 2.19."""
    full = budget.stream_flow(stream(0, "x", "adc0", 1000, "h"), 5000)
    assert full.frame_bytes / full.samples_per_frame == pytest.approx(2.179, abs=5e-4)
    cfg = config([stream(0, "cap_amp", "adc0", 1000, "h"), stream(1, "coil_current", "adc1", 1000, "h", "A")])
    r = budget.check(cfg, PROFILE, ping_every_s=0)
    assert r.bytes_per_sample == pytest.approx(2.187, abs=5e-4)
    assert round(r.bytes_per_sample, 2) == 2.19


def test_part_full_blocks_at_half_the_gap_promise() -> None:
    """board.py: blocks older than status_every_ms / 2 go part-full (SPEC P2)."""
    assert budget.samples_per_frame(stream(0, "x", "adc0", 10, "b"), 5000) == 26  # 2.5 s = 25 periods
    assert budget.samples_per_frame(stream(0, "x", "adc0", 7, "f"), 5000) == 18  # 17.5 periods
    assert budget.samples_per_frame(stream(0, "x", "adc0", 100, "h"), 1000) == 51
    assert budget.samples_per_frame(stream(0, "x", "adc0", 0.01, "h"), 5000) == 1


@pytest.mark.parametrize("rate_hz", [0.01, 3, 7, 10, 333, 1000, 4999, 5000])
def test_period_rule_is_the_firmware_rule(rate_hz: float) -> None:
    assert budget.period_us({"rate_hz": rate_hz}) == CFG.period_us({"rate_hz": rate_hz})


def _firmware_on_path() -> None:
    for p in (str(FW), str(protocol_dir())):
        if p not in sys.path:
            sys.path.insert(0, p)


def _firmware_frames(cfg: dict[str, Any], seconds: float, step_us: int = 250) -> list[bytes]:
    """Every frame the board's own firmware builds (CPython, simulated hardware) in a run."""
    _firmware_on_path()
    from board import Board
    from simhw import SimHW

    hw = SimHW()
    built: list[bytes] = []
    hw.on_frame = lambda slot, n: built.append(bytes(slot[:n]))
    board = Board(cfg, hw, hw.next_run_id())
    assert board.start(0, "") == 0
    for _ in range(int(seconds * 1e6) // step_us):
        hw.advance(step_us)
        board.poll()
    return built


def test_rates_and_sizes_match_the_firmware() -> None:
    """Run the firmware (board.py, sampler.py, framer.py) for 20 simulated seconds and
    count what it builds, decoded by wire.Deframer: sizes exact, counts within the
    start-up edge."""
    streams = TWO_KHZ_GYRO + [stream(3, "coil_state", "coil_state", 10, "b", "", state=True),
                              stream(4, "ext", "ext0", 7, "f"), stream(5, "turns", "index", 3, "I")]
    program = [[1, 300], [0, 700], [0, 500], [-1, 300], [0, 700]]  # one step keeps the polarity
    cfg = config(streams, coil={"program": program, "repeat": 100})
    seconds = 20.0
    seen: dict[str, list[int]] = {}
    frames = _firmware_frames(cfg, seconds)
    deframer = wire.Deframer()
    bodies = deframer.feed(b"".join(frames))
    assert deframer.corrupt == 0 and len(bodies) == len(frames)
    for body, frame in zip(bodies, frames):
        kind = wire.parse_header(body)[1]
        key = (f"stream {body[wire.HEADER_SIZE]}" if kind == wire.SAMPLES
               else f"events {(len(body) - wire.HEADER_SIZE) // wire.EVENT_ENTRY_SIZE}"
               if kind == wire.EVENTS else wire.KIND_NAMES[kind])
        seen.setdefault(key, []).append(len(frame))
    flows = budget.board_flows(cfg, ping_every_s=0)  # no recorder here: no pings, no SYNC
    for f in flows:
        key = (f.what.split(" ")[0] + " " + f.what.split(" ")[1] if f.what.startswith("stream")
               else f"events {f.what[8]}" if f.what.startswith("events") else f.what)
        sizes = seen.pop(key)
        assert set(sizes) == {f.frame_bytes}, (key, set(sizes))
        expected = f.frames_per_s * seconds
        assert abs(len(sizes) - expected) <= 1.5, (key, len(sizes), expected)  # start-up edge
    assert seen == {}  # nothing the budget does not know about


def test_descriptor_split_matches_the_firmware() -> None:
    """Eight streams with 32-byte names and units need several DESCRIPTOR frames; the
    parts must be the ones framer.set_descriptor builds."""
    sources = ["adc0", "adc1", "ext0", "gyro_z", "index", "coil_state", "adc0", "adc1"]
    streams = [stream(i, f"{i}" * 32, src, 10, "h", "u" * 32) for i, src in enumerate(sources)]
    cfg = config(streams)
    _firmware_on_path()
    from board import Board
    from simhw import SimHW

    hw = SimHW()
    parts = [n + budget.FRAME_OVERHEAD for _, n in Board(cfg, hw, 1).framer._desc]
    assert len(parts) > 1
    assert budget.descriptor_frame_bytes(cfg) == parts
    flows = [f for f in budget.board_flows(cfg) if f.what.startswith("descriptor")]
    assert [f.frame_bytes for f in flows] == parts


def test_board_mtu_ceiling_and_ping_cadence_are_the_project_values() -> None:
    _firmware_on_path()
    import link as fw_link

    from slipless.record.recorder import RecordOptions

    assert budget.BOARD_MAX_MTU == fw_link.MAX_PAYLOAD + budget.ATT_NOTIFY_HEADER
    assert budget.PING_EVERY_S == RecordOptions().ping_every_s


# ---- the link: Core Specification arithmetic --------------------------------------------


def test_notification_payloads() -> None:
    # ATT MTU 23 -> 20-byte notifications; 247 -> 244 (references.md 6: MTU - 3 = opcode 1 + handle 2)
    lb = budget.link_budget([], budget.PRESETS["linux-default"])
    assert lb.notify_payload == 20
    assert budget.link_budget([], budget.PRESETS["fast"]).notify_payload == 244
    # the board asks for MTU 247 and caps its notifications there (firmware/link.py)
    wide = budget.LinkAssumptions("x", 15, 517, True)
    assert budget.link_budget([], wide).notify_payload == 244
    # a 244-byte frame at MTU 23: 12 notifications of 20 bytes and one of 4 (firmware/link.py _fill)
    assert budget.notification_values(244, 20) == [20] * 12 + [4]
    assert budget.notification_values(43, 244) == [43]


def test_link_layer_packets_per_notification() -> None:
    # L2CAP header 4 + ATT header 3 + value; ATT MTU 247 fills one 251-octet PDU
    # (references.md 6: 251 - 4 = 247, computed; DLE payload 251, Core v4.2 [verified there])
    assert budget.ll_pdus(244, 251) == 1
    assert budget.ll_pdus(245, 251) == 2
    assert budget.ll_pdus(244, 27) == 10  # 251 octets in 27-octet packets: 9 full + 8
    assert budget.ll_pdus(20, 27) == 1  # the classic 20-byte notification fills a 27-octet PDU


def test_air_times_on_le_1m() -> None:
    # LE 1M packet: preamble 1 + access address 4 + PDU header 2 + payload + MIC 4 (encrypted)
    # + CRC 3 octets, 1 us per bit (Core Vol 6 Part B 2.1, as reproduced in vendor and
    # translated spec pages; checked here through the figures below).
    assert budget.pdu_air_us(0, False) == budget.EMPTY_PDU_US == 80  # vendor notes: empty PDU 10 B = 80 us
    assert budget.pdu_air_us(27, False) == 296
    # Linux's default maximum TX time for a 27-octet PDU, 0x0148 = 328 us
    # (net/bluetooth/hci_core.c le_def_tx_time [verified: kernel source]): 41 octets with MIC
    assert budget.pdu_air_us(27, True) == 0x0148
    # vendor throughput note (Cypress community): 328 + 150 + 80 + 150 = 708 us per packet
    assert budget.exchange_us(27, True) == 708
    assert budget.T_IFS_US == 150  # "T_IFS ... shall be 150 us" (Core Vol 6 Part B 4.1.1, quoted)
    # 251-octet PDU with MIC: 265 octets = 2120 us (the spec's 1M maximum TX time; from memory)
    assert budget.pdu_air_us(251, True) == 2120
    assert budget.pdu_air_us(251, False) == 2088


def test_event_length_caps_packets_per_event() -> None:
    # vendor note: 7.5 ms / 708 us -> about 10 packets of 27 octets per event
    enc27 = budget.LinkAssumptions("x", 7.5, 23, False, packets_per_event=100, encrypted=True)
    flow = [budget.Flow("f", 20, 1.0)]
    assert budget.link_budget(flow, enc27).pdus_per_event == 10
    # 251-octet PDUs unencrypted: 80 + 150 + 2088 + 150 = 2468 us -> 3 in 7.5 ms, 6 in 15 ms
    full = [budget.Flow("f", 244, 1.0)]
    assert budget.link_budget(full, budget.PRESETS["fastest"]).pdus_per_event == 3
    assert budget.link_budget(full, budget.PRESETS["fast"]).pdus_per_event == 4  # the default limit


def test_capacity_by_hand() -> None:
    """Ten full 244-byte frames per second on each preset, computed by hand."""
    flows = [budget.Flow("full", 244, 10.0, 112)]
    fast = budget.link_budget(flows, budget.PRESETS["fast"])
    assert fast.needed_pdus_per_s == 10  # one 251-octet PDU each
    assert fast.available_pdus_per_s == pytest.approx(4 * 1000 / 15)
    assert fast.headroom == pytest.approx(26.6667, rel=1e-4)
    assert fast.carried_Bps == pytest.approx(2440 * 26.6667, rel=1e-4)
    slow = budget.link_budget(flows, budget.PRESETS["linux-default"])
    assert slow.needed_pdus_per_s == 130  # 13 notifications, one 27-octet PDU each
    assert slow.available_pdus_per_s == 80  # 4 per event, 20 events per second
    assert slow.headroom == pytest.approx(80 / 130)
    mtu = budget.link_budget(flows, budget.PRESETS["linux-mtu247"])
    assert mtu.needed_pdus_per_s == 100  # one 244-byte notification = 251 octets = 10 PDUs


def test_linux_default_is_the_kernels_interval() -> None:
    # net/bluetooth/hci_core.c: le_conn_min_interval 0x0018, le_conn_max_interval 0x0028,
    # le_def_tx_len 0x001b [verified: kernel source]; 1.25 ms units (references.md 6)
    assert budget.PRESETS["linux-default"].interval_ms == 0x0028 * 1.25
    assert budget.LL_PAYLOAD_BASIC == 0x001B
    for p in budget.PRESETS.values():
        assert budget.INTERVAL_MIN_MS <= p.interval_ms <= budget.INTERVAL_MAX_MS
        assert (p.interval_ms / 1.25).is_integer()


def test_slow_link_refuses_what_the_fast_link_carries() -> None:
    cfg = config(TWO_KHZ_GYRO)
    slow = budget.check(cfg, PROFILE, budget.PRESETS["linux-default"])
    assert slow.verdict == budget.REFUSE and slow.link.headroom < 1
    assert "dropped" in slow.reasons[0] and "send queue (24 frames)" in slow.reasons[0]
    fast = budget.check(cfg, PROFILE, budget.PRESETS["fast"])
    assert fast.verdict == budget.OK and fast.link.headroom > budget.HEADROOM_WARN
    assert fast.reasons == []


def test_thin_headroom_warns() -> None:
    cfg = config(TWO_KHZ_GYRO)
    lb = budget.check(cfg, PROFILE, budget.PRESETS["fast"]).link
    per_event = budget.LinkAssumptions("thin", 40, 247, True, packets_per_event=1)  # 25 PDUs/s
    thin = budget.check(cfg, PROFILE, per_event)
    assert lb.needed_pdus_per_s < thin.link.available_pdus_per_s < 1.5 * lb.needed_pdus_per_s
    assert thin.verdict == budget.WARN and "headroom" in thin.reasons[0]


def test_paced_stacks_are_capped_by_the_board() -> None:
    """BTstack profiles: the board sends at most notify_per_interval notifications per
    interval, taken as 50 ms until the central updates the connection (firmware/link.py)."""
    _firmware_on_path()
    import link as fw_link

    assert budget.PACE_INTERVAL_MS == fw_link.DEFAULT_INTERVAL_US / 1000
    assert budget.PACE_PER_INTERVAL == fw_link.DEFAULT_NOTIFY_PER_INTERVAL
    pico = load_profile(FW, "pico-w")
    pace = budget.board_pace(pico)
    assert pace == pico["ble"]["notify_per_interval"]
    assert budget.board_pace(PROFILE) is None  # NimBLE refuses when full: no pacing
    cfg = config(TWO_KHZ_GYRO)
    r = budget.check(cfg, pico, budget.PRESETS["fast"])
    assert r.link.board_notifications_per_s == pytest.approx(pace * 1000 / 50)
    assert r.link.headroom == pytest.approx(r.link.board_notifications_per_s
                                            / r.link.needed_notifications_per_s)
    assert r.link.limited_by.startswith("the board") and any("paces itself" in n for n in r.notes)
    assert budget.check(cfg, PROFILE, budget.PRESETS["fast"]).link.headroom > r.link.headroom


# ---- mirror and battery ------------------------------------------------------------------


def test_mirror_arithmetic() -> None:
    cfg = config(TWO_KHZ_GYRO, mirror={"enabled": True, "max_bytes": 1_000_000})
    link = budget.PRESETS["fast"]
    r = budget.check(cfg, PROFILE, link, run_s=60)
    need = r.link.needed_Bps
    assert r.mirror.bytes_per_s == need
    assert r.mirror.lasts_s == pytest.approx(1_000_000 / need)
    assert r.verdict == budget.OK
    long = budget.check(cfg, PROFILE, link, run_s=600)
    assert long.verdict == budget.WARN and "max_bytes" in long.reasons[0]
    small_fs = budget.check(cfg, PROFILE, link, run_s=60, flash_bytes=200_000)
    assert small_fs.mirror.lasts_s == pytest.approx(200_000 / need)
    assert small_fs.verdict == budget.WARN and "stops the run" in small_fs.reasons[0]
    off = budget.check(config(TWO_KHZ_GYRO), PROFILE, link, run_s=1e6)
    assert off.verdict == budget.OK and not off.mirror.enabled


def test_battery_arithmetic() -> None:
    cfg = config(TWO_KHZ_GYRO)
    link = budget.PRESETS["fast"]
    # 2000 mAh x 0.8 usable (common practice) / 100 mA = 16 h
    r = budget.check(cfg, PROFILE, link, run_s=3600, battery_mAh=2000, current_mA=100)
    assert r.battery is not None and r.battery.lasts_s == pytest.approx(16 * 3600)
    assert r.verdict == budget.OK
    # 16 h / 1.2 = 13.3 h: a 14 h run warns
    assert budget.check(cfg, PROFILE, link, run_s=14 * 3600, battery_mAh=2000,
                        current_mA=100).verdict == budget.WARN
    typical = budget.check(cfg, PROFILE, link, battery_mAh=1000)
    assert typical.battery is not None and typical.battery.current_mA == budget.TYPICAL_CURRENT_MA[
        "esp32-devkitc"]
    assert "common practice" in typical.battery.current_from


def test_run_length_defaults_to_the_coil_program() -> None:
    cfg = CFG.parse(EXAMPLE.read_text())
    r = budget.check(cfg, PROFILE)
    assert r.run_s == r.program_s == 5 * 20  # 1 + 1.5 + 1 + 1.5 s, 20 times
    assert r.run_from == "coil program"


def test_summary_lines_for_flash_dry_run() -> None:
    cfg = CFG.parse(EXAMPLE.read_text())
    lines, verdict = budget.preflight(cfg, PROFILE)
    assert verdict in (budget.OK, budget.WARN, budget.REFUSE)
    assert lines == budget.summary_lines(cfg, PROFILE)
    assert any(line.strip().startswith("verdict: ") for line in lines)
    assert any("fast" in line for line in lines)  # the other links, for comparison


def _events(frames: list[bytes]) -> list[tuple[int, int]]:
    out = []
    for body in wire.Deframer().feed(b"".join(frames)):
        if wire.parse_header(body)[1] == wire.EVENTS:
            for off in range(wire.HEADER_SIZE, len(body), wire.EVENT_ENTRY_SIZE):
                _, code, value = struct.unpack_from(wire.EVENT_ENTRY, body, off)
                out.append((code, value))
    return out


def test_coil_duty_window_by_hand() -> None:
    coil = {"program": [[1, 1000], [0, 1000], [-1, 1000], [0, 1000]], "repeat": 20,
            "duty_window_ms": 10000}
    assert budget.coil_window_on_ms(coil) == 5000  # a window from an on-step start: 5 on-steps
    assert budget.coil_window_on_ms({**coil, "repeat": 2}) == 4000  # 8 s program, one window
    assert budget.coil_window_on_ms({**coil, "duty_window_ms": 2500}) == 1500
    assert budget.coil_window_on_ms({**coil, "program": [[0, 500]]}) == 0


def test_coil_duty_warning_agrees_with_the_firmware() -> None:
    """A program on half the time at max_duty 0.5: the firmware's duty limit trips
    (coil.py, EV_SAFETY TRIP_DUTY) and the budget says so; at 30 % neither. The
    example config stays below its own limit (40 %)."""
    example = CFG.parse(EXAMPLE.read_text())
    example["coil"]["program"] = [[1, 1000], [0, 1000], [-1, 1000], [0, 1000]]
    frames = _firmware_frames(example, 12.0, step_us=500)
    from coil import TRIP_DUTY  # the firmware's own code (on the path now)

    assert (wire.EV_SAFETY, TRIP_DUTY) in _events(frames)
    r = budget.check(example, PROFILE, budget.PRESETS["fast"])
    assert r.verdict == budget.WARN and "coil.max_duty" in r.reasons[0]
    calm = config(TWO_KHZ_GYRO, coil={"program": [[1, 300], [0, 700]], "repeat": 20})
    assert not any(code == wire.EV_SAFETY for code, _ in _events(_firmware_frames(calm, 12.0)))
    assert budget.check(calm, PROFILE, budget.PRESETS["fast"]).verdict == budget.OK
    as_shipped = CFG.parse(EXAMPLE.read_text())
    assert not any("coil.max_duty" in why
                   for why in budget.check(as_shipped, PROFILE, budget.PRESETS["fast"]).reasons)


# ---- the command line ------------------------------------------------------------------------


def test_cli_refuses_with_exit_3(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = write_config(tmp_path, {"streams": TWO_KHZ_GYRO})
    code, out, err = run(capsys, "--config", str(path))
    assert code == 3
    assert "verdict: refuse" in out
    assert err.startswith("slipless: refused: ") and err.count("\n") == 1


def test_cli_fast_link_passes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = write_config(tmp_path, {"streams": TWO_KHZ_GYRO})
    code, out, err = run(capsys, "--config", str(path), "--link", "fast", "--battery-mAh", "2000",
                         "--run-s", "600")
    assert code == 0 and err == ""
    assert "verdict: ok" in out and "battery:" in out


def test_cli_explicit_options_override_the_preset(tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    path = write_config(tmp_path, {"streams": TWO_KHZ_GYRO})
    code, out, _ = run(capsys, "--config", str(path), "--interval-ms", "15", "--mtu", "247", "--dle",
                       "--json")
    doc = json.loads(out)
    assert code == 0
    assert doc["link"]["name"] == "custom"
    assert (doc["link"]["interval_ms"], doc["link"]["mtu"], doc["link"]["dle"]) == (15, 247, True)
    code, out, _ = run(capsys, "--config", str(path), "--link", "fast", "--no-dle",
                       "--packets-per-event", "6", "--json")
    doc = json.loads(out)
    assert (doc["link"]["dle"], doc["link"]["packets_per_event"]) == (False, 6)


def test_cli_json_keys(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = write_config(tmp_path, {"streams": TWO_KHZ_GYRO,
                                   "mirror": {"enabled": True, "max_bytes": 500_000}})
    code, out, err = run(capsys, "--config", str(path), "--link", "fast", "--json", "--run-s", "60",
                         "--battery-mAh", "1500", "--flash-bytes", "2000000")
    assert code == 0 and err == ""
    doc = json.loads(out)
    for key in ("verdict", "reasons", "notes", "profile", "needed_Bps", "carried_Bps", "headroom",
                "bytes_per_sample", "frames_per_s", "queue_s", "ring_s", "run_s", "flows", "link",
                "other_links", "mirror", "battery", "assumptions"):
        assert key in doc, key
    assert doc["verdict"] == "ok"
    assert doc["headroom"] == pytest.approx(doc["carried_Bps"] / doc["needed_Bps"], rel=1e-3)
    assert set(doc["other_links"]) == set(budget.PRESETS) - {"fast"}
    assert doc["mirror"]["lasts_s"] == pytest.approx(500_000 / doc["needed_Bps"], rel=1e-3)
    assert doc["battery"]["lasts_s"] == pytest.approx(1500 * 0.8 / 110 * 3600)
    assert math.isclose(sum(f["bytes_per_s"] for f in doc["flows"]), doc["needed_Bps"], rel_tol=1e-3)


@pytest.mark.parametrize("argv, words", [
    (["--interval-ms", "-5"], "--interval-ms -5"),
    (["--interval-ms", "10.3"], "1.25 ms steps"),
    (["--interval-ms", "5000"], "7.5 to 4000"),
    (["--mtu", "600"], "--mtu 600: the ATT MTU is 23 to 517"),
    (["--mtu", "22"], "--mtu 22"),
    (["--packets-per-event", "0"], "--packets-per-event 0"),
    (["--link", "nope"], "--link nope: not a preset"),
    (["--run-s", "0"], "--run-s 0"),
    (["--run-s", "nan"], "--run-s nan"),
    (["--battery-mAh", "-1"], "--battery-mAh -1"),
    (["--current-mA", "50"], "--current-mA needs --battery-mAh"),
    (["--flash-bytes", "0"], "--flash-bytes 0"),
    (["--board", "nope"], "unknown board profile"),
])
def test_cli_bad_options_are_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                      argv: list[str], words: str) -> None:
    path = write_config(tmp_path, {"streams": TWO_KHZ_GYRO})
    code, out, err = run(capsys, "--config", str(path), *argv)
    assert code == 2 and out == ""
    assert err.startswith("slipless: error: ") and err.count("\n") == 1, err
    assert words in err


@pytest.mark.parametrize("text, words", [
    ("{not json", "not valid JSON"),
    (json.dumps({"streams": [{"id": 0}]}), "config.streams[0].name"),
    (json.dumps({"streams": [stream(0, "x", "no_such_source", 10, "h")]}), "not a channel"),
    (json.dumps({"link": {"status_every_ms": 5}}), "config.link.status_every_ms"),
])
def test_cli_bad_config_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str], text: str,
                                    words: str) -> None:
    path = tmp_path / "bad.json"
    path.write_text(text)
    code, out, err = run(capsys, "--config", str(path))
    assert code == 2 and out == ""
    assert err.startswith("slipless: error: ") and err.count("\n") == 1, err
    assert words in err


def test_cli_missing_config_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code, _, err = run(capsys, "--config", str(tmp_path / "none.json"))
    assert code == 2 and "config file not found" in err and err.count("\n") == 1


def test_cli_default_config_has_no_streams(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, err = run(capsys, "--json")
    doc = json.loads(out)
    assert code == 0 and err == ""
    assert doc["verdict"] == "ok" and doc["bytes_per_sample"] is None
