"""slipless wire format, version 1: the one source of truth for both sides.

Runs unchanged under MicroPython (on the board) and CPython (on the laptop):
constants, frame layouts, COBS framing, CRC-32, the frame encoder and a
reference deframer. No I/O: bytes in, frames out; fields in, bytes out.
protocol/SPEC.md describes the same thing in prose and diagrams.

A frame on the wire is  COBS(body + CRC32(body)) + 0x00.
Every body starts with the 9-byte header  vk, board, run, seq  (see HEADER).
"""

import struct

try:  # MicroPython folds const() at compile time; CPython just needs a no-op.
    from micropython import const
except ImportError:  # pragma: no cover - CPython

    def const(x):  # type: ignore[misc]  # the stubs type MicroPython's const generically
        return x


from binascii import crc32

VERSION = const(1)

# Frame kinds (low nibble of the first body byte).
DESCRIPTOR = const(1)
SAMPLES = const(2)
EVENTS = const(3)
STATUS = const(4)
SYNC = const(5)
ACK = const(6)
ERROR = const(7)
END = const(8)
COMMAND = const(9)
INFO = const(10)  # the board's identity and state, answering CMD_INFO
FIRMWARE = const(11)  # the hash of the board's code files, answering CMD_FIRMWARE
KIND_NAMES = {
    1: "descriptor", 2: "samples", 3: "events", 4: "status", 5: "sync",
    6: "ack", 7: "error", 8: "end", 9: "command", 10: "info", 11: "firmware",
}

# Command opcodes (first byte of a COMMAND body after the header).
CMD_START = const(1)
CMD_STOP = const(2)
CMD_SET_CONFIG = const(3)
CMD_PING = const(4)
CMD_RESEND = const(5)
CMD_STATUS = const(6)
CMD_PULL = const(7)  # stream the board's file mirror over the link
CMD_INFO = const(8)  # answered by one INFO frame
CMD_FIRMWARE = const(9)  # answered by one FIRMWARE frame (or ERROR busy during a run)
COMMAND_NAMES = {1: "start", 2: "stop", 3: "set_config", 4: "ping", 5: "resend", 6: "status",
                 7: "pull", 8: "info", 9: "firmware"}
# Opcode bit: the arguments end with u32 counter + 32-byte HMAC-SHA256 tag (SPEC 3.9.1).
AUTH_FLAG = const(0x80)
AUTH_TRAILER_SIZE = const(36)
# Opcodes a board with a key runs only when authenticated (they change its state).
GUARDED = (1, 2, 3, 7)  # start, stop, set_config, pull

# Error codes carried by ERROR frames.
ERR_BAD_COMMAND = const(1)
ERR_BAD_ARGUMENT = const(2)
ERR_NOT_HELD = const(3)  # resend range no longer in the board's ring: detail = first, last
ERR_BUSY = const(4)
ERR_REFUSED = const(5)  # refused for safety (coil limits, no run)
ERR_NO_MIRROR = const(6)  # PULL: the board keeps no file mirror
ERR_AUTH = const(7)  # not authenticated: detail_a = last counter accepted, detail_b = why
ERROR_NAMES = {1: "bad_command", 2: "bad_argument", 3: "not_held", 4: "busy", 5: "refused",
               6: "no_mirror", 7: "auth"}
AUTH_WHY_NAMES = {1: "missing", 2: "bad_tag", 3: "old_counter", 4: "no_key", 5: "store_failed"}

# Event codes carried by EVENTS frames.
EV_COIL = const(1)  # value: coil polarity now -1, 0 or +1
EV_MARKER = const(2)  # value: user marker number
EV_STEP = const(3)  # value: index of the pulse-program step just entered
EV_SAFETY = const(4)  # value: reason the board forced the coil off
EV_LINK = const(5)  # value: 1 link up, 0 link down
# The central changed the connection's parameters (the stack's connection-update
# event): one event each, at the same tick, so a run's record shows the link it had.
EV_CONN_INTERVAL = const(6)  # value: connection interval in microseconds
EV_CONN_LATENCY = const(7)  # value: peripheral latency in connection events
EV_CONN_TIMEOUT = const(8)  # value: supervision timeout in milliseconds
EVENT_NAMES = {1: "coil", 2: "marker", 3: "step", 4: "safety", 5: "link", 6: "conn_interval",
               7: "conn_latency", 8: "conn_timeout"}

