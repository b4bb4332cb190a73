"""Frames built on the board without touching the heap.

Each stream fills its own preallocated SAMPLES body; a full (or old) block is
sealed straight into its ring slot: CRC by crc.py (or its viper twin), COBS by
wire.cobs_encode_into, no copies. Board time comes in as Clock64's (hi, lo)
pair and is packed as 16-bit halves, so no int ever needs the heap. The layouts
are wire.py's; tests check these bytes against wire.Encoder's.
"""

import struct

import wire

try:  # native CRC where the port has a native emitter (ESP32, RP2)
    from crc_native import crc32_into
except Exception:  # ports without it (the WebAssembly one) reject viper at import
    from crc import crc32_into

_SAMPLES_AT = 14  # wire.HEADER_SIZE + wire.SAMPLES_FIXED_SIZE
_EVENT_CAP = 25  # (MAX_BODY - HEADER_SIZE) // EVENT_ENTRY_SIZE


def pack_tick32(buf, off, hi, lo):
    """Low 32 bits of hi * 2**29 + lo, as two u16 (= one u32 little-endian)."""
    struct.pack_into("<HH", buf, off, lo & 0xFFFF, (lo >> 16) | ((hi & 7) << 13))


def pack_tick64(buf, off, hi, lo):
    struct.pack_into("<HHI", buf, off, lo & 0xFFFF, (lo >> 16) | ((hi & 7) << 13), hi >> 3)


class Block:
    """The SAMPLES frame one stream is filling."""

    def __init__(self, stream, type_code):
        self.stream = stream
        self.size = wire.SAMPLE_SIZES[type_code]
        self.fmt = "<" + chr(type_code)
        self.cap = wire.max_samples(type_code)
        self.body = bytearray(wire.MAX_BODY + wire.CRC_SIZE)
        self.n = 0
        self.hi = 0  # tick of the first sample in the block
        self.lo = 0


