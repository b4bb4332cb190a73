"""The frame CRC is CRC-32/ISO-HDLC, checked against the catalogue and crcmod."""

from __future__ import annotations

import binascii
import struct
import zlib

import crcmod.predefined  # independent reference implementation from PyPI

from slipless.protocol import wire

CHECK = b"123456789"


def test_catalogue_check_value() -> None:
    # Catalogue of parametrised CRC algorithms (G. Cook), CRC-32/ISO-HDLC: check=0xcbf43926.
    assert zlib.crc32(CHECK) == 0xCBF43926
    assert binascii.crc32(CHECK) == 0xCBF43926
    assert crcmod.predefined.mkCrcFun("crc-32")(CHECK) == 0xCBF43926


def test_known_sentence() -> None:
    # Common practice test string; value from references.md sec. 1 (computed with zlib).
    assert zlib.crc32(b"The quick brown fox jumps over the lazy dog") == 0x414FA339


def test_frames_carry_crc_little_endian_over_body() -> None:
    enc = wire.Encoder(3, 4)
    n = enc.status(1, 2, 3, 4, 5, 6, 7, 8)
    raw = wire.cobs_decode(enc.frame(n)[:-1])
    body, crc = raw[:-4], struct.unpack("<I", raw[-4:])[0]
    ref = crcmod.predefined.mkCrcFun("crc-32")
    assert crc == ref(body) == zlib.crc32(body)
    # Residue: CRC over body + CRC (LSB first) is 0x2144DF1C (references.md sec. 1).
    assert zlib.crc32(raw) == 0x2144DF1C
