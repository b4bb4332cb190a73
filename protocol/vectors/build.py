"""Write the golden vectors: NN-name.json (case, wire bytes, expected content)
and NN-name.bin (the byte stream a reader is fed, damage applied).

    python protocol/vectors/build.py        # rewrite every vector
    python protocol/vectors/build.py --check  # fail if a stored vector differs

The expected content is derived from the case itself (what was sent, minus
what the damage destroyed), never from the decoder, so the decoder is checked
against it. The fate rule for lost frames is the one in SPEC.md: in a gap of
the sequence, as many frames as there were damaged segments are "corrupt",
the rest "missing".
"""

from __future__ import annotations

import hashlib
import json
import struct
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

import replay  # noqa: E402
import wire  # noqa: E402

H, h_, I_, i_, B, b_, F = ord("H"), ord("h"), ord("I"), ord("i"), ord("B"), ord("b"), ord("f")
WRAP = 1 << 32


def stream(sid, typ, period_us=1000, scale=0.001, offset=0.0, name="ch", unit="V", flags=0):
    return [sid, typ, flags, period_us, scale, offset, name, unit]


def desc(board, run, tick, streams, n_streams=None, max_gap_ms=5000, **kw):
    return {"board": board, "run": run, "op": "descriptor", **kw, "args": {
        "tick": tick, "tick_hz": 1_000_000, "fw": [1, 2, 3], "max_gap_ms": max_gap_ms,
        "n_streams": len(streams) if n_streams is None else n_streams, "streams": streams}}


def samples(board, run, sid, tick, typ, values, **kw):
    return {"board": board, "run": run, "op": "samples", **kw,
            "args": {"stream": sid, "tick": tick, "type": typ, "values": values}}


def status(board, run, tick, **kw):
    a = {"tick": tick, "battery_mv": 3700, "temp_cdeg": 2150, "free_ram": 81234,
         "queue_high": 4, "dropped": 0, "late": 0, "jitter_us": 85}
    a.update(kw.pop("fields", {}))
    return {"board": board, "run": run, "op": "status", **kw, "args": a}


def raw_samples(board, run, sid, tick, values_hex):
    """A SAMPLES frame of any length: stream id and tick32, then the bytes given."""
    payload = struct.pack("<BI", sid, tick & 0xFFFFFFFF).hex() + values_hex
    return {"board": board, "run": run, "op": "raw",
            "args": {"version": wire.VERSION, "kind": wire.SAMPLES, "payload": payload}}


def info(board, run, **args):
    return {"board": board, "run": run, "op": "info", "args": args}


def op(board, run, name, **args):
    seq = args.pop("seq", None)
    o = {"board": board, "run": run, "op": name, "args": args}
    if seq is not None:
        o["seq"] = seq
    return o


CAP = stream(0, h_, 1000, 0.0001, 0.0, "cap_amp", "V")
COIL = stream(1, h_, 1000, 0.001, 0.0, "coil_current", "A")
RAMP = list(range(-56, 56))


