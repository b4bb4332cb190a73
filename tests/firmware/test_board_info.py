"""The INFO command on the board (real MicroPython and CPython): one INFO frame
per command, its fields from the board's state, its config hash over the
config file's bytes, and the laptop's decoder reading it."""

from __future__ import annotations

import hashlib
import json
from typing import Any

from collect_sink import CollectSink
from test_board_run import CONFIG, setup

from slipless.decode.decoder import Decoder
from slipless.protocol import wire
from slipless.record import keys
from slipless.sim.ble_board import firmware_on_path

KEY = bytes(range(32))  # test key (common practice: any 32 bytes)
# SHA-256 of "abc": FIPS 180-2, Appendix B.1 (the standard's own example; from memory,
# and CPython's hashlib gives the same, checked below).
ABC_SHA256 = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


class _Infos(CollectSink):
    def __init__(self) -> None:
        super().__init__()
        self.answers: list[tuple[str, dict[str, Any]]] = []

    def reply(self, run: Any, seq: int, kind: int, fields: dict[str, Any]) -> None:
        super().reply(run, seq, kind, fields)
        self.answers.append((wire.KIND_NAMES[kind], dict(fields, run=run.run)))


def _answers(hexdata: str) -> list[tuple[str, dict[str, Any]]]:
    sink = _Infos()
    d = Decoder(sink)
    d.feed(bytes.fromhex(hexdata))
    d.finish()
    assert d.counters.malformed == 0 and d.counters.unknown_kind == 0
    return sink.answers


def _keyed() -> dict[str, Any]:
    cfg = json.loads(json.dumps(CONFIG))
    cfg["link"]["key_hex"] = KEY.hex()
    cfg["name"] = "rotor-info"
    cfg["coil"]["program"] = [[1, 900], [0, 100]]
    return cfg


def test_sha256_reference_value() -> None:
    assert hashlib.sha256(b"abc").hexdigest() == ABC_SHA256


def test_info_reports_the_board(board_runtime) -> None:
    cfg = _keyed()
    config_text = json.dumps(cfg, separators=(",", ":"))  # as `slipless flash` writes it
    enc = wire.Encoder(0xFFFF, 0)
    signer = keys.Signer(KEY)
    frames = {
        "plain": enc.frame(enc.command(wire.CMD_INFO, 1)),
        "sealed": enc.frame(signer.command(enc, wire.CMD_INFO, 2)),  # counter 1: a key check
        "start": enc.frame(signer.command(enc, wire.CMD_START, 3, b"\0\0\0\0\0")),  # counter 2
        "running": enc.frame(enc.command(wire.CMD_INFO, 4)),
        "extra": enc.frame(enc.command(wire.CMD_INFO, 5, b"\x01")),  # INFO takes no arguments
        "stop": enc.frame(signer.command(enc, wire.CMD_STOP, 6)),  # counter 3
        "abc": enc.frame(enc.command(wire.CMD_INFO, 7)),
        "none": enc.frame(enc.command(wire.CMD_INFO, 8)),
    }
    code = setup(cfg) + f"""
import os
from mirror import Mirror
F = {{k: v for k, v in {[(k, v.hex()) for k, v in frames.items()]!r}}}
with open("info_test.json", "w") as f:
    f.write({config_text!r})
hw.config_path = "info_test.json"
cmd(F["plain"])
cmd(F["sealed"])
run_for(300)  # sent before START begins a new run (and empties the ring)
cmd(F["start"])
run_for(300)
cmd(F["running"])
cmd(F["extra"])
m = Mirror("info_test.mirror", 1 << 20, 1000, hw.ticks_ms())
m.write(bytearray(10), 10)
b.mirror = m
cmd(F["stop"])
with open("info_test.json", "w") as f:
    f.write("abc")
cmd(F["abc"])
hw.config_path = "info_test.missing"
cmd(F["none"])
run_for(300)
print(link.keep.hex())
m.close()
os.remove("info_test.json")
os.remove("info_test.mirror")
"""
    out = board_runtime(code).split()
    answers = [(k, f) for k, f in _answers(out[0]) if k in ("info", "ack", "error")]
    by_request = {}
    for kind, f in answers:
        by_request.setdefault(f["request"], []).append((kind, f))
    # exactly one answer per command, and an INFO is answered by INFO alone
    assert sorted(by_request) == [1, 2, 3, 4, 5, 6, 7, 8]
    assert all(len(v) == 1 for v in by_request.values())
    assert [by_request[r][0][0] for r in (1, 2, 4, 7, 8)] == ["info"] * 5
    assert by_request[5][0][0] == "error" and by_request[5][0][1]["code"] == wire.ERR_BAD_ARGUMENT
    firmware_on_path()
    import board as fw_board  # the board's own module: the version its DESCRIPTOR reports

    first = by_request[1][0][1]
    assert (first["fw_major"], first["fw_minor"], first["fw_patch"]) == fw_board.FW
    assert first["name"] == "rotor-info" and first["profile"] == "esp32-devkitc"
    # the hash: SHA-256 (CPython's hashlib) of the file's bytes, first 8 bytes
    assert first["config_sha"] == hashlib.sha256(config_text.encode()).hexdigest()[:16]
    assert first["flags"] == wire.INFO_KEYED and first["counter_floor"] == 0
    assert first["mirror_bytes"] == 0
    assert by_request[2][0][1]["counter_floor"] == 1  # the sealed INFO was checked and counted
    running = by_request[4][0][1]
    assert running["flags"] == wire.INFO_KEYED | wire.INFO_RUNNING | wire.INFO_COIL_ON
    assert running["counter_floor"] == 2 and running["tick"] > first["tick"]
    assert running["run"] != by_request[1][0][1]["run"]  # START began a new run
    abc = by_request[7][0][1]
    assert abc["config_sha"] == ABC_SHA256[:16]  # FIPS 180-2 B.1, computed by the board
    assert abc["flags"] == wire.INFO_KEYED | wire.INFO_MIRROR and abc["mirror_bytes"] == 10
    assert abc["counter_floor"] == 3
    none = by_request[8][0][1]
    assert none["flags"] & wire.INFO_NO_CONFIG_FILE and none["config_sha"] == "00" * 8


def test_info_flags_config_saved_and_unkeyed(board_runtime) -> None:
    enc = wire.Encoder(0xFFFF, 0)
    frames = [enc.frame(enc.set_config(1, "coil.repeat", "3")),
              enc.frame(enc.command(wire.CMD_INFO, 2)),
              enc.frame(keys.Signer(KEY).command(enc, wire.CMD_INFO, 3))]
    code = setup() + f"""
b.config_error = "config: cannot read /config.json"
for f in {[f.hex() for f in frames]!r}:
    cmd(f)
run_for(300)
print(link.keep.hex())
"""
    answers = {f["request"]: (k, f) for k, f in _answers(board_runtime(code).split()[0])
               if k in ("info", "ack", "error")}
    assert answers[1][0] == "ack"
    kind, info = answers[2]
    assert kind == "info"
    assert info["flags"] & wire.INFO_CONFIG_SAVED and info["flags"] & wire.INFO_CONFIG_FALLBACK
    assert not info["flags"] & wire.INFO_KEYED
    # a sealed INFO to a board without a key: ERROR auth no_key (SPEC 3.9.1)
    kind, err = answers[3]
    assert kind == "error" and err["code"] == wire.ERR_AUTH and err["detail_b"] == 4
