"""CRC-32/ISO-HDLC (the frame CRC) without touching the heap.

binascii.crc32 is C, but it returns an int that needs a heap object once it
passes 2**30 (the small-int limit of 32-bit ports): one allocation per frame.
Here the register is kept as two 16-bit halves and the table as two arrays of
halves, so every value stays a small int. On boards with a native emitter
crc_native.py (viper) does the same job about 50 times faster.
"""

from array import array

_TL = array("H", bytes(512))
_TH = array("H", bytes(512))


def _make_table():
    for i in range(256):
        lo, hi = i, 0
        for _ in range(8):
            odd = lo & 1
            lo = (lo >> 1) | ((hi & 1) << 15)
            hi >>= 1
            if odd:  # reflected polynomial 0xEDB88320
                lo ^= 0x8320
                hi ^= 0xEDB8
        _TL[i] = lo
        _TH[i] = hi


_make_table()


def crc32_into(buf, n):
    """Write the CRC of buf[:n] into buf[n:n + 4], least significant byte first."""
    lo = 0xFFFF
    hi = 0xFFFF
    tl = _TL
    th = _TH
    for i in range(n):
        j = (lo ^ buf[i]) & 0xFF
        lo = ((lo >> 8) | ((hi & 0xFF) << 8)) ^ tl[j]
        hi = (hi >> 8) ^ th[j]
    lo ^= 0xFFFF
    hi ^= 0xFFFF
    buf[n] = lo & 0xFF
    buf[n + 1] = lo >> 8
    buf[n + 2] = hi & 0xFF
    buf[n + 3] = hi >> 8
