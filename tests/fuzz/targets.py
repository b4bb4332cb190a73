"""What every reader must survive, as plain functions of bytes.

Each check feeds one reader arbitrary bytes and asserts the reader's contract:
it returns (damage counted, never raised), or it refuses the whole input with
the one-line error meant for users (InputError / CaptureError / ConfigError);
anything else escaping is a bug. The property tests (test_readers_under_attack.py)
and the coverage-guided harnesses (fuzz_*.py, `make fuzz`) share them.
"""

from __future__ import annotations

import json
import struct
import sys
import tempfile
import zlib
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[2]

from slipless.decode.decoder import Arrival, Decoder, NullSink  # noqa: E402
from slipless.decode.deframe import FastDeframer  # noqa: E402
from slipless.errors import InputError  # noqa: E402
from slipless.io.capture import CaptureError, CaptureReader  # noqa: E402
from slipless.protocol import wire  # noqa: E402

_TMP = Path(tempfile.mkdtemp(prefix="slipless-fuzz-"))


def _split(data: bytes) -> list[bytes]:
    """Chunk boundaries taken from the data itself (deterministic per input)."""
    out, i, k = [], 0, 0
    while i < len(data):
        n = 1 + (data[k % len(data)] * 7 + k) % 250
        out.append(data[i : i + n])
        i += n
        k += 1
    return out


def check_deframers(data: bytes) -> list[bytes]:
    """Fast and reference deframers agree whatever the chunking; every body they
    accept carries a good CRC. Returns the accepted bodies."""
    fast = FastDeframer()
    whole = [bytes(b) for b, _, _ in fast.feed(data)]
    fast.close()
    fast2 = FastDeframer()
    chunked = [bytes(b) for c in _split(data) for b, _, _ in fast2.feed(c)]
    fast2.close()
    ref = wire.Deframer()
    slow = [bytes(b) for c in _split(data) for b in ref.feed(c)]
    assert whole == chunked == slow
    for body in whole:
        assert wire.MIN_BODY <= len(body) <= wire.MAX_BODY
    return whole


def check_decoder(data: bytes) -> None:
    d = Decoder(NullSink())
    for c in _split(data):
        d.feed(c, Arrival(0, 0, 0, "radio"))
    d.finish()


def _file(name: str, data: bytes) -> Path:
    p = _TMP / name
    p.write_bytes(data)
    return p


def check_capture(data: bytes) -> None:
    from slipless.io.capture import MAGIC

    for blob in (data, MAGIC + data):
        with _file("f.slcap", blob).open("rb") as f:
            try:
                reader = CaptureReader(f)
            except CaptureError as exc:
                assert "\n" not in str(exc)
                continue
            for _ in reader:
                pass


def check_capture_records(data: bytes) -> None:
    """A valid capture header, then the bytes as records: decoded like `decode` does."""
    _consume(_file("r.slcap", capture_header() + data))


def capture_header() -> bytes:
    from slipless.io import capture

    meta = json.dumps({"slipless": "fuzz"}).encode()
    return capture._FILE_HEAD.pack(capture.MAGIC, capture.VERSION, len(meta), zlib.crc32(meta)) + meta


def _consume(path: Path, mirror: bool = False) -> None:
    from slipless.io import inputs

    try:
        src = inputs.classify(path, mirror=mirror)
        d = Decoder(NullSink())
        for chunk, arrival in inputs.pieces(src):
            if chunk is None:
                d.reset_source(arrival.source)
            else:
                d.feed(chunk, arrival)
        d.finish()
    except InputError as exc:
        assert "\n" not in str(exc)


def check_btsnoop(data: bytes) -> None:
    from slipless.io.btsnoop import H4

    head = b"btsnoop\x00" + struct.pack(">II", 1, H4)
    _consume(_file("b.log", head + data))


def check_mirror(data: bytes) -> None:
    _consume(_file("m.bin", data), mirror=True)


def _firmware() -> Any:
    for p in (str(REPO / "firmware"), str(REPO / "protocol")):
        if p not in sys.path:
            sys.path.insert(0, p)
    import config  # the board's own module, as `slipless flash` loads it

    return config


def check_config(data: bytes) -> None:
    config = _firmware()
    try:
        text = data.decode("utf-8", "surrogatepass")
    except UnicodeDecodeError:
        return  # flash reads text as UTF-8 and says so itself
    try:
        c = config.parse(text)
    except config.ConfigError as exc:
        assert "\n" not in str(exc)
        return
    assert isinstance(c, dict)


_BOARDS: dict[bool, Any] = {}
KEY = bytes(range(32))


def board(keyed: bool) -> Any:
    """A board on simulated hardware (CPython), one per keyed/open."""
    if keyed not in _BOARDS:
        _firmware()
        from board import Board
        from simhw import SimHW, SinkLink

        config = _firmware()
        cfg = config.validate({"link": {"key_hex": KEY.hex() if keyed else ""},
                               "coil": {"program": [[1, 100], [0, 100]]}})
        hw = SimHW()
        b = Board(cfg, hw, hw.next_run_id())
        b.link = SinkLink(b.ring)
        _BOARDS[keyed] = (b, hw)
    return _BOARDS[keyed]


def check_board_commands(data: bytes) -> None:
    """Arbitrary command bytes, framed or as bare bodies: the board answers or
    ignores, never raises, and a keyed board changes nothing."""
    _firmware()
    import commands

    for keyed in (True, False):
        b, hw = board(keyed)
        saved, running = hw.saved, b.running
        b.command_bytes(data)
        commands.handle(b, data)
        body = bytearray(data)
        if len(body) >= 12:  # a well-formed header aimed at this board, random rest
            body[0] = (wire.VERSION << 4) | wire.COMMAND
            body[1:3] = b"\xff\xff"
            commands.handle(b, bytes(body))
        b.link.poll()
        if keyed:
            assert b.running == running and hw.saved == saved
        else:
            b.stop(1)
            b.link.poll()


ALL = {
    "deframe": check_deframers,
    "decoder": check_decoder,
    "capture": check_capture,
    "capture_records": check_capture_records,
    "btsnoop": check_btsnoop,
    "mirror": check_mirror,
    "config": check_config,
    "commands": check_board_commands,
}