def cases():
    """(name, description, ops, damage)."""
    yield ("descriptor", "a run descriptor with one stream", [desc(1, 7, 0, [CAP])], [])
    yield ("samples-i16", "descriptor then one block of signed 16-bit samples",
           [desc(1, 7, 0, [CAP]), samples(1, 7, 0, 1000, h_, [0, 1, -1, 32767, -32768])], [])
    types = [stream(k, t, 500 * (k + 1), 0.5, -1.0, "s" + chr(t), "u")
             for k, t in enumerate((b_, B, h_, H, i_, I_, F))]
    yield ("all-types", "every sample type, descriptor split over two frames",
           [desc(2, 1, 0, types[:4], n_streams=7), desc(2, 1, 10, types[4:], n_streams=7)]
           + [samples(2, 1, s[0], 2000 + s[0], s[1], v) for s, v in zip(types, [
               [-128, 127, 0], [0, 255, 1], [-32768, 32767], [0, 65535],
               [-2147483648, 2147483647], [0, 4294967295], [1.5, -0.25, 1e30]])], [])
    yield ("full-frame", "a 112-sample block: the longest frame, exactly 244 bytes on air",
           [desc(1, 7, 0, [CAP]), samples(1, 7, 0, 5000, h_, RAMP)], [])
    yield ("zeros", "all-zero samples: COBS at its busiest",
           [desc(1, 7, 0, [CAP]), samples(1, 7, 0, 0, h_, [0] * 112)], [])
    yield ("events", "coil polarity changes, a marker, a program step and a safety trip",
           [desc(1, 7, 0, [CAP]),
            op(1, 7, "events", events=[[100, wire.EV_COIL, 1], [1_000_100, wire.EV_COIL, 0],
                                       [2_000_100, wire.EV_COIL, -1], [2_500_000, wire.EV_MARKER, 42],
                                       [3_000_000, wire.EV_STEP, 3], [3_000_001, wire.EV_SAFETY, 2]])],
           [])
    yield ("status", "status frames with edge values",
           [desc(1, 7, 0, [CAP]), status(1, 7, 5_000_000),
            status(1, 7, 10_000_000, fields={"battery_mv": 65535, "temp_cdeg": -4000,
                                             "free_ram": 4294967295, "queue_high": 65535,
                                             "dropped": 4294967295, "late": 7,
                                             "jitter_us": 65535})], [])
    yield ("sync-ack-error", "a time-sync reply, an acknowledgement and a resend error",
           [desc(1, 7, 0, [CAP]),
            op(1, 7, "sync", request=1, host_ns=1_700_000_000_123_456_789, rx_tick=1_000_000,
               tx_tick=1_000_250),
            op(1, 7, "ack", request=2, opcode=wire.CMD_START),
            op(1, 7, "error", request=3, opcode=wire.CMD_RESEND, code=wire.ERR_NOT_HELD,
               detail_a=10, detail_b=20)], [])
    yield ("end", "end of run with per-stream totals",
           [desc(1, 7, 0, [CAP, COIL]), samples(1, 7, 0, 0, h_, [5, 6]),
            samples(1, 7, 1, 0, h_, [7, 8]),
            op(1, 7, "end", tick=2000, reason=1, totals=[[0, 2], [1, 2]])], [])
    yield ("commands", "every command the laptop sends (counted, not tabled)",
           [op(0xFFFF, 0, "start", request=1, duration_s=600, label="run A"),
            op(0xFFFF, 0, "stop", request=2),
            op(0xFFFF, 0, "set_config", request=3, key="rate_hz", value="1000"),
            op(0xFFFF, 0, "ping", request=4, host_ns=123456789012345),
            op(0xFFFF, 0, "resend", request=5, first=100, last=250),
            op(0xFFFF, 0, "status_request", request=6)], [])
    yield ("tick-wrap", "sample blocks across the 2**32 us wrap of the 32-bit frame tick",
           [desc(1, 7, WRAP - 1500, [CAP]), samples(1, 7, 0, WRAP - 1000, h_, [1, 2]),
            samples(1, 7, 0, WRAP + 1000, h_, [3, 4]), status(1, 7, WRAP + 2500),
            samples(1, 7, 0, 3 * WRAP + 5, h_, [9], seq=5000),
            status(1, 7, 3 * WRAP + 10, seq=5001)], [])
    yield ("day-long", "24 hours apart: dozens of wraps, resolved through status anchors",
           [desc(3, 1, 0, [CAP])] + [
               x for k in range(1, 25) for x in (
                   status(3, 1, k * 3_600_000_000, seq=720 * k),
                   samples(3, 1, 0, k * 3_600_000_000 + 1000, h_, [k], seq=720 * k + 1))], [])
    yield ("late-join", "the reader starts inside a frame; samples wait for the next descriptor",
           [desc(1, 7, 0, [CAP]), samples(1, 7, 0, 0, h_, RAMP), samples(1, 7, 0, 112_000, h_, [1]),
            desc(1, 7, 200_000, [CAP]), samples(1, 7, 0, 113_000, h_, [2])],
           [{"frame": 1, "op": "cut_head", "at": 100}])
    yield ("bit-flip", "one flipped bit: that frame is rejected, its neighbours kept",
           [desc(1, 7, 0, [CAP])] + [samples(1, 7, 0, k * 3000, h_, [k, k, k]) for k in range(3)],
           [{"frame": 2, "op": "flip", "byte": 9, "bit": 3}])
    yield ("lost-notification", "a whole frame never arrives",
           [desc(1, 7, 0, [CAP])] + [samples(1, 7, 0, k * 3000, h_, [k, k, k]) for k in range(4)],
           [{"frame": 2, "op": "drop"}])
    yield ("lost-middle", "bytes lost inside a frame (its delimiter kept)",
           [desc(1, 7, 0, [CAP])] + [samples(1, 7, 0, k * 3000, h_, [k + 1] * 3) for k in range(3)],
           [{"frame": 2, "op": "lose", "start": 4, "end": 9}])
    yield ("glued", "a frame's tail and delimiter lost: it glues to the next, both rejected",
           [desc(1, 7, 0, [CAP])] + [samples(1, 7, 0, k * 3000, h_, [k + 1] * 3) for k in range(4)],
           [{"frame": 2, "op": "lose", "start": 10, "end": None}])
    yield ("truncated", "the capture ends inside a frame",
           [desc(1, 7, 0, [CAP])] + [samples(1, 7, 0, k * 3000, h_, [k + 1] * 3) for k in range(3)],
           [{"frame": 3, "op": "truncate", "at": 12}])
    yield ("garbage", "junk bytes (with zeros) between frames",
           [desc(1, 7, 0, [CAP])] + [samples(1, 7, 0, k * 3000, h_, [k + 1] * 3) for k in range(3)],
           [{"frame": 1, "op": "insert_after", "hex": "00deadbeef0011223344556600ff00"}])
    yield ("two-boards", "two boards interleaved on one link",
           [desc(1, 7, 0, [CAP]), desc(2, 3, 50, [COIL])] + [
               x for k in range(3) for x in (samples(1, 7, 0, k * 3000, h_, [k] * 3),
                                             samples(2, 3, 1, 50 + k * 3000, h_, [-k] * 3))], [])
    yield ("reboot", "the board reboots: a new run id and a fresh sequence",
           [desc(1, 7, 0, [CAP]), samples(1, 7, 0, 1000, h_, [1, 2]),
            desc(1, 8, 0, [CAP]), samples(1, 8, 0, 1000, h_, [3, 4])], [])
    yield ("unknown-kind", "a frame kind from a newer sender is skipped but holds its seq",
           [desc(1, 7, 0, [CAP]),
            op(1, 7, "raw", version=1, kind=12, payload="0102030405"),
            samples(1, 7, 0, 1000, h_, [1])], [])
    yield ("unknown-version", "a frame of protocol version 2 is refused and counted",
           [desc(1, 7, 0, [CAP]), op(1, 7, "raw", version=2, kind=2, payload="00e8030000"),
            samples(1, 7, 0, 1000, h_, [1])], [])
    yield ("duplicate", "the same frame arrives twice",
           [desc(1, 7, 0, [CAP]), samples(1, 7, 0, 1000, h_, [1]), samples(1, 7, 0, 2000, h_, [2])],
           [{"frame": 1, "op": "repeat"}])
    yield ("state-stream", "a state channel (coil polarity) flagged for hold-last-value",
           [desc(1, 7, 0, [stream(4, b_, 10_000, 1.0, 0.0, "coil_state", "", wire.FLAG_STATE)]),
            samples(1, 7, 4, 0, b_, [0, 1, 1, 0, -1])], [])
    yield ("authenticated-commands",
           "sealed start and stop (SPEC 3.9.1), key = bytes 0x00..0x1f, counters 1 and 2",
           [sealed(0, wire.CMD_START, 1, struct.pack("<I", 60) + b"\x02ab", 1),
            sealed(1, wire.CMD_STOP, 2, b"", 2)], [])
    yield ("info", "INFO replies (a keyed board mid-run, coil on, with a mirror; edge values) and the "
           "INFO command, plain and sealed",
           [info(1, 7, request=3, tick=3_600_000_000, fw=[0, 3, 0],
               flags=wire.INFO_KEYED | wire.INFO_RUNNING | wire.INFO_MIRROR | wire.INFO_COIL_ON,
               counter_floor=65,
               mirror_bytes=123_456, config_sha=INFO_SHA, name="rotor-a",
               profile="esp32-devkitc"),
            info(2, 1, request=65535, tick=(1 << 64) - 1, fw=[255, 255, 255],
               flags=(wire.INFO_CONFIG_FALLBACK | wire.INFO_CONFIG_SAVED
                      | wire.INFO_NO_CONFIG_FILE), counter_floor=0xFFFFFFFF,
               mirror_bytes=0xFFFFFFFF, config_sha="00" * wire.CONFIG_SHA_SIZE,
               name="rotor-\u00e4" + "x" * 12, profile="p" * wire.MAX_TEXT),
            op(0xFFFF, 0, "info_request", request=4),
            sealed(1, wire.CMD_INFO, 5, b"", 3)], [])
    # The end of a run first (a capture), then its start (the mirror read after it): the
    # late DESCRIPTOR and STATUS are kept references, so the early frames resolve exactly
    # although the latest reference is 5000 frames (over 2**32 us) away.
    yield ("late-anchor", "a reference that arrives late (the run's start after its end) "
           "resolves the frames beside it",
           [status(4, 2, 5_000_000_000, seq=5000),
            samples(4, 2, 0, 5_000_500_000, h_, [50, 51], seq=5001),
            desc(4, 2, 0, [CAP], seq=0),
            samples(4, 2, 0, 1000, h_, [1, 2], seq=1),
            op(4, 2, "events", events=[[2500, wire.EV_MARKER, 7]], seq=2),
            status(4, 2, 3000, seq=3),
            samples(4, 2, 0, 3000, h_, [3], seq=4)], [])
    # SAMPLES checks in their order: too short, then the stream (undefined, or of a type
    # this release does not read), then whole samples.
    yield ("samples-checks", "the checks on a SAMPLES body, in order: length, stream, "
           "whole samples",
           [desc(1, 7, 0, [CAP, stream(1, ord("q"), 1000, 1.0, 0.0, "wide", "V")]),
            raw_samples(1, 7, 9, 1000, "010203"),     # undefined stream, odd length: undecodable
            raw_samples(1, 7, 1, 1000, "01020304"),   # a type this release does not read
            raw_samples(1, 7, 0, 1000, "010203"),     # 3 bytes of int16: malformed
            raw_samples(1, 7, 9, 1000, ""),           # no sample at all: malformed first
            samples(1, 7, 0, 2000, h_, [5])], [])
    yield ("duplicate-damage", "a duplicate is a frame of the run that arrived: damage "
           "before it is not charged to the next gap",
           [desc(1, 7, 0, [CAP])] + [samples(1, 7, 0, k * 3000, h_, [k]) for k in range(4)],
           [{"frame": 3, "op": "flip", "byte": 9, "bit": 3},
            {"frame": 3, "op": "copy_after", "copy": 2}])
    yield ("reply-after-end", "replies after END (seqs at or past its frame count) are not "
           "frames of the run",
           [desc(1, 7, 0, [CAP]), samples(1, 7, 0, 0, h_, [5, 6]),
            op(1, 7, "end", tick=2000, reason=1, totals=[[0, 2]]),
            op(1, 7, "sync", request=9, host_ns=77, rx_tick=3000, tx_tick=3100),
            op(1, 7, "ack", request=10, opcode=wire.CMD_STATUS, seq=5),
            status(1, 7, 4000, seq=6)], [])
    yield ("events-undescribed", "a run that never sent a descriptor: its events are exact "
           "within 31 frames of a reference (the largest max_gap_ms a descriptor can carry), "
           "its samples undecodable, a SAMPLES body with no sample malformed",
           [status(1, 3, 10_000_000),
            op(1, 3, "events", events=[[10_000_800, wire.EV_CONN_INTERVAL, 15000]]),
            raw_samples(1, 3, 0, 10_001_000, "0100"),
            raw_samples(1, 3, 0, 10_002_000, ""),
            op(1, 3, "events", events=[[2_010_000_000, wire.EV_LINK, 1]], seq=31)], [])
    yield ("tick-limit", "an anchor whose tick is 2**62 us or later is malformed",
           [desc(1, 7, 0, [CAP]), status(1, 7, 1 << 62), samples(1, 7, 0, 1000, h_, [1])], [])
    yield ("firmware", "FIRMWARE replies (SPEC 3.11: a board with two code files, one with none) "
           "and the FIRMWARE command, plain and sealed",
           [op(1, 7, "firmware", request=9, files=len(FW_FILES),
               size=sum(len(d) for d in FW_FILES.values()), fw_sha=FW_SHA),
            op(2, 1, "firmware", request=65535, files=0, size=0,
               fw_sha="00" * wire.FW_SHA_SIZE),
            op(0xFFFF, 0, "command", opcode=wire.CMD_FIRMWARE, request=8, args=""),
            sealed(1, wire.CMD_FIRMWARE, 9, b"", 4)], [])