class Framer(wire.Encoder):
    def __init__(self, board, run, ring, on_frame=None):
        super().__init__(board, run)
        self.crc_into = crc32_into  # type: ignore[method-assign]  # a plain function, not bound
        self.ring = ring
        self.on_frame = on_frame  # called with (slot buffer, length) after each frame
        self.ev_body = bytearray(wire.MAX_BODY + wire.CRC_SIZE)
        self.ev_n = 0
        self._desc = []  # prebuilt DESCRIPTOR bodies: (body, length)

    def emit(self, n, body):
        """Seal body[:n] into the ring slot of the next seq; return its length."""
        seq = self.seq
        slot = self.ring.slot(seq)
        m = self.finish(n, body, slot)
        self.ring.commit(seq, m)
        if self.on_frame is not None:
            self.on_frame(slot, m)
        return m

    # -- samples --
    def sample(self, blk, value, hi, lo):
        if blk.n == 0:
            blk.hi = hi
            blk.lo = lo
        struct.pack_into(blk.fmt, blk.body, _SAMPLES_AT + blk.n * blk.size, value)
        blk.n += 1
        if blk.n == blk.cap:
            self.flush_block(blk)

    def flush_block(self, blk):
        if blk.n == 0:
            return
        body = blk.body
        self.begin(wire.SAMPLES, body)
        body[wire.HEADER_SIZE] = blk.stream
        pack_tick32(body, wire.HEADER_SIZE + 1, blk.hi, blk.lo)
        self.emit(_SAMPLES_AT + blk.n * blk.size, body)
        blk.n = 0

    # -- events --
    def event(self, code, value, hi, lo):
        off = wire.HEADER_SIZE + self.ev_n * wire.EVENT_ENTRY_SIZE
        b = self.ev_body
        pack_tick32(b, off, hi, lo)
        struct.pack_into("<Bi", b, off + 4, code, value)
        self.ev_n += 1
        if self.ev_n == _EVENT_CAP:
            self.flush_events()

    def flush_events(self):
        if self.ev_n:
            self.begin(wire.EVENTS, self.ev_body)
            self.emit(wire.HEADER_SIZE + self.ev_n * wire.EVENT_ENTRY_SIZE, self.ev_body)
            self.ev_n = 0

    # -- descriptor: built once, re-sent with a fresh tick --
    def set_descriptor(self, tick_hz, fw, max_gap_ms, streams):
        """streams: (stream, type, flags, period_us, scale, offset, name, unit) tuples."""
        self._desc = []
        rest = list(streams)
        while True:
            enc = wire.Encoder(self.board, self.run)
            part = []  # type: list
            while rest:
                try:
                    enc.descriptor(0, tick_hz, fw, max_gap_ms, len(streams), part + rest[:1])
                except ValueError:
                    break
                part.append(rest.pop(0))
            if not part and rest:
                raise ValueError("a stream entry does not fit a descriptor frame")
            body = bytearray(wire.MAX_BODY + wire.CRC_SIZE)
            n = _descriptor_body(body, tick_hz, fw, max_gap_ms, len(streams), part)
            self._desc.append((body, n))
            if not rest:
                break

    def descriptor_now(self, hi, lo):
        for body, n in self._desc:
            self.begin(wire.DESCRIPTOR, body)
            pack_tick64(body, wire.HEADER_SIZE, hi, lo)
            self.emit(n, body)

    # -- the rest use the shared body buffer --
    def status_now(self, hi, lo, battery_mv, temp_cdeg, free_ram, late, jitter_us):
        b = self.body
        self.begin(wire.STATUS, b)
        pack_tick64(b, wire.HEADER_SIZE, hi, lo)
        r = self.ring
        struct.pack_into("<HhIHIIH", b, wire.HEADER_SIZE + 8, battery_mv, temp_cdeg, free_ram,
                         min(r.high, 0xFFFF), r.dropped, late, min(jitter_us, 0xFFFF))
        self.emit(wire.HEADER_SIZE + wire.STATUS_BODY_SIZE, b)

    def sync_now(self, request, host_ns, rx_hi, rx_lo, tx_hi, tx_lo):
        b = self.body
        self.begin(wire.SYNC, b)
        struct.pack_into("<HQ", b, wire.HEADER_SIZE, request, host_ns)
        pack_tick64(b, wire.HEADER_SIZE + 10, rx_hi, rx_lo)
        pack_tick64(b, wire.HEADER_SIZE + 18, tx_hi, tx_lo)
        self.emit(wire.HEADER_SIZE + wire.SYNC_BODY_SIZE, b)

    def ack_now(self, request, opcode):
        b = self.body
        self.begin(wire.ACK, b)
        struct.pack_into(wire.ACK_BODY, b, wire.HEADER_SIZE, request, opcode)
        self.emit(wire.HEADER_SIZE + wire.ACK_BODY_SIZE, b)

    def error_now(self, request, opcode, code, a=0, b_=0):
        b = self.body
        self.begin(wire.ERROR, b)
        struct.pack_into(wire.ERROR_BODY, b, wire.HEADER_SIZE, request, opcode, code, a, b_)
        self.emit(wire.HEADER_SIZE + wire.ERROR_BODY_SIZE, b)

    def end_now(self, hi, lo, reason, totals):
        """totals: list of (stream, samples) pairs."""
        b = self.body
        self.begin(wire.END, b)
        pack_tick64(b, wire.HEADER_SIZE, hi, lo)
        struct.pack_into("<IB", b, wire.HEADER_SIZE + 8, self.seq + 1, reason)
        off = wire.HEADER_SIZE + wire.END_FIXED_SIZE
        for stream, count in totals:
            struct.pack_into(wire.END_STREAM, b, off, stream, count)
            off += wire.END_STREAM_SIZE
        self.emit(off, b)


def _descriptor_body(body, tick_hz, fw, max_gap_ms, n_streams, part):
    enc = wire.Encoder(0, 0)
    enc.body = body
    off = wire.HEADER_SIZE
    struct.pack_into(wire.DESCRIPTOR_FIXED, body, off, 0, tick_hz, fw[0], fw[1], fw[2], max_gap_ms,
                     n_streams)
    off += wire.DESCRIPTOR_FIXED_SIZE
    for s in part:
        struct.pack_into(wire.STREAM_ENTRY, body, off, s[0], s[1], s[2], s[3], s[4], s[5])
        off = enc._text(off + wire.STREAM_ENTRY_SIZE, s[6])
        off = enc._text(off, s[7])
    return off
