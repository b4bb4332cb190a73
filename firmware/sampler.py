"""Paced sampling: each stream on its own period, from the tick counter.

A paced loop, not a timer interrupt: poll() is called as often as the main
loop turns, takes every sample that is due (one per stream per call, so a late
loop catches up without bursts) and stamps it with its nominal, scheduled
tick. How late each sample really was is measured: the largest delay since the
last STATUS (jitter_us) and the count of samples more than one period late
(late). A loop that falls more than MAX_BEHIND_US behind skips ahead on the
period grid and counts the skipped samples as late, so a stall never turns
into an endless catch-up.
"""

from compat import const

from clock import UNIT, UNIT_BITS

MAX_BEHIND_US = const(500000)


class Stream:
    def __init__(self, stream, type_code, period_us, read, block):
        self.stream = stream
        self.type_code = type_code
        self.period = period_us
        self.read = read  # callable returning the raw sample (an int for integer types)
        self.block = block  # framer.Block this stream fills
        self.hi = 0  # nominal tick of the next sample
        self.lo = 0
        self.count = 0  # samples taken in this run


class Sampler:
    def __init__(self, clock, framer, streams, max_age_us):
        self.clock = clock
        self.framer = framer
        self.streams = streams
        self.max_age_us = max_age_us  # a block older than this is sent part-full
        self.late = 0
        self.jitter_us = 0

    def start(self):
        """Schedule every stream's first sample at the next period boundary."""
        c = self.clock
        c.update()
        for s in self.streams:
            s.hi = c.hi
            s.lo = c.lo
            s.count = 0
            s.block.n = 0
        self.late = 0
        self.jitter_us = 0

    def poll(self):
        """Take what is due; return the number of samples taken."""
        c = self.clock
        c.update()
        hi = c.hi
        lo = c.lo
        framer = self.framer
        taken = 0
        for s in self.streams:
            dh = hi - s.hi
            if dh > 1:
                self._skip(s, hi, lo)
                continue
            d = (dh << UNIT_BITS) + (lo - s.lo)  # how late the next sample is, us
            if d >= 0:
                if d > MAX_BEHIND_US:
                    self._skip(s, hi, lo)
                    continue
                framer.sample(s.block, s.read(), s.hi, s.lo)
                s.count += 1
                taken += 1
                if d > self.jitter_us:
                    self.jitter_us = d
                if d >= s.period:
                    self.late += 1
                nlo = s.lo + s.period
                while nlo >= UNIT:
                    nlo -= UNIT
                    s.hi += 1
                s.lo = nlo
            b = s.block
            if b.n:
                age = ((hi - b.hi) << UNIT_BITS) + (lo - b.lo)
                if age > self.max_age_us:
                    framer.flush_block(b)
        return taken

    def _skip(self, s, hi, lo):
        """Jump to the first period boundary after now; count what was skipped."""
        self.framer.flush_block(s.block)
        behind = ((hi - s.hi) << UNIT_BITS) + (lo - s.lo)  # may exceed a small int: rare
        n = behind // s.period + 1
        self.late += n
        t = (s.hi << UNIT_BITS) + s.lo + n * s.period
        s.hi = t >> UNIT_BITS
        s.lo = t & (UNIT - 1)

    def flush(self):
        for s in self.streams:
            self.framer.flush_block(s.block)