AUTH_KEY = bytes(range(32))  # the vector's key (common practice: any 32 bytes)
# INFO's config_sha: the first 8 bytes of SHA-256 (FIPS 180-4, CPython's hashlib) over
# a config file's bytes as `slipless flash` writes them (compact JSON).
INFO_CONFIG_TEXT = b'{"board_id":1,"name":"rotor-a"}'
INFO_SHA = hashlib.sha256(INFO_CONFIG_TEXT).digest()[: wire.CONFIG_SHA_SIZE].hex()


# FIRMWARE's fw_sha (SPEC 3.11): SHA-256 (FIPS 180-4, CPython's hashlib) over the code
# files in bytewise path order, each as path, 0x00, u32 LE size, bytes. Invented files.
FW_FILES = {"/main.py": b"import board\n", "/lib/wire.mpy": bytes(range(0x4D, 0x4D + 40))}


def _fw_sha(files):
    h = hashlib.sha256()
    for path in sorted(files):
        h.update(path.encode() + b"\x00" + struct.pack("<I", len(files[path])) + files[path])
    return h.digest()[: wire.FW_SHA_SIZE].hex()


FW_SHA = _fw_sha(FW_FILES)


def sealed(seq, opcode, request, args, counter):
    """A COMMAND op whose arguments end with counter + HMAC-SHA256 tag (RFC 2104,
    computed with CPython's hmac), for the laptop encoder's seq-th frame."""
    import hmac

    op_ = opcode | wire.AUTH_FLAG
    msg = (struct.pack(wire.HEADER, (wire.VERSION << 4) | wire.COMMAND, 0xFFFF, 0, seq)
           + struct.pack(wire.COMMAND_FIXED, op_, request) + args + struct.pack("<I", counter))
    tail = (msg + hmac.new(AUTH_KEY, msg, "sha256").digest())[wire.HEADER_SIZE + 3 :]
    return op(0xFFFF, 0, "command", opcode=op_, request=request, args=tail.hex())


