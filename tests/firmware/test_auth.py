"""Authenticated commands on the board: HMAC-SHA256 (RFC 2104) checked against
the RFC 4231 test vectors on real MicroPython, and the board refusing unsealed,
forged and replayed state-changing commands while changing nothing."""

from __future__ import annotations

import hmac
import json
from typing import Any

from collect_sink import CollectSink
from test_board_run import CONFIG, setup

from slipless.decode.decoder import Decoder
from slipless.protocol import wire
from slipless.record import keys

# RFC 4231 section 4 (HMAC-SHA-256 rows of test cases 1, 2, 3, 4, 6, 7; case 5 is
# truncated to 128 bits). The values agree with public test suites quoting the RFC and
# with CPython's hmac module (an independent implementation), checked below; the RFC
# text itself was not read here.
RFC4231 = [
    ("0b" * 20, b"Hi There".hex(),
     "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"),
    (b"Jefe".hex(), b"what do ya want for nothing?".hex(),
     "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"),
    ("aa" * 20, "dd" * 50, "773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe"),
    (bytes(range(1, 26)).hex(), "cd" * 50,
     "82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b"),
    ("aa" * 131, b"Test Using Larger Than Block-Size Key - Hash Key First".hex(),
     "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54"),
    ("aa" * 131, (b"This is a test using a larger than block-size key and a larger than "
                  b"block-size data. The key needs to be hashed before being used by the HMAC "
                  b"algorithm.").hex(),
     "9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2"),
]
# RFC 4231 test case 5: the first 128 bits of the tag.
RFC4231_TRUNCATED = ("0c" * 20, b"Test With Truncation".hex(), "a3b6167473100ee06e0c796c2955552b")

KEY = bytes(range(32))  # test key (common practice: any 32 bytes)


def test_rfc4231_vectors_match_cpython_hmac() -> None:
    for key, data, mac in RFC4231:
        assert hmac.new(bytes.fromhex(key), bytes.fromhex(data), "sha256").hexdigest() == mac
    key, data, mac = RFC4231_TRUNCATED
    assert hmac.new(bytes.fromhex(key), bytes.fromhex(data), "sha256").hexdigest()[:32] == mac


def test_board_hmac_rfc4231(board_runtime) -> None:
    """The board's own RFC 2104 code (hashlib.sha256 only) on MicroPython and CPython."""
    cases = RFC4231 + [RFC4231_TRUNCATED]
    code = f"""
import auth, binascii
for k, d, m in {cases!r}:
    t = auth.hmac_sha256(binascii.unhexlify(k), binascii.unhexlify(d))
    print(binascii.hexlify(t).decode()[:len(m)] == m)
print(auth.same(b"abc", b"abc"), auth.same(b"abc", b"abd"), auth.same(b"ab", b"abc"))
print(binascii.hexlify(auth.unhex("00ff10")).decode())
"""
    out = board_runtime(code).split()
    assert out[:7] == ["True"] * 7
    assert out[7:10] == ["True", "False", "False"]
    assert out[10] == "00ff10"


class _Replies(CollectSink):
    def __init__(self) -> None:
        super().__init__()
        self.answers: list[tuple[str, dict[str, Any]]] = []

    def reply(self, run: Any, seq: int, kind: int, fields: dict[str, Any]) -> None:
        super().reply(run, seq, kind, fields)
        if kind in (wire.ACK, wire.ERROR, wire.SYNC):
            self.answers.append((wire.KIND_NAMES[kind], fields))


def _answers(hexdata: str) -> list[tuple[str, dict[str, Any]]]:
    sink = _Replies()
    d = Decoder(sink)
    d.feed(bytes.fromhex(hexdata))
    d.finish()
    return sink.answers


def _keyed(key: bytes = KEY) -> dict[str, Any]:
    cfg = json.loads(json.dumps(CONFIG))
    cfg["link"]["key_hex"] = key.hex()
    return cfg


def test_keyed_board_refuses_unsealed_forged_and_replayed(board_runtime) -> None:
    enc = wire.Encoder(0xFFFF, 0)
    good = keys.Signer(KEY)
    bad = keys.Signer(bytes(32))
    frames = [
        enc.frame(enc.start(1, 0, "plain")),  # unsealed START: refused
        enc.frame(bad.command(enc, wire.CMD_START, 2, b"\0\0\0\0\0")),  # wrong key
        enc.frame(enc.ping(3, 99)),  # ping stays open
        enc.frame(enc.set_config(4, "coil.repeat", "7")),  # unsealed set_config
    ]
    sealed_start = enc.frame(good.command(enc, wire.CMD_START, 5, b"\0\0\0\0\0"))
    frames += [sealed_start, sealed_start]  # the second copy is a replay
    short = bytearray(enc.frame(enc.command(wire.CMD_STOP | wire.AUTH_FLAG, 7, b"\1\2")))
    frames.append(bytes(short))  # flagged but no room for a trailer
    frames.append(enc.frame(good.command(enc, wire.CMD_STOP, 8)))
    code = setup(_keyed()) + f"""
print(b.auth is not None)
for i, f in enumerate({[f.hex() for f in frames]!r}):
    cmd(f)
    run_for(300)
    print(int(b.running), end=" ")
print()
print(link.keep.hex())
print(hw.saved)
"""
    out = board_runtime(code).split()
    assert out[0] == "True"
    # running only after the sealed START (frame 5), and stopped again by the sealed STOP
    assert out[1:9] == ["0", "0", "0", "0", "1", "1", "1", "0"]
    assert out[10] == "None"  # the unsealed set_config saved nothing
    ans = _answers(out[9])
    errors = [(f["request"], f["code"], f["detail_b"]) for k, f in ans if k == "error"]
    assert errors == [(1, wire.ERR_AUTH, 1), (2, wire.ERR_AUTH, 2), (4, wire.ERR_AUTH, 1),
                      (5, wire.ERR_AUTH, 3), (7, wire.ERR_AUTH, 1)]
    acks = [f["request"] for k, f in ans if k == "ack"]
    assert acks == [5, 8]
    assert [k for k, _ in ans].count("sync") == 1