# END reasons.
END_REASON_NAMES = {1: "stop_command", 2: "program_done", 3: "error", 4: "low_battery", 5: "link_lost"}

# Stream flags (descriptor, per stream).
FLAG_STATE = const(1)  # a state channel (hold previous value), not an analog one

# Sample types: the struct letter itself is the type byte on the wire.
SAMPLE_SIZES = {0x62: 1, 0x42: 1, 0x68: 2, 0x48: 2, 0x69: 4, 0x49: 4, 0x66: 4}  # b B h H i I f

# ---- layouts (little-endian, no padding) ------------------------------------
HEADER = "<BHHI"  # vk = version << 4 | kind, board id, run id, seq
HEADER_SIZE = const(9)
DESCRIPTOR_FIXED = "<QIBBBHB"  # tick, tick_hz, fw major/minor/patch, max_gap_ms, n_streams
DESCRIPTOR_FIXED_SIZE = const(18)
STREAM_ENTRY = "<BBBIff"  # stream, type, flags, period_us, scale, offset; then name, unit
STREAM_ENTRY_SIZE = const(15)
SAMPLES_FIXED = "<BI"  # stream, tick32 of the first sample; then the values
SAMPLES_FIXED_SIZE = const(5)
EVENT_ENTRY = "<IBi"  # tick32, code, value
EVENT_ENTRY_SIZE = const(9)
STATUS_BODY = "<QHhIHIIH"  # tick, battery_mv, temp_cdeg, free_ram, queue_high, dropped, late, jitter_us
STATUS_BODY_SIZE = const(28)
SYNC_BODY = "<HQQQ"  # request, host_ns, rx_tick, tx_tick
SYNC_BODY_SIZE = const(26)
ACK_BODY = "<HB"  # request, opcode
ACK_BODY_SIZE = const(3)
ERROR_BODY = "<HBBII"  # request, opcode, code, detail_a, detail_b
ERROR_BODY_SIZE = const(12)
END_FIXED = "<QIB"  # tick, frames in run (incl. this one), reason; then stream totals
END_FIXED_SIZE = const(13)
END_STREAM = "<BI"  # stream, samples produced in the run
END_STREAM_SIZE = const(5)
INFO_FIXED = "<HQBBBBII"  # request, tick, fw major/minor/patch, flags, counter_floor, mirror_bytes
INFO_FIXED_SIZE = const(22)  # then config_sha (CONFIG_SHA_SIZE bytes), name, profile (texts)
CONFIG_SHA_SIZE = const(8)  # first bytes of SHA-256 of the board's /config.json: a check, not a seal
FIRMWARE_FIXED = "<HHI"  # request, files hashed, their bytes; then fw_sha (FW_SHA_SIZE bytes)
FIRMWARE_FIXED_SIZE = const(8)
FW_SHA_SIZE = const(8)  # first bytes of SHA-256 over the board's code files (SPEC 3.11)
COMMAND_FIXED = "<BH"  # opcode, request; then the arguments
COMMAND_FIXED_SIZE = const(3)
START_ARGS = "<I"  # duration_s (0: until stop); then label (short string)
PING_ARGS = "<Q"  # host_ns
RESEND_ARGS = "<II"  # first seq, last seq (inclusive)

# Field names, in layout order (the host builds its declarative parsers from
# these and the formats above, so the two cannot drift apart).
HEADER_FIELDS = ("vk", "board", "run", "seq")
DESCRIPTOR_FIELDS = ("tick", "tick_hz", "fw_major", "fw_minor", "fw_patch", "max_gap_ms", "n_streams")
STREAM_FIELDS = ("stream", "type", "flags", "period_us", "scale", "offset")
SAMPLES_FIELDS = ("stream", "tick32")
EVENT_FIELDS = ("tick32", "code", "value")
STATUS_FIELDS = ("tick", "battery_mv", "temp_cdeg", "free_ram", "queue_high", "dropped", "late",
                 "jitter_us")
SYNC_FIELDS = ("request", "host_ns", "rx_tick", "tx_tick")
ACK_FIELDS = ("request", "opcode")
ERROR_FIELDS = ("request", "opcode", "code", "detail_a", "detail_b")
END_FIELDS = ("tick", "frames", "reason")
END_STREAM_FIELDS = ("stream", "samples")
COMMAND_FIELDS = ("opcode", "request")
INFO_FIELDS = ("request", "tick", "fw_major", "fw_minor", "fw_patch", "flags", "counter_floor",
               "mirror_bytes")
