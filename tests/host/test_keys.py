"""Board keys on the laptop: private files, counters, and `record` refusing to
send state-changing commands without a key unless --insecure."""

from __future__ import annotations

import hmac
import os
import struct

import pytest

from slipless.cli import main
from slipless.errors import InputError
from slipless.protocol import wire
from slipless.record import keys


def test_key_file_private_and_checked(tmp_path) -> None:
    path = keys.save_key(3, "ab" * 32, tmp_path / "keys")
    assert path.name == "board-3.key"
    assert path.stat().st_mode & 0o777 == 0o600
    assert keys.load_key(path) == b"\xab" * 32
    os.chmod(path, 0o644)
    with pytest.raises(InputError, match="readable by others; run: chmod 600"):
        keys.load_key(path)
    os.chmod(path, 0o600)
    path.write_text("not hex\n")
    with pytest.raises(InputError, match="lower-case hex"):
        keys.load_key(path)
    with pytest.raises(InputError, match="key file not found"):
        keys.load_key(tmp_path / "none.key")


def test_find_key_picks_the_only_one(tmp_path, monkeypatch) -> None:
    monkeypatch.setenv("SLIPLESS_HOME", str(tmp_path))
    assert keys.find_key(None) is None
    one = keys.save_key(1, keys.new_key_hex())
    assert keys.find_key(None) == one
    keys.save_key(2, keys.new_key_hex())
    with pytest.raises(InputError, match="several board keys"):
        keys.find_key(None)


def test_signer_counter_grows_across_sessions(tmp_path) -> None:
    ctr = tmp_path / "board-1.counter"
    s = keys.Signer(b"k" * 32, ctr)
    assert [s.next_counter(), s.next_counter()] == [1, 2]
    s = keys.Signer(b"k" * 32, ctr)  # a new laptop session
    assert s.next_counter() == 3
    s.skip_to(100)  # the board named its floor
    assert s.next_counter() == 101
    assert ctr.stat().st_mode & 0o777 == 0o600


def test_sealed_command_layout() -> None:
    """Trailer = u32 counter + HMAC-SHA256 over the body up to the tag (RFC 2104,
    computed here with CPython's hmac as the independent implementation)."""
    key = bytes(range(32))
    enc = wire.Encoder(0xFFFF, 0)
    frame = enc.frame(keys.Signer(key).command(enc, wire.CMD_START, 7, b"\x05\0\0\0\0"))
    body = bytes(wire.Deframer().feed(frame)[0])
    assert body[9] == wire.CMD_START | wire.AUTH_FLAG
    assert struct.unpack_from("<H", body, 10)[0] == 7
    assert body[12:17] == b"\x05\0\0\0\0"
    assert struct.unpack_from("<I", body, 17)[0] == 1
    assert body[21:] == hmac.new(key, body[:21], "sha256").digest()
    assert len(body) == 12 + 5 + wire.AUTH_TRAILER_SIZE


def test_record_refuses_without_key(tmp_path, monkeypatch, capsys) -> None:
    monkeypatch.setenv("SLIPLESS_HOME", str(tmp_path / "home"))
    out = tmp_path / "run.slcap"
    assert main(["record", "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "no board key" in err[0] and "--insecure" in err[0]
    assert not out.exists()  # refused before anything was written