# ---- damage ---------------------------------------------------------------------
def apply_damage(frames, damage):
    """Return (stream bytes, per-frame fate before gap rules, damaged segments, skipped)."""
    pieces = [bytearray(f) for f in frames]
    lost = {}  # frame index -> "corrupt" | "missing"
    damaged = {}  # frame index after which a damaged segment ends -> count
    skipped = 0
    extra = {}
    for d in damage:
        i, kind = d["frame"], d["op"]
        f = pieces[i]
        if kind == "flip":
            f[d["byte"]] ^= 1 << d["bit"]
            assert f[d["byte"]] != 0 and d["byte"] < len(f) - 1, "flip must not make a delimiter"
            lost[i] = "corrupt"
            damaged[i] = damaged.get(i, 0) + 1
        elif kind == "drop":
            pieces[i] = bytearray()
            lost[i] = "missing"
        elif kind == "lose":
            end = len(f) if d["end"] is None else d["end"]
            del f[d["start"] : end]
            lost[i] = "corrupt"
            if d["end"] is None:  # delimiter gone: glued to the next frame
                lost[i + 1] = "corrupt"
                damaged[i + 1] = damaged.get(i + 1, 0) + 1
            else:
                damaged[i] = damaged.get(i, 0) + 1
        elif kind == "cut_head":
            del f[: d["at"]]
            skipped += len(f)
            lost[i] = "missing"
            for j in range(i):
                pieces[j] = bytearray()
                lost[j] = "missing"
        elif kind == "truncate":
            del f[d["at"] :]
            lost[i] = "missing"
            for j in range(i + 1, len(pieces)):
                pieces[j] = bytearray()
                lost[j] = "missing"
        elif kind == "insert_after":
            extra[i] = bytes.fromhex(d["hex"])
        elif kind == "repeat":
            extra[i] = bytes(f)
        elif kind == "copy_after":  # another frame's copy arrives after this one
            extra[i] = extra.get(i, b"") + bytes(frames[d["copy"]])
        else:
            raise ValueError(kind)
    out = bytearray()
    for i, f in enumerate(pieces):
        out += f
        out += extra.get(i, b"")
    return bytes(out), lost, damaged, skipped


