"""Board time: 64-bit microseconds since boot, from the wrapping ticks_us().

MicroPython's ticks_us() wraps (2**30 us, about 17.9 min, on most ports) and
only ticks_diff() of two readings less than half a period apart is exact.
Clock64 keeps the time as hi * 2**29 + lo with lo < 2**29, so every number it
handles stays a small int: reading the clock never touches the heap.

update() must run at least every 2**29 us (about 8.9 min); the sampling loop
calls it every iteration.
"""

from compat import const, ticks_diff, ticks_us

UNIT_BITS = const(29)
UNIT = const(1 << 29)  # lo stays below this; lo + any step stays below 2**30


class Clock64:
    def __init__(self, ticks_us=ticks_us, ticks_diff=ticks_diff):
        self._ticks_us = ticks_us
        self._ticks_diff = ticks_diff
        self._last = ticks_us()
        self.hi = 0
        self.lo = 0

    def update(self):
        """Advance to the current ticks_us() reading."""
        t = self._ticks_us()
        lo = self.lo + self._ticks_diff(t, self._last)
        self._last = t
        while lo >= UNIT:
            lo -= UNIT
            self.hi += 1
        self.lo = lo

    def now(self):
        """The time as one int (allocates once past 2**30 us: not for hot paths)."""
        self.update()
        return (self.hi << UNIT_BITS) + self.lo


def diff_us(hi_a, lo_a, hi_b, lo_b):
    """a - b in microseconds, valid while |a - b| < 2**30 (small ints only)."""
    return ((hi_a - hi_b) << UNIT_BITS) + (lo_a - lo_b)