FIRMWARE_FIELDS = ("request", "files", "size")
# INFO flags (one bit each; the rest are zero).
INFO_KEYED = const(1)  # the board has a key: start/stop/set_config/pull must be sealed
INFO_RUNNING = const(2)  # a run is going (the header's run id is that run)
INFO_CONFIG_FALLBACK = const(4)  # /config.json was refused at boot: the last good one (or defaults) runs
INFO_CONFIG_SAVED = const(8)  # set_config wrote a new /config.json since boot: it runs from the next boot
INFO_NO_CONFIG_FILE = const(16)  # no /config.json to hash: config_sha is all zeros
INFO_MIRROR = const(32)  # the board keeps a file mirror (mirror_bytes is its size)
INFO_COIL_ON = const(64)  # the coil is energised now (either polarity)
INFO_FLAG_NAMES = {1: "keyed", 2: "running", 4: "config_fallback", 8: "config_saved",
                   16: "no_config_file", 32: "mirror", 64: "coil_on"}

# ---- BLE GATT identity (our own random 128-bit UUIDs) -------------------------
SERVICE_UUID = "c3f6d394-a77f-46d8-8777-2be58d2f9a9c"
DATA_UUID = "76cb2b59-f8d4-4509-9517-5339bb80faf0"  # notify: board -> laptop byte stream
COMMAND_UUID = "0913ba47-8c7f-4c02-955f-c9b54d9cef23"  # write: laptop -> board byte stream

# ---- limits -------------------------------------------------------------------
# One frame must fit one 244-byte BLE notification (ATT MTU 247). COBS adds one
# byte for bodies under 255 bytes and the delimiter one more:
# 9..238 body + 4 CRC + 1 COBS + 1 delimiter <= 244.
MAX_WIRE = const(244)
MAX_BODY = const(238)
MAX_ENCODED = const(243)  # longest COBS segment between delimiters that can be valid
MIN_BODY = const(9)
CRC_SIZE = const(4)
MAX_TEXT = const(32)  # names, units, labels, config keys and values
TICK_WRAP = 1 << 32  # frames carry 32-bit ticks in SAMPLES and EVENTS
DEFAULT_MAX_GAP_MS = const(5000)


# ---- the firmware hash (SPEC 3.11): the same rule on the board and the laptop -----
CODE_DIRS = ("/", "/lib/")  # where the board imports code from (sys.path '' and /lib)


def is_code_path(path):
    """A file FIRMWARE hashes: *.py or *.mpy directly in / or /lib."""
    if not (path.endswith(".py") or path.endswith(".mpy")):
        return False
    cut = path.rfind("/") + 1
    return path[:cut] in CODE_DIRS and cut < len(path)


def firmware_file_prefix(path, size):
    """What goes into the hash before a file's bytes: its board path (UTF-8), 0x00 and
    its size as u32 LE, so a renamed or resized file changes the hash too."""
    raw = path.encode()
    return raw + b"\x00" + struct.pack("<I", size)


def max_samples(type_code):
    """How many samples of one type fill a SAMPLES frame."""
    return (MAX_BODY - HEADER_SIZE - SAMPLES_FIXED_SIZE) // SAMPLE_SIZES[type_code]


# ---- COBS (Cheshire and Baker, 1999) ------------------------------------------
def cobs_encode_into(src, n, dst):
    """COBS-encode src[:n] into dst; return the encoded length (no delimiter).

    Allocation-free so the board can run it per frame. A full 254-byte block
    at the very end gets no extra empty block (same output as the usual
    reference encoders).
    """
    code_at = 0
    code = 1
    o = 1
    i = 0
    while i < n:
        b = src[i]
        i += 1
        if b == 0:
            dst[code_at] = code
            code_at = o
            o += 1
            code = 1
        else:
            dst[o] = b
            o += 1
            code += 1
            if code == 0xFF and i < n:
                dst[code_at] = code
                code_at = o
                o += 1
                code = 1
    dst[code_at] = code
    return o


def cobs_decode_into(src, n, dst):
    """Decode COBS src[:n] into dst; return the length, or -1 if src is not COBS."""
    i = 0
    o = 0
    while i < n:
        code = src[i]
        if code == 0:
            return -1
        end = i + code
        if end > n:
            return -1
        i += 1
        while i < end:
            b = src[i]
            if b == 0:
                return -1
            dst[o] = b
            o += 1
            i += 1
        if code != 0xFF and i < n:
            dst[o] = 0
            o += 1
    return o


