"""The FIRMWARE command on the board (real MicroPython and CPython): one FIRMWARE
frame whose hash is SPEC 3.11's rule over the code files in / and /lib, read
once per boot, refused as busy during a run before that first reading."""

from __future__ import annotations

import hashlib
import struct
from typing import Any

from collect_sink import CollectSink
from test_board_run import setup

from slipless.decode.decoder import Decoder
from slipless.protocol import wire

# FIPS 180-4 (the examples of its companion document, FIPS 180-2 Appendix B.1 and
# B.2): SHA-256 of "abc" and of the two-block message (values from memory; CPython's
# hashlib gives the same, checked below).
ABC_SHA256 = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
TWO_BLOCK = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq"
TWO_BLOCK_SHA256 = "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"

# The board's code files for the test (invented contents): bytes over the 256-byte read
# chunk, a file in / and files in /lib; plus what must not count.
CODE = {"/main.py": b"import board\n" * 30, "/lib/wire.mpy": bytes(range(256)) * 3 + b"M",
        "/lib/a.py": b""}
NOT_CODE = {"/config.json": b"{}", "/lib/notes.txt": b"x", "/lib/sub/deep.py": b"y"}


def spec_hash(files: dict[str, bytes]) -> tuple[int, int, str]:
    """SPEC 3.11 written out with CPython's hashlib (FIPS 180-4), apart from wire.py."""
    h = hashlib.sha256()
    for path in sorted(files):
        data = files[path]
        h.update(path.encode() + b"\x00" + struct.pack("<I", len(data)) + data)
    return len(files), sum(len(d) for d in files.values()), h.hexdigest()[:16]


class _Replies(CollectSink):
    def __init__(self) -> None:
        super().__init__()
        self.answers: list[tuple[str, dict[str, Any]]] = []

    def reply(self, run: Any, seq: int, kind: int, fields: dict[str, Any]) -> None:
        super().reply(run, seq, kind, fields)
        self.answers.append((wire.KIND_NAMES[kind], dict(fields)))


def test_sha256_reference_values() -> None:
    assert hashlib.sha256(b"abc").hexdigest() == ABC_SHA256
    assert hashlib.sha256(TWO_BLOCK.encode()).hexdigest() == TWO_BLOCK_SHA256


def test_the_board_hashes_its_code_files(board_runtime, tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)  # (CPython: the board's folders go in a scratch folder)
    enc = wire.Encoder(0xFFFF, 0)
    frames = {
        "first": enc.frame(enc.command(wire.CMD_FIRMWARE, 1)),
        "again": enc.frame(enc.command(wire.CMD_FIRMWARE, 2)),
        "extra": enc.frame(enc.command(wire.CMD_FIRMWARE, 3, b"\x00")),
        "start": enc.frame(enc.start(4, 0, "")),
        "running": enc.frame(enc.command(wire.CMD_FIRMWARE, 5)),
        "busy": enc.frame(enc.command(wire.CMD_FIRMWARE, 6)),
        "stop": enc.frame(enc.command(wire.CMD_STOP, 7)),
        "none": enc.frame(enc.command(wire.CMD_FIRMWARE, 8)),
    }
    files = dict(CODE, **NOT_CODE)
    code = setup() + f"""
import hashlib, binascii, os
print(binascii.hexlify(hashlib.sha256(b"abc").digest()).decode())
print(binascii.hexlify(hashlib.sha256({TWO_BLOCK.encode()!r}).digest()).decode())
F = {{k: v for k, v in {[(k, v.hex()) for k, v in frames.items()]!r}}}
for d in ("fwt", "fwt/lib", "fwt/lib/sub", "fwt/lib/dir.py"):
    os.mkdir(d)
for p, h in {[(p, d.hex()) for p, d in files.items()]!r}:
    with open("fwt" + p, "wb") as f:
        f.write(binascii.unhexlify(h))
hw.code_root = "fwt"
cmd(F["first"])
with open("fwt/main.py", "wb") as f:
    f.write(b"changed")  # read once per boot: the next answer is the same
cmd(F["again"])
cmd(F["extra"])
run_for(300)  # sent before START begins a new run (and empties the ring)
cmd(F["start"])
run_for(300)
cmd(F["running"])  # read before the run: answered
b.fw_hash = None  # as at boot: not read yet, and a run going on
cmd(F["busy"])
cmd(F["stop"])
hw.code_root = "fwt/nowhere"
cmd(F["none"])
run_for(300)
print(link.keep.hex())
for p in {sorted(files, key=len, reverse=True)!r}:
    os.remove("fwt" + p)
for d in ("fwt/lib/dir.py", "fwt/lib/sub", "fwt/lib", "fwt"):
    os.rmdir(d)
"""
    abc, two, stream = board_runtime(code).split()
    assert abc == ABC_SHA256 and two == TWO_BLOCK_SHA256  # the board's hashlib, FIPS 180-4
    sink = _Replies()
    d = Decoder(sink)
    d.feed(bytes.fromhex(stream))
    d.finish()
    assert d.counters.malformed == 0 and d.counters.unknown_kind == 0
    got: dict[int, list[tuple[str, dict[str, Any]]]] = {}
    for kind, f in sink.answers:
        if kind in ("firmware", "ack", "error"):
            got.setdefault(f["request"], []).append((kind, f))
    assert sorted(got) == [1, 2, 3, 4, 5, 6, 7, 8] and all(len(v) == 1 for v in got.values())
    files_n, size, sha = spec_hash(CODE)
    for r in (1, 2, 5):
        kind, f = got[r][0]
        assert kind == "firmware"
        assert (f["files"], f["size"], f["fw_sha"]) == (files_n, size, sha), r
    # wire.py's rule, as the laptop uses it, agrees with the spec written out
    assert all(wire.is_code_path(p) for p in CODE)
    assert not any(wire.is_code_path(p) for p in NOT_CODE)
    kind, f = got[3][0]
    assert kind == "error" and f["code"] == wire.ERR_BAD_ARGUMENT
    kind, f = got[6][0]
    assert kind == "error" and f["code"] == wire.ERR_BUSY and f["opcode"] == wire.CMD_FIRMWARE
    kind, f = got[8][0]  # after the run: read now, from a folder with no code
    assert kind == "firmware" and (f["files"], f["size"], f["fw_sha"]) == (0, 0, "00" * 8)


def test_a_simulation_without_code_files_reports_none(cpython_board) -> None:
    enc = wire.Encoder(0xFFFF, 0)
    frame = enc.frame(enc.command(wire.CMD_FIRMWARE, 1)).hex()
    out = cpython_board(setup() + f"cmd({frame!r})\nrun_for(300)\nprint(link.keep.hex())\n")
    sink = _Replies()
    d = Decoder(sink)
    d.feed(bytes.fromhex(out.split()[0]))
    d.finish()
    ((kind, f),) = [a for a in sink.answers if a[0] == "firmware"]
    assert (f["files"], f["size"], f["fw_sha"]) == (0, 0, "00" * 8)