# ---- expected content -------------------------------------------------------------
def expected(case_ops, frames, lost, damaged, damage):
    seqs = _seqs(case_ops)
    junk = [d for d in damage if d["op"] == "insert_after"]
    exp = {"samples": [], "events": [], "status": [], "replies": [], "frames": [], "streams": [],
           "counters": {"damaged_segments": sum(damaged.values()) + _junk_segments(junk),
                        "commands": 0, "unknown_kind": 0, "bad_version": 0, "malformed": 0,
                        "undecodable": 0}}
    periods = {}  # from every descriptor that arrives: held samples wait for one
    types = {}
    for i, o in enumerate(case_ops):
        if o["op"] == "descriptor" and i not in lost:
            for s in o["args"]["streams"]:
                if s[1] in wire.SAMPLE_SIZES:  # (an entry of an unknown type is ignored)
                    periods[((o["board"], o["run"]), s[0])] = s[3]
                    types[((o["board"], o["run"]), s[0])] = s[1]
    exp["streams"] = sorted([k[0][0], k[0][1], k[1]] for k in periods)
    ends = {}  # run -> END's frame count: seqs at or past it are replies (SPEC 3.8)
    received = {}
    for i, (o, seq) in enumerate(zip(case_ops, seqs)):
        key = (o["board"], o["run"])
        if i in lost:
            continue
        if o["op"] in ("start", "stop", "set_config", "ping", "resend", "status_request",
                       "info_request", "command"):
            exp["counters"]["commands"] += 1
            continue
        if o["op"] == "raw" and o["args"]["version"] != wire.VERSION:
            exp["counters"]["bad_version"] += 1
            continue
        if key in ends and seq >= ends[key]:
            exp["frames"].append([key[0], key[1], seq, "reply"])
        else:
            received.setdefault(key, []).append(seq)
        if o["op"] == "end":
            ends[key] = seq + 1
        if o["op"] == "raw" and o["args"]["kind"] == wire.SAMPLES:
            _raw_samples(exp, o, key, seq, periods, types)
            continue
        if o["op"] == "raw":
            exp["counters"]["unknown_kind"] += 1
            continue
        if o["op"] == "status" and o["args"]["tick"] >= TICK_MAX:
            exp["counters"]["malformed"] += 1  # past any board's time (SPEC 5)
            continue
        _content(exp, o, key, seq, periods)
    for d in damage:
        if d["op"] in ("repeat", "copy_after"):
            o = case_ops[d.get("copy", d["frame"])]
            exp["frames"].append([o["board"], o["run"], seqs[d.get("copy", d["frame"])],
                                  "duplicate"])
    for key, got in received.items():
        high = max(got)  # an END frame is always the last of its run
        gap_damage = _gap_damage(case_ops, seqs, key, lost, damaged, damage)
        run_lost = []
        for seq in range(high + 1):
            if seq in got:
                exp["frames"].append([key[0], key[1], seq, "received"])
            else:
                run_lost.append(seq)
        for seq in run_lost:
            fate = "corrupt" if gap_damage.get(seq) else "missing"
            exp["frames"].append([key[0], key[1], seq, fate])
    for k in ("samples", "events", "status", "replies", "frames"):
        exp[k].sort()
    exp["frames"] = compress_fates(exp["frames"])
    return exp


