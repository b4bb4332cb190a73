"""A simulated hardware layer: the board code runs on it in tests and in the demo.

Time only moves when advance() is called, so runs are exact and repeatable;
or, given now_us, it follows that clock (a simulation's own, e.g. a board
clock derived from the laptop's simulated time with a skew).
Channels are deterministic waveforms made of small ints (reading them never
touches the heap, like a real ADC read). Not deployed to boards.
"""

from coil import HBridge
from compat import ticks_add, ticks_diff

from clock import Clock64


class Pin:
    def __init__(self):
        self.v = 0
        self.changes = 0

    def value(self, v=None):
        if v is None:
            return self.v
        if v != self.v:
            self.changes += 1
        self.v = v


class Saw:
    """A sawtooth of small ints: step per read, wrapping in [-half, half)."""

    def __init__(self, step, half):
        self.k = 0
        self.step = step
        self.half = half

    def read(self):
        k = self.k + self.step
        if k >= self.half:
            k -= 2 * self.half
        self.k = k
        return k


class SimHW:
    def __init__(self, start_us=0, now_us=None):
        self.now_us = now_us  # None, or a callable giving board time in microseconds
        self._us = start_us & ((1 << 30) - 1)
        self._ms = (start_us // 1000) & ((1 << 30) - 1)
        self._frac = 0
        self.clock = Clock64(self.ticks_us, ticks_diff)
        self.in1, self.in2, self.enable = Pin(), Pin(), Pin()
        self.bridge = HBridge(self.in1, self.in2, self.enable)
        self.on_frame = None
        self.channels = {}
        self.runs = 0
        self.saved = None
        self.fed = 0
        self.fail = None  # set to a channel name to make its reads raise
        self.auth_path = None  # command counter kept in RAM (a real board keeps it on flash)

    def ticks_us(self):
        if self.now_us is not None:
            return self.now_us() & 0x3FFFFFFF
        return self._us

    def ticks_ms(self):
        if self.now_us is not None:
            return (self.now_us() // 1000) & 0x3FFFFFFF
        return self._ms

    def advance(self, us):
        """Move time on by us (< 2**29) microseconds."""
        self._us = ticks_add(self._us, us)
        f = self._frac + us
        ms = f // 1000
        self._frac = f - ms * 1000
        if ms:
            self._ms = ticks_add(self._ms, ms)

    def channel(self, name):
        ch = self.channels.get(name)
        if ch is None:
            ch = self.channels[name] = Saw(3 + 2 * len(self.channels), 2048)
        if name == self.fail:
            return self._broken
        if name == "coil_state":
            return self.bridge.read_state
        return ch.read

    def _broken(self):
        raise OSError(5)

    def battery_mv(self):
        return 3900

    def temp_cdeg(self):
        return 2500

    def free_ram(self):
        return 100000

    def next_run_id(self):
        self.runs += 1
        return self.runs

    def save_config(self, text):
        self.saved = text

    def feed_watchdog(self):
        self.fed += 1


class SinkLink:
    """Takes every frame from the ring as a connected link would; keeps bytes
    only if asked (keeping allocates, counting does not)."""

    def __init__(self, ring, keep=False):
        self.ring = ring
        self.connected = True
        self.keep = bytearray() if keep else None
        self.bytes = 0
        self.frames = 0
        self.paused = False

    def poll(self):
        if self.paused or not self.connected:
            return
        r = self.ring
        while True:
            i = r.peek()
            if i < 0:
                return
            n = r.lens[i]
            if self.keep is not None:
                self.keep += r.slots[i][:n]
            self.bytes += n
            self.frames += 1
            r.take()
