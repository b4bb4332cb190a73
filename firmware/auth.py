"""Authenticated commands: HMAC-SHA256 (RFC 2104) and a counter that only grows.

A command whose opcode carries AUTH_FLAG ends its arguments with a trailer:
u32 counter, then the 32-byte tag = HMAC-SHA256(key, body up to the tag),
where the body starts at the header (so the target board, run, opcode,
request, arguments and counter are all covered). The board keeps the last
counter it accepted and takes only larger ones, so a recorded command cannot
be played again.

The counter survives reboots: two slot files (`path` + "0" / "1") hold a
reserve at least as large as every counter ever accepted, written twice on one
line so a torn write shows. A reserve is written (into the older slot, the
newer one untouched) only when a counter reaches it (then reserve = counter +
RESERVE), so flash sees one write per RESERVE commands and a power cut during
a write leaves the previous reserve readable. After a reboot the board starts
from the larger valid slot: the laptop, told the floor in the ERROR
(detail_a), jumps past it. Both slots damaged: fail closed.

Commands are rare, so this module may allocate (never called while sampling).
`hashlib.sha256` is all it needs; the `hmac` module is not on every port.
"""

import hashlib
import struct

BLOCK = 64  # SHA-256 input block in bytes (RFC 2104's B)
TAG_SIZE = 32  # full HMAC-SHA256 output, not truncated
COUNTER_SIZE = 4
TRAILER_SIZE = 36  # counter + tag
RESERVE = 64  # counters reserved per flash write (flash wears)
MAX_COUNTER = 0xFFFFFFFF

# ERROR auth (wire.ERR_AUTH) detail_b: why the command was refused.
WHY_MISSING = 1  # a state-changing command without a tag
WHY_BAD_TAG = 2
WHY_OLD_COUNTER = 3  # replayed or older than the last accepted
WHY_NO_KEY = 4  # an authenticated command to a board flashed without a key
WHY_STORE = 5  # the counter could not be written to flash: nothing done


def hmac_sha256(key, msg):
    """HMAC-SHA256 per RFC 2104: H(K ^ opad, H(K ^ ipad, msg))."""
    if len(key) > BLOCK:
        key = hashlib.sha256(key).digest()
    ipad = bytearray(BLOCK)
    opad = bytearray(BLOCK)
    for i in range(BLOCK):
        k = key[i] if i < len(key) else 0
        ipad[i] = k ^ 0x36
        opad[i] = k ^ 0x5C
    h = hashlib.sha256(ipad)
    h.update(msg)
    inner = h.digest()
    h = hashlib.sha256(opad)
    h.update(inner)
    return h.digest()


def same(a, b):
    """Compare two byte strings in time that does not depend on where they differ."""
    if len(a) != len(b):
        return False
    d = 0
    for i in range(len(a)):
        d |= a[i] ^ b[i]
    return d == 0


def unhex(text):
    out = bytearray(len(text) // 2)
    for i in range(len(out)):
        out[i] = int(text[2 * i : 2 * i + 2], 16)
    return bytes(out)


class Auth:
    """The board's key and counter. path None keeps the counter in RAM only
    (simulations and tests); a real board always passes a file."""

    def __init__(self, key, path):
        self.key = key
        self.path = path
        self.last = self._load()  # every counter <= last is refused
        self.reserve = self.last

    def _slot(self, i):
        """-> the reserve in slot i, -1 if the slot is missing, None if damaged."""
        try:
            with open(self.path + str(i)) as f:
                text = f.read()
        except OSError:
            return -1
        parts = text.split()
        try:
            if len(parts) == 2 and parts[0] == parts[1] and 0 <= int(parts[0]) <= MAX_COUNTER:
                return int(parts[0])
        except ValueError:
            pass
        return None

    def _load(self):
        self.slots = [0, 0]
        if self.path is None:
            return 0
        a, b = self._slot(0), self._slot(1)
        if a is None and b is None:
            return MAX_COUNTER  # both damaged: refuse every counter (fail closed)
        if a is None or b is None:  # one torn write: the other slot holds the reserve before it
            a = -1 if a is None else a
            b = -1 if b is None else b
            # (damaged, missing) is only the very first write torn: nothing was accepted
        self.slots = [max(a, 0), max(b, 0)]
        return max(a, b, 0)

    def _store(self, value):
        if self.path is None:
            return True
        i = 0 if self.slots[0] <= self.slots[1] else 1  # overwrite the older slot
        try:
            with open(self.path + str(i), "w") as f:
                f.write("%d %d\n" % (value, value))
        except OSError:
            return False
        self.slots[i] = value
        return True

    def check(self, body):
        """body: the whole CRC-checked command body, trailer included.
        Return 0 (accepted, counter consumed) or a WHY_* code."""
        n = len(body) - TAG_SIZE
        if n < TRAILER_SIZE - TAG_SIZE:
            return WHY_MISSING
        tag = hmac_sha256(self.key, bytes(body[:n]))
        if not same(tag, bytes(body[n:])):
            return WHY_BAD_TAG
        counter = struct.unpack_from("<I", body, n - COUNTER_SIZE)[0]
        if counter <= self.last:
            return WHY_OLD_COUNTER
        if counter >= self.reserve:
            new = counter + RESERVE if counter <= MAX_COUNTER - RESERVE else MAX_COUNTER
            if not self._store(new):
                return WHY_STORE
            self.reserve = new
        self.last = counter
        return 0


def seal(key, body, counter):
    """Laptop side (and tests): the trailer for a command body that already
    ends with its arguments. Returns body + counter + tag."""
    msg = bytes(body) + struct.pack("<I", counter)
    return msg + hmac_sha256(key, msg)