def cobs_encode(data):
    """Convenience form for the host and tests."""
    out = bytearray(len(data) + len(data) // 254 + 2)
    return bytes(out[: cobs_encode_into(data, len(data), out)])


def cobs_decode(data):
    """Convenience form; raises ValueError on input that is not COBS."""
    out = bytearray(len(data))
    n = cobs_decode_into(data, len(data), out)
    if n < 0:
        raise ValueError("not a COBS block")
    return bytes(out[:n])


# ---- encoder --------------------------------------------------------------------
class Encoder:
    """Builds frames for one board and run into preallocated buffers.

    Each builder returns the wire length n; the frame is self.out[:n]
    (delimiter included). `frame(n)` copies it out for callers that want bytes.
    The sequence number advances with every frame built.
    """

    def __init__(self, board, run, seq=0):
        self.board = board
        self.run = run
        self.seq = seq
        self.body = bytearray(MAX_BODY + CRC_SIZE)
        self.out = bytearray(MAX_WIRE)

    def begin(self, kind, body=None):
        """Write the header into body (default self.body); return where the fields start."""
        if body is None:
            body = self.body
        struct.pack_into(HEADER, body, 0, (VERSION << 4) | kind, self.board, self.run, self.seq)
        return HEADER_SIZE

    def finish(self, n, body=None, dst=None):
        """Seal body[:n] with its CRC and COBS-encode it into dst (default
        self.out), delimiter included; return the wire length. The board
        passes its own per-stream body and a ring slot so nothing is copied."""
        if body is None:
            body = self.body
        if dst is None:
            dst = self.out
        if n < HEADER_SIZE or n > MAX_BODY:
            raise ValueError("frame body length out of range")
        self.crc_into(body, n)
        m = cobs_encode_into(body, n + CRC_SIZE, dst)
        dst[m] = 0
        self.seq += 1
        return m + 1

    @staticmethod
    def crc_into(body, n):
        """Append CRC-32 of body[:n] at body[n:n + 4], little-endian.

        The board replaces this with an allocation-free version (firmware/crc.py):
        binascii.crc32 returns an int that needs the heap once it passes 2**30.
        """
        c = crc32(memoryview(body)[:n])
        struct.pack_into("<HH", body, n, c & 0xFFFF, (c >> 16) & 0xFFFF)

    def frame(self, n):
        return bytes(self.out[:n])

    def _text(self, off, text):
        raw = text.encode() if isinstance(text, str) else bytes(text)
        if len(raw) > MAX_TEXT:
            raise ValueError("text longer than MAX_TEXT bytes")
        self.body[off] = len(raw)
        self.body[off + 1 : off + 1 + len(raw)] = raw
        return off + 1 + len(raw)

    # -- board -> laptop --
    def descriptor(self, tick, tick_hz, fw, max_gap_ms, n_streams, streams):
        """streams: sequence of (stream, type, flags, period_us, scale, offset, name, unit)."""
        off = self.begin(DESCRIPTOR)
        struct.pack_into(DESCRIPTOR_FIXED, self.body, off, tick, tick_hz, fw[0], fw[1], fw[2],
                         max_gap_ms, n_streams)
        off += DESCRIPTOR_FIXED_SIZE
        for s in streams:
            if off + STREAM_ENTRY_SIZE + 2 + len(s[6]) + len(s[7]) > MAX_BODY:
                raise ValueError("descriptor too long: split the streams over several frames")
            struct.pack_into(STREAM_ENTRY, self.body, off, s[0], s[1], s[2], s[3], s[4], s[5])
            off = self._text(off + STREAM_ENTRY_SIZE, s[6])
            off = self._text(off, s[7])
        return self.finish(off)

    def begin_samples(self, stream, tick32):
        """Start a SAMPLES frame; the caller packs values from the returned offset."""
        off = self.begin(SAMPLES)
        struct.pack_into(SAMPLES_FIXED, self.body, off, stream, tick32 & 0xFFFFFFFF)
        return off + SAMPLES_FIXED_SIZE

    def samples(self, stream, tick, type_code, values):
        off = self.begin_samples(stream, tick)
        size = SAMPLE_SIZES[type_code]
        if off + size * len(values) > MAX_BODY:
            raise ValueError("too many samples for one frame")
        fmt = "<" + chr(type_code)
        for v in values:
            struct.pack_into(fmt, self.body, off, v)
            off += size
        return self.finish(off)

    def events(self, items):
        """items: sequence of (tick, code, value)."""
        off = self.begin(EVENTS)
        if off + EVENT_ENTRY_SIZE * len(items) > MAX_BODY:
            raise ValueError("too many events for one frame")
        for tick, code, value in items:
            struct.pack_into(EVENT_ENTRY, self.body, off, tick & 0xFFFFFFFF, code, value)
            off += EVENT_ENTRY_SIZE
        return self.finish(off)

    def status(self, tick, battery_mv, temp_cdeg, free_ram, queue_high, dropped, late, jitter_us):
        off = self.begin(STATUS)
        struct.pack_into(STATUS_BODY, self.body, off, tick, battery_mv, temp_cdeg, free_ram,
                         queue_high, dropped, late, jitter_us)
        return self.finish(off + STATUS_BODY_SIZE)

    def sync(self, request, host_ns, rx_tick, tx_tick):
        off = self.begin(SYNC)
        struct.pack_into(SYNC_BODY, self.body, off, request, host_ns, rx_tick, tx_tick)
        return self.finish(off + SYNC_BODY_SIZE)

    def ack(self, request, opcode):
        off = self.begin(ACK)
        struct.pack_into(ACK_BODY, self.body, off, request, opcode)
        return self.finish(off + ACK_BODY_SIZE)

    def error(self, request, opcode, code, detail_a=0, detail_b=0):
        off = self.begin(ERROR)
        struct.pack_into(ERROR_BODY, self.body, off, request, opcode, code, detail_a, detail_b)
        return self.finish(off + ERROR_BODY_SIZE)

    def end(self, tick, reason, totals):
        """totals: sequence of (stream, samples produced). frames counts this END too."""
        off = self.begin(END)
        struct.pack_into(END_FIXED, self.body, off, tick, self.seq + 1, reason)
        off += END_FIXED_SIZE
        for stream, count in totals:
            struct.pack_into(END_STREAM, self.body, off, stream, count)
            off += END_STREAM_SIZE
        return self.finish(off)

    def info_body(self, request, tick, fw, flags, counter_floor, mirror_bytes, config_sha, name,
                  profile):
        """Write an INFO body into self.body; return its length. The board seals it
        into a ring slot (Framer.emit); info() seals it into self.out."""
        off = self.begin(INFO)
        struct.pack_into(INFO_FIXED, self.body, off, request, tick, fw[0], fw[1], fw[2], flags,
                         counter_floor, mirror_bytes)
        off += INFO_FIXED_SIZE
        if len(config_sha) != CONFIG_SHA_SIZE:
            raise ValueError("config_sha must be CONFIG_SHA_SIZE bytes")
        self.body[off : off + CONFIG_SHA_SIZE] = config_sha
        off = self._text(off + CONFIG_SHA_SIZE, name)
        return self._text(off, profile)

    def info(self, request, tick, fw, flags, counter_floor, mirror_bytes, config_sha, name, profile):
        return self.finish(self.info_body(request, tick, fw, flags, counter_floor, mirror_bytes,
                                          config_sha, name, profile))

    def firmware_body(self, request, files, size, fw_sha):
        """Write a FIRMWARE body into self.body; return its length (see info_body)."""
        off = self.begin(FIRMWARE)
        struct.pack_into(FIRMWARE_FIXED, self.body, off, request, files, size)
        off += FIRMWARE_FIXED_SIZE
        if len(fw_sha) != FW_SHA_SIZE:
            raise ValueError("fw_sha must be FW_SHA_SIZE bytes")
        self.body[off : off + FW_SHA_SIZE] = fw_sha
        return off + FW_SHA_SIZE

    def firmware(self, request, files, size, fw_sha):
        return self.finish(self.firmware_body(request, files, size, fw_sha))

    # -- laptop -> board (seq is the laptop's own command counter) --
    def command(self, opcode, request, args=b""):
        off = self.begin(COMMAND)
        struct.pack_into(COMMAND_FIXED, self.body, off, opcode, request)
        off += COMMAND_FIXED_SIZE
        if off + len(args) > MAX_BODY:
            raise ValueError("command arguments too long")
        self.body[off : off + len(args)] = args
        return self.finish(off + len(args))

    def start(self, request, duration_s=0, label=""):
        args = bytearray(4 + 1 + MAX_TEXT)
        struct.pack_into(START_ARGS, args, 0, duration_s)
        n = _put_text(args, 4, label)
        return self.command(CMD_START, request, args[:n])

    def set_config(self, request, key, value):
        args = bytearray(2 + 2 * MAX_TEXT)
        n = _put_text(args, _put_text(args, 0, key), value)
        return self.command(CMD_SET_CONFIG, request, args[:n])

    def ping(self, request, host_ns):
        return self.command(CMD_PING, request, struct.pack(PING_ARGS, host_ns))

    def resend(self, request, first, last):
        return self.command(CMD_RESEND, request, struct.pack(RESEND_ARGS, first, last))


def _put_text(buf, off, text):
    raw = text.encode() if isinstance(text, str) else bytes(text)
    if len(raw) > MAX_TEXT:
        raise ValueError("text longer than MAX_TEXT bytes")
    buf[off] = len(raw)
    buf[off + 1 : off + 1 + len(raw)] = raw
    return off + 1 + len(raw)


def get_text(buf, off):
    """Read a length-prefixed UTF-8 string; return (text, next offset) or raise ValueError."""
    n = buf[off]
    end = off + 1 + n
    if n > MAX_TEXT or end > len(buf):
        raise ValueError("bad text field")
    return bytes(buf[off + 1 : end]).decode(), end


# ---- reference deframer ---------------------------------------------------------
class Deframer:
    """Sans-IO: feed() any chunks, get CRC-checked frame bodies back.

    Damaged input is counted, never raised: `corrupt` segments (bad COBS, too
    short, bad CRC), `overlong` segments (no delimiter within MAX_ENCODED bytes)
    and `skipped` bytes (the partial frame a late-joining reader starts inside).
    Memory is bounded by MAX_ENCODED whatever the input.
    """

    def __init__(self):
        self._seg = bytearray(MAX_ENCODED)
        self._n = 0
        self._overlong = False
        self._synced = False  # no delimiter seen yet: the first segment may be partial
        self._body = bytearray(MAX_ENCODED)
        self.frames = 0
        self.corrupt = 0
        self.corrupt_bytes = 0
        self.overlong = 0
        self.skipped = 0

    def feed(self, data):
        """Return the list of good bodies (bytes, CRC removed) completed by data."""
        out = []
        for b in data:
            if b:
                if self._n < MAX_ENCODED:
                    self._seg[self._n] = b
                    self._n += 1
                else:
                    self._overlong = True
                    self._n += 1
                continue
            body = self._end_segment()
            if body is not None:
                out.append(body)
        return out

    def _end_segment(self):
        n = self._n
        self._n = 0
        overlong = self._overlong
        self._overlong = False
        synced = self._synced
        self._synced = True
        if n == 0:
            return None
        if overlong:
            if synced:
                self.overlong += 1
                self.corrupt_bytes += n + 1
            else:
                self.skipped += n + 1
            return None
        body = check_segment(self._seg, n, self._body)
        if body is None:
            # Before the first delimiter a failing segment is just the tail of
            # a frame we joined in the middle of, not damage.
            if synced:
                self.corrupt += 1
                self.corrupt_bytes += n + 1
            else:
                self.skipped += n + 1
            return None
        self.frames += 1
        return body


def check_segment(seg, n, scratch):
    """COBS-decode seg[:n] and verify the CRC; return the body bytes or None."""
    m = cobs_decode_into(seg, n, scratch)
    if m < MIN_BODY + CRC_SIZE:
        return None
    body = bytes(scratch[: m - CRC_SIZE])
    lo, hi = struct.unpack_from("<HH", scratch, m - CRC_SIZE)
    if crc32(body) != (hi << 16) | lo:
        return None
    return body


def parse_header(body):
    """Return (version, kind, board, run, seq) of a body."""
    vk, board, run, seq = struct.unpack_from(HEADER, body, 0)
    return vk >> 4, vk & 0x0F, board, run, seq


def unwrap_tick(tick32, ref_tick):
    """The 64-bit tick nearest ref_tick whose low 32 bits are tick32 (SPEC: tick rule)."""
    d = (tick32 - ref_tick) & 0xFFFFFFFF
    if d >= 0x80000000:
        d -= 0x100000000
    return ref_tick + d
