"""The few MicroPython names the board code needs, also on CPython.

On the board these are the real ones. On CPython (host-side tests of the
portable logic) ticks behave like a port whose ticks_us wraps at 2**30.
"""

try:
    import time

    from micropython import const

    ticks_us = time.ticks_us
    ticks_diff = time.ticks_diff
    ticks_add = time.ticks_add
    ON_BOARD = True
except ImportError:  # CPython
    import time

    ON_BOARD = False
    _PERIOD = 1 << 30
    _HALF = 1 << 29

    def const(x):  # type: ignore[misc]  # the stubs type MicroPython's const generically
        return x

    def ticks_us():
        return (time.perf_counter_ns() // 1000) & (_PERIOD - 1)  # type: ignore[attr-defined]

    def ticks_diff(a, b):
        return ((a - b + _HALF) & (_PERIOD - 1)) - _HALF

    def ticks_add(t, delta):
        return (t + delta) & (_PERIOD - 1)

try:
    ticks_ms = time.ticks_ms
except AttributeError:  # CPython

    def ticks_ms():
        return (time.perf_counter_ns() // 1000000) & ((1 << 30) - 1)  # type: ignore[attr-defined]