TICK_MAX = 1 << 62  # board time ends here (SPEC 5)


def _raw_samples(exp, o, key, seq, periods, types):
    """SPEC 4's checks on a SAMPLES body, in order: at least one sample byte, a
    stream the descriptor defines with a type this release reads, whole samples."""
    payload = bytes.fromhex(o["args"]["payload"])
    sid = payload[0] if payload else None
    if len(payload) < 6:
        exp["counters"]["malformed"] += 1
    elif (key, sid) not in types:
        exp["counters"]["undecodable"] += 1
    elif (len(payload) - 5) % wire.SAMPLE_SIZES[types[(key, sid)]]:
        exp["counters"]["malformed"] += 1
    else:
        tick = struct.unpack_from("<I", payload, 1)[0]
        fmt = "<" + chr(types[(key, sid)])
        for k, (v,) in enumerate(struct.iter_unpack(fmt, payload[5:])):
            exp["samples"].append([key[0], key[1], sid, seq, tick + k * periods[(key, sid)], v])


def compress_fates(rows):
    """[board, run, seq, fate] rows -> [board, run, first, last, fate] runs."""
    out = []
    for b, r, seq, fate in sorted(rows, key=lambda x: (x[0], x[1], x[2], x[3])):
        if out and out[-1][:2] == [b, r] and out[-1][3] == seq - 1 and out[-1][4] == fate:
            out[-1][3] = seq
        else:
            out.append([b, r, seq, seq, fate])
    return out