def test_open_board_takes_plain_and_refuses_sealed(board_runtime) -> None:
    enc = wire.Encoder(0xFFFF, 0)
    frames = [enc.frame(keys.Signer(KEY).command(enc, wire.CMD_STATUS, 1)),
              enc.frame(enc.command(wire.CMD_STATUS, 2))]
    code = setup() + f"""
for f in {[f.hex() for f in frames]!r}:
    cmd(f)
run_for(300)
print(link.keep.hex())
"""
    ans = _answers(board_runtime(code).split()[0])
    assert [(k, f["request"], f.get("code"), f.get("detail_b")) for k, f in ans] == [
        ("error", 1, wire.ERR_AUTH, 4), ("ack", 2, None, None)]


def test_counter_survives_reboot_in_blocks(board_runtime) -> None:
    """The counter slots hold a reserve; after a reboot old counters stay refused and
    the board names its floor, which the laptop jumps past; a torn slot write falls
    back to the other slot; both slots damaged refuse everything."""
    code = """
import auth, os
key = bytes(range(32))
path = "auth_test.ctr"
def clean():
    for i in "01":
        try:
            os.remove(path + i)
        except OSError:
            pass
clean()
a = auth.Auth(key, path)
body = b"\\x19\\xff\\xff\\x00\\x00\\x00\\x00\\x00\\x00\\x86\\x01\\x00"
print(a.check(auth.seal(key, body, 1)), a.check(auth.seal(key, body, 2)), a.check(auth.seal(key, body, 2)))
a = auth.Auth(key, path)  # reboot
print(a.last, a.check(auth.seal(key, body, 3)), a.check(auth.seal(key, body, a.last + 1)))
a = auth.Auth(key, path)  # reboot: the newer slot wins
print(a.last)
with open(path + "1", "w") as f:
    f.write("13")  # a write torn by a power cut
a = auth.Auth(key, path)
print(a.last)
with open(path + "0", "w") as f:
    f.write("garbage")
a = auth.Auth(key, path)  # both slots damaged: fail closed
print(a.check(auth.seal(key, body, 70000)))
clean()
"""
    out = board_runtime(code).split()
    reserve = 1 + 64  # auth.RESERVE
    assert out[:3] == ["0", "0", "3"]
    assert out[3:6] == [str(reserve), "3", "0"]
    assert out[6] == str(reserve + 1 + 64)
    assert out[7] == str(reserve)  # slot 0 still holds the reserve before the torn write
    assert out[8] == "3"


def test_laptop_seal_matches_board() -> None:
    """keys.Signer (CPython hmac) and the board's auth.seal build the same trailer."""
    import importlib.util
    from pathlib import Path

    spec = importlib.util.spec_from_file_location(
        "board_auth", Path(__file__).resolve().parents[2] / "firmware" / "auth.py")
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    enc = wire.Encoder(0xFFFF, 0)
    frame = enc.frame(keys.Signer(KEY).command(enc, wire.CMD_STOP, 9))
    body = wire.Deframer().feed(frame)[0]
    assert bytes(body) == mod.seal(KEY, bytes(body[:-36]), 1)


def test_board_takes_the_golden_sealed_commands(board_runtime) -> None:
    """Vector 26 (built with CPython's hmac): the board, keyed with the vector's key,
    ACKs the sealed START and STOP; the same frames replayed are refused."""
    from pathlib import Path

    case = json.loads((Path(__file__).resolve().parents[2] / "protocol" / "vectors"
                       / "26-authenticated-commands.json").read_text())
    code = setup(_keyed(bytes(range(32)))) + f"""
for f in {case["wire"]!r}:
    cmd(f)
    run_for(300)
    print(int(b.running), end=" ")
for f in {case["wire"]!r}:
    cmd(f)
run_for(300)
print()
print(link.keep.hex())
"""
    out = board_runtime(code).split()
    assert out[:2] == ["1", "0"]
    ans = [(k, f["request"], f.get("detail_b")) for k, f in _answers(out[2]) if k != "sync"]
    assert ans == [("ack", 1, None), ("ack", 2, None), ("error", 1, 3), ("error", 2, 3)]
