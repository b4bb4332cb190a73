"""Board time: MicroPython's ticks_us() wraps at 2**30 us (about 17.9 min);
the protocol wants 64-bit microseconds since boot. Clock64 extends it.

now() must be called at least once per half wrap (2**29 us, about 8.9 min):
ticks_diff() is only defined for differences under half the period. The
sampler calls it far more often than that.
"""

import time


class Clock64:
    def __init__(self, ticks_us=time.ticks_us, ticks_diff=time.ticks_diff):
        self._ticks_us = ticks_us
        self._ticks_diff = ticks_diff
        self._last = ticks_us()
        self._us = 0

    def now(self):
        """Microseconds since this clock was made, never wrapping."""
        t = self._ticks_us()
        self._us += self._ticks_diff(t, self._last)
        self._last = t
        return self._us