def _junk_segments(junk):
    # Junk with zeros splits into segments; each non-empty one fails its CRC.
    n = 0
    for d in junk:
        n += sum(1 for part in bytes.fromhex(d["hex"]).split(b"\x00")[:-1] if part)
        tail = bytes.fromhex(d["hex"]).split(b"\x00")[-1]
        n += 1 if tail else 0  # the tail glues to the next frame and spoils it
    return n


def _gap_damage(ops, seqs, key, lost, damaged, damage):
    """seq -> True where the SPEC rule calls the lost frame corrupt. Every frame of
    the run that arrives (a duplicate copy too) ends the damage count (SPEC 6)."""
    out = {}
    run = [(i, s) for i, (o, s) in enumerate(zip(ops, seqs)) if (o["board"], o["run"]) == key]
    copies = {d["frame"] for d in damage if d["op"] in ("repeat", "copy_after")
              and (ops[d.get("copy", d["frame"])]["board"],
                   ops[d.get("copy", d["frame"])]["run"]) == key}
    pending = []
    budget = 0
    for i, s in run:
        budget += sum(c for j, c in damaged.items() if j == i)
        if i in lost:
            pending.append(s)
        else:
            for s2 in sorted(pending)[:budget]:
                out[s2] = True
            pending, budget = [], 0
        if i in copies:  # a copy of a frame of the run arrived after this one
            budget = 0
    return out


def _seqs(ops):
    counters = {}
    out = []
    for o in ops:
        key = (o["board"], o["run"])
        seq = o.get("seq", counters.get(key, 0))
        out.append(seq)
        counters[key] = seq + 1
    return out


def _content(exp, o, key, seq, periods):
    b, r = key
    a = o["args"]
    if o["op"] == "samples":
        period = periods.get((key, a["stream"]))
        for k, v in enumerate(a["values"]):
            if a["type"] == F:
                v = struct.unpack("<f", struct.pack("<f", v))[0]
            exp["samples"].append([b, r, a["stream"], seq, a["tick"] + k * period, v])
    elif o["op"] == "events":
        for t, code, value in a["events"]:
            exp["events"].append([b, r, seq, t, code, value])
    elif o["op"] == "status":
        exp["status"].append([b, r, seq, a["tick"], a["battery_mv"], a["temp_cdeg"],
                              a["free_ram"], a["queue_high"], a["dropped"], a["late"],
                              a["jitter_us"]])
    elif o["op"] in ("sync", "ack", "error", "end", "info", "firmware"):
        exp["replies"].append([b, r, seq, o["op"]])


def build_all():
    out = {}
    for n, (name, text, ops, damage) in enumerate(cases(), start=1):
        case = {"name": name, "description": text, "ops": ops, "damage": damage}
        frames = replay.build(case)
        stream_bytes, lost, damaged, skipped = apply_damage(frames, damage)
        case["wire"] = [f.hex() for f in frames]
        case["expect"] = expected(ops, frames, lost, damaged, damage)
        if skipped:
            case["expect"]["counters"]["skipped_bytes"] = skipped
        stem = f"{n:02d}-{name}"
        out[stem] = (json.dumps(case, indent=1) + "\n", stream_bytes)
    return out


def main(argv):
    check = "--check" in argv
    bad = []
    for stem, (text, data) in build_all().items():
        jp, bp = HERE / f"{stem}.json", HERE / f"{stem}.bin"
        if check:
            if not jp.exists() or jp.read_text() != text or bp.read_bytes() != data:
                bad.append(stem)
        else:
            jp.write_text(text)
            bp.write_bytes(data)
    if bad:
        print("vectors out of date: " + ", ".join(bad))
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
