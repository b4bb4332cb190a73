"""The FIRMWARE frame and command (SPEC 3.11) from the spec's bytes: the layout
read by the laptop's parser and decoder, the code-file rule, and `slipless
flash`'s hash of its plan against the rule written out with hashlib."""

from __future__ import annotations

import hashlib
import struct

import pytest
from collect_sink import CollectSink

from slipless.board.flash import Item, firmware_hash
from slipless.decode.decoder import Decoder
from slipless.decode.frames import MalformedFrame, parse_body
from slipless.protocol import wire


def _body(request: int, files: int, size: int, sha: bytes) -> bytes:
    """SPEC 3.11's table by hand: u16 request at 9, u16 files at 11, u32 size at 13,
    8 bytes fw_sha at 17; 25 bytes in all."""
    header = bytes([0x1B]) + struct.pack("<HHI", 3, 7, 12)  # vk: version 1, kind 11
    return header + struct.pack("<H", request) + struct.pack("<H", files) \
        + struct.pack("<I", size) + sha


def test_the_layout_from_the_spec() -> None:
    body = _body(513, 21, 123_456, bytes(range(1, 9)))
    assert len(body) == 25
    assert wire.HEADER_SIZE + wire.FIRMWARE_FIXED_SIZE + wire.FW_SHA_SIZE == 25
    f = parse_body(wire.FIRMWARE, body[wire.HEADER_SIZE:])
    assert f == {"request": 513, "files": 21, "size": 123_456, "fw_sha": "0102030405060708"}
    enc = wire.Encoder(3, 7, 12)
    n = enc.firmware_body(513, 21, 123_456, bytes(range(1, 9)))
    assert bytes(enc.body[:n]) == body  # the encoder writes the spec's bytes
    for bad in (body[:-1], body + b"\x00"):
        with pytest.raises(MalformedFrame):
            parse_body(wire.FIRMWARE, bad[wire.HEADER_SIZE:])


def test_the_decoder_reads_it_as_a_reply() -> None:
    enc = wire.Encoder(3, 7)
    data = enc.frame(enc.firmware(9, 2, 77, bytes(8)))
    sink = CollectSink()
    dec = Decoder(sink)
    dec.feed(data)
    dec.finish()
    assert dec.counters.unknown_kind == 0 and dec.counters.malformed == 0
    assert [r[3] for r in sink.replies] == ["firmware"]


def test_the_command_has_no_arguments() -> None:
    enc = wire.Encoder(0xFFFF, 0)
    body = wire.cobs_decode(enc.frame(enc.command(wire.CMD_FIRMWARE, 5))[:-1])[:-4]
    assert body[0] == 0x19 and body[wire.HEADER_SIZE] == 9 and len(body) == 12
    assert wire.COMMAND_NAMES[9] == "firmware" and 9 not in wire.GUARDED  # open: changes nothing


@pytest.mark.parametrize("path, code", [
    ("/main.py", True), ("/boot.py", True), ("/lib/wire.mpy", True), ("/lib/x.py", True),
    ("/config.json", False), ("/profile.json", False), ("/lib/sub/a.py", False),
    ("/mirror.bin", False), ("/data/a.py", False), ("/lib/", False), ("/lib/a.pyc", False)])
def test_which_files_are_code(path: str, code: bool) -> None:
    assert wire.is_code_path(path) is code


def test_flash_hashes_its_code_files_by_the_rule() -> None:
    plan = [Item("/lib/wire.mpy", b"M\x06" + bytes(300), "protocol/wire.py"),
            Item("/config.json", b"{}", "config"), Item("/main.py", b"main()\n", "main.py"),
            Item("/lib/board.mpy", b"M\x06board", "firmware/board.py")]
    h = hashlib.sha256()  # SPEC 3.11 written out (FIPS 180-4 via CPython's hashlib)
    for path, data in sorted((it.dest, it.data) for it in plan if it.dest != "/config.json"):
        h.update(path.encode() + b"\x00" + len(data).to_bytes(4, "little") + data)
    assert firmware_hash(plan) == (3, 302 + 7 + 7, h.hexdigest()[:16])
    assert firmware_hash([plan[1]]) == (0, 0, "0" * 16)
