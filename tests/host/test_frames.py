"""Declarative frame layouts (construct) agree with the board's struct layouts."""

from __future__ import annotations

import struct

import numpy as np
import pytest

from slipless.decode import frames
from slipless.protocol import wire


def bodies():
    enc = wire.Encoder(2, 3)
    built = [enc.frame(enc.samples(1, 0xFFFFFFFF, ord("h"), [1, -2, 3])),
             enc.frame(enc.status(1 << 40, 3700, -5, 1, 2, 3, 4, 5)),
             enc.frame(enc.end(77, 1, [(0, 10), (1, 11)]))]
    return [wire.cobs_decode(f[:-1])[:-4] for f in built]


def test_every_layout_matches_its_struct() -> None:
    for fmt, names in [(wire.HEADER, wire.HEADER_FIELDS), (wire.STATUS_BODY, wire.STATUS_FIELDS),
                       (wire.DESCRIPTOR_FIXED, wire.DESCRIPTOR_FIELDS),
                       (wire.STREAM_ENTRY, wire.STREAM_FIELDS), (wire.SYNC_BODY, wire.SYNC_FIELDS),
                       (wire.ERROR_BODY, wire.ERROR_FIELDS), (wire.END_FIXED, wire.END_FIELDS)]:
        from construct import Struct

        assert Struct(*frames.fields(fmt, names)).sizeof() == struct.calcsize(fmt)
    for name in dir(wire):
        if name.endswith("_SIZE") and hasattr(wire, name[:-5]):
            assert getattr(wire, name) == struct.calcsize(getattr(wire, name[:-5])), name


def test_samples_fast_path_matches_declarative() -> None:
    body = bodies()[0]
    parsed = frames.parse_body(wire.SAMPLES, body[wire.HEADER_SIZE :])
    fast = struct.unpack_from(wire.HEADER + wire.SAMPLES_FIXED[1:], body)
    assert (parsed["stream"], parsed["tick32"]) == fast[4:]
    assert np.frombuffer(parsed["values"], "<i2").tolist() == [1, -2, 3]


def test_status_and_end_parse() -> None:
    _, status, end = bodies()
    s = frames.parse_body(wire.STATUS, status[wire.HEADER_SIZE :])
    assert s["tick"] == 1 << 40 and s["temp_cdeg"] == -5
    e = frames.parse_body(wire.END, end[wire.HEADER_SIZE :])
    assert e["frames"] == 3 and [t["samples"] for t in e["totals"]] == [10, 11]


def test_malformed_body_is_reported() -> None:
    with pytest.raises(frames.MalformedFrame):
        frames.parse_body(wire.STATUS, b"\x01\x02")


@pytest.mark.parametrize("kind", [wire.STATUS, wire.SYNC, wire.ACK, wire.ERROR, wire.EVENTS])
def test_struct_paths_match_declarative(kind: int) -> None:
    """The struct paths for fixed-size kinds and EVENTS give what construct gives,
    on random payloads of every valid length, and wrong lengths still fail."""
    rng = np.random.default_rng(kind)
    size = struct.calcsize(frames._FIXED[kind][0].format) if kind != wire.EVENTS else 9
    for n in ([size] if kind != wire.EVENTS else [0, 9, 18, 9 * 26]):
        for _ in range(50):
            payload = rng.integers(0, 256, n, dtype=np.uint8).tobytes()
            assert frames.parse_body(kind, payload) == frames._plain(frames.BODIES[kind].parse(payload))
    with pytest.raises(frames.MalformedFrame):
        frames.parse_body(kind, bytes(size + (1 if kind != wire.EVENTS else 4)))
