"""Declarative frame bodies (construct), built from the layouts in protocol/wire.py.

Only bodies whose CRC already passed reach these parsers. SAMPLES bodies go
through a precompiled struct on the hot path (see decoder.py), and so do the
fixed-size kinds, EVENTS and DESCRIPTOR here (a construct parse costs tens of
microseconds, about a notification's worth of radio time, and the board
repeats its descriptor); tests check both against the declarative definitions.
"""

from __future__ import annotations

import struct
from typing import Any

from construct import (
    Bytes,
    Construct,
    ConstructError,
    ExprAdapter,
    Float32l,
    GreedyBytes,
    GreedyRange,
    Int8sl,
    Int8ul,
    Int16sl,
    Int16ul,
    Int32sl,
    Int32ul,
    Int64ul,
    PascalString,
    Struct,
    Terminated,
)

from slipless.errors import MalformedFrame  # noqa: F401
from slipless.protocol import wire

_CODES: dict[str, Construct] = {
    "B": Int8ul, "b": Int8sl, "H": Int16ul, "h": Int16sl, "I": Int32ul, "i": Int32sl,
    "Q": Int64ul, "f": Float32l,
}


def fields(fmt: str, names: tuple[str, ...]) -> list[Construct]:
    """Named construct fields for a '<'-prefixed struct format from wire.py."""
    codes = fmt.lstrip("<")
    if len(codes) != len(names):
        raise ValueError(f"layout {fmt!r} and names {names!r} disagree")
    return [name / _CODES[c] for name, c in zip(names, codes)]


Text = PascalString(Int8ul, "utf8")

Header = Struct(*fields(wire.HEADER, wire.HEADER_FIELDS))
StreamEntry = Struct(*fields(wire.STREAM_ENTRY, wire.STREAM_FIELDS), "name" / Text, "unit" / Text)
Descriptor = Struct(*fields(wire.DESCRIPTOR_FIXED, wire.DESCRIPTOR_FIELDS),
                    "streams" / GreedyRange(StreamEntry), Terminated)
Samples = Struct(*fields(wire.SAMPLES_FIXED, wire.SAMPLES_FIELDS), "values" / GreedyBytes)
Event = Struct(*fields(wire.EVENT_ENTRY, wire.EVENT_FIELDS))
Events = Struct("events" / GreedyRange(Event), Terminated)
Status = Struct(*fields(wire.STATUS_BODY, wire.STATUS_FIELDS), Terminated)
Sync = Struct(*fields(wire.SYNC_BODY, wire.SYNC_FIELDS), Terminated)
Ack = Struct(*fields(wire.ACK_BODY, wire.ACK_FIELDS), Terminated)
Error = Struct(*fields(wire.ERROR_BODY, wire.ERROR_FIELDS), Terminated)
EndStream = Struct(*fields(wire.END_STREAM, wire.END_STREAM_FIELDS))
End = Struct(*fields(wire.END_FIXED, wire.END_FIELDS), "totals" / GreedyRange(EndStream),
             Terminated)
Command = Struct(*fields(wire.COMMAND_FIXED, wire.COMMAND_FIELDS), "args" / GreedyBytes)
# The config hash reads as hex text (tables write reply fields as JSON).
ConfigSha = ExprAdapter(Bytes(wire.CONFIG_SHA_SIZE), lambda obj, _ctx: bytes(obj).hex(),
                         lambda obj, _ctx: bytes.fromhex(obj))
Info = Struct(*fields(wire.INFO_FIXED, wire.INFO_FIELDS), "config_sha" / ConfigSha,
              "name" / Text, "profile" / Text, Terminated)

# The firmware hash (SPEC 3.11) reads as hex text too.
FwSha = ExprAdapter(Bytes(wire.FW_SHA_SIZE), lambda obj, _ctx: bytes(obj).hex(),
                    lambda obj, _ctx: bytes.fromhex(obj))
Firmware = Struct(*fields(wire.FIRMWARE_FIXED, wire.FIRMWARE_FIELDS), "fw_sha" / FwSha,
                  Terminated)

BODIES: dict[int, Construct] = {
    wire.DESCRIPTOR: Descriptor, wire.SAMPLES: Samples, wire.EVENTS: Events,
    wire.STATUS: Status, wire.SYNC: Sync, wire.ACK: Ack, wire.ERROR: Error, wire.END: End,
    wire.COMMAND: Command, wire.INFO: Info, wire.FIRMWARE: Firmware,
}




def _plain(obj: Any) -> Any:
    """construct containers -> plain dicts and lists (private keys dropped)."""
    if isinstance(obj, dict):
        return {k: _plain(v) for k, v in obj.items() if not k.startswith("_")}
    if isinstance(obj, list):
        return [_plain(v) for v in obj]
    return obj


_FIXED: dict[int, tuple[struct.Struct, tuple[str, ...]]] = {
    wire.STATUS: (struct.Struct(wire.STATUS_BODY), wire.STATUS_FIELDS),
    wire.SYNC: (struct.Struct(wire.SYNC_BODY), wire.SYNC_FIELDS),
    wire.ACK: (struct.Struct(wire.ACK_BODY), wire.ACK_FIELDS),
    wire.ERROR: (struct.Struct(wire.ERROR_BODY), wire.ERROR_FIELDS),
}
_EVENT = struct.Struct(wire.EVENT_ENTRY)
_DESC_FIXED = struct.Struct(wire.DESCRIPTOR_FIXED)
_STREAM_ENTRY = struct.Struct(wire.STREAM_ENTRY)


def _descriptor(payload: bytes) -> dict[str, Any] | None:
    """DESCRIPTOR as the declarative layout reads it, or None where it would fail:
    the fixed fields, then complete stream entries (UTF-8 texts) to the last byte."""
    if len(payload) < _DESC_FIXED.size:
        return None
    f = dict(zip(wire.DESCRIPTOR_FIELDS, _DESC_FIXED.unpack_from(payload)))
    streams = []
    off, end = _DESC_FIXED.size, len(payload)
    while off < end:
        at = off + _STREAM_ENTRY.size
        texts = []
        for _ in range(2):
            if at >= end:
                return None
            stop = at + 1 + payload[at]
            if stop > end:
                return None
            try:
                texts.append(payload[at + 1 : stop].decode("utf8"))
            except UnicodeDecodeError:
                return None
            at = stop
        entry = dict(zip(wire.STREAM_FIELDS, _STREAM_ENTRY.unpack_from(payload, off)))
        entry["name"], entry["unit"] = texts
        streams.append(entry)
        off = at
    f["streams"] = streams
    return f


def parse_body(kind: int, payload: bytes) -> dict[str, Any]:
    """Fields of one known kind's payload (the body after the header)."""
    fixed = _FIXED.get(kind)
    if fixed is not None and len(payload) == fixed[0].size:
        return dict(zip(fixed[1], fixed[0].unpack(payload)))
    if kind == wire.EVENTS and len(payload) % _EVENT.size == 0:
        return {"events": [dict(zip(wire.EVENT_FIELDS, e)) for e in _EVENT.iter_unpack(payload)]}
    if kind == wire.DESCRIPTOR:
        desc = _descriptor(payload)
        if desc is not None:
            return desc
    try:
        return _plain(BODIES[kind].parse(payload))  # type: ignore[no-any-return]
    except (ConstructError, UnicodeDecodeError) as exc:
        raise MalformedFrame(f"{wire.KIND_NAMES[kind]} frame does not match its layout") from exc
