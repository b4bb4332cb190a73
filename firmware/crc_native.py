"""Viper build of crc.crc32_into for boards with a native emitter (ESP32, RP2).

Imported when the port accepts @micropython.viper; the caller falls back to
crc.py otherwise (the WebAssembly port used by the tests rejects viper).
"""

from array import array

import micropython
from crc import _TH, _TL

# One 32-bit table built from the two halves (a one-off allocation at import).
_T = array("I", [(_TH[i] << 16) | _TL[i] for i in range(256)])


@micropython.viper
def _crc(buf: ptr8, n: int, t: ptr32):
    crc = -1  # all ones: the 0xFFFFFFFF initial register as a machine word
    i = 0
    while i < n:
        crc = t[(crc ^ buf[i]) & 0xFF] ^ int(uint(crc) >> 8)
        i += 1
    crc = crc ^ -1
    buf[n] = crc & 0xFF
    buf[n + 1] = (crc >> 8) & 0xFF
    buf[n + 2] = (crc >> 16) & 0xFF
    buf[n + 3] = int(uint(crc) >> 24) & 0xFF


def crc32_into(buf, n):
    _crc(buf, n, _T)  # type: ignore[arg-type]  # viper converts the array to ptr32
