"""COBS framing against its published examples and an independent implementation."""

from __future__ import annotations

import cobs.cobs as ref  # the `cobs` package from PyPI, an independent implementation
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from slipless.protocol import wire

# Worked examples: S. Cheshire and M. Baker, "Consistent Overhead Byte Stuffing",
# IEEE/ACM Trans. Networking 7(2), 1999, as tabulated in ../shared/references.md
# (computed there with `cobs` 1.2.2). Encoded form is before the 0x00 delimiter.
EXAMPLES = [
    (b"", b"\x01"),
    (b"\x00", b"\x01\x01"),
    (b"\x00\x00", b"\x01\x01\x01"),
    (bytes.fromhex("001100"), bytes.fromhex("01021101")),
    (bytes.fromhex("11220033"), bytes.fromhex("0311220233")),
    (bytes.fromhex("11223344"), bytes.fromhex("0511223344")),
    (bytes.fromhex("11000000"), bytes.fromhex("0211010101")),
    (bytes.fromhex("deadbeef"), bytes.fromhex("05deadbeef")),
    (bytes.fromhex("dead00beef"), bytes.fromhex("03dead03beef")),
    (bytes(range(1, 255)), b"\xff" + bytes(range(1, 255))),
    (bytes(range(0, 255)), b"\x01\xff" + bytes(range(1, 255))),
    (bytes(range(1, 256)), b"\xff" + bytes(range(1, 255)) + b"\x02\xff"),
    (bytes(range(2, 256)) + b"\x00", b"\xff" + bytes(range(2, 256)) + b"\x01\x01"),
    (bytes(range(3, 256)) + b"\x00\x01", b"\xfe" + bytes(range(3, 256)) + b"\x02\x01"),
]


@pytest.mark.parametrize("raw,encoded", EXAMPLES)
def test_published_examples(raw: bytes, encoded: bytes) -> None:
    assert wire.cobs_encode(raw) == encoded
    assert wire.cobs_decode(encoded) == raw


def test_phantom_block_accepted() -> None:
    # Both FF 01..FE and FF 01..FE 01 decode to the same 254 bytes (references.md, sec. 2).
    assert wire.cobs_decode(b"\xff" + bytes(range(1, 255)) + b"\x01") == bytes(range(1, 255))


@pytest.mark.parametrize("bad", [b"\x05\x11\x22", b"\x00", b"\x03\x11\x00"])
def test_rejects_non_cobs(bad: bytes) -> None:
    with pytest.raises(ValueError):
        wire.cobs_decode(bad)


@settings(max_examples=500)
@given(st.binary(max_size=700) | st.lists(st.sampled_from([0, 0, 1, 255]), max_size=700).map(bytes))
def test_matches_reference_package(data: bytes) -> None:
    enc = wire.cobs_encode(data)
    assert enc == ref.encode(data)
    assert wire.cobs_decode(enc) == data
    assert 0 not in enc
    # Overhead bound from the paper: at most one byte per 254, at least one.
    assert len(enc) <= len(data) + max(1, -(-len(data) // 254))


def test_frame_overhead_is_two_bytes() -> None:
    # Bodies of at most 254 bytes get exactly one code byte, plus the delimiter.
    enc = wire.Encoder(1, 1)
    n = enc.samples(0, 0, ord("h"), list(range(112)))
    assert n == wire.MAX_BODY + wire.CRC_SIZE + 2 == wire.MAX_WIRE
