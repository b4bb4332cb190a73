"""Paced sampling: each stream on its own period, from the tick counter.

A paced loop, not a timer interrupt: poll() is called as often as the main
loop turns, takes every sample that is due and stamps it with its nominal,
scheduled tick. A sample is taken only while it is less than one period
overdue, so its value was read within one period of its tick (the largest
delay since the last STATUS is jitter_us). A sample the loop reaches later
than that (a stall: a flash write, a collection, a slow command) is skipped,
never read late under its old tick: the stream jumps to the newest due point
of its period grid, its block is sent first (the grid restarts in a new
frame, so the laptop sees the gap), and every skipped sample is counted in
`late` (STATUS) and in the stream's own `skipped`. For each stream, samples
taken + skipped = grid points due since start(), exactly.
"""

from clock import UNIT, UNIT_BITS


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
        self.skipped = 0  # samples skipped in this run: their moment had passed


class Sampler:
    def __init__(self, clock, framer, streams, max_age_us):
        self.clock = clock
        self.framer = framer
        self.streams = streams
        self.max_age_us = max_age_us  # a block older than this is sent part-full
        self.late = 0  # samples skipped in this run, all streams
        self.jitter_us = 0

    def start(self):
        """Schedule every stream's first sample at the next period boundary."""
        c = self.clock
        c.update()
        for s in self.streams:
            s.hi = c.hi
            s.lo = c.lo
            s.count = 0
            s.skipped = 0
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
            if dh > 1:  # over 2**29 us behind: not a small-int difference
                self._skip_far(s, hi, lo)
                dh = hi - s.hi
            d = (dh << UNIT_BITS) + (lo - s.lo)  # how late the next sample is, us
            if d >= 0:
                p = s.period
                n = d // p
                if n:  # its moment has passed: skip to the newest due grid point
                    self._skip(s, n)
                    d -= n * p
                framer.sample(s.block, s.read(), s.hi, s.lo)
                s.count += 1
                taken += 1
                if d > self.jitter_us:
                    self.jitter_us = d
                self._advance(s, p)
            b = s.block
            if b.n:
                age = ((hi - b.hi) << UNIT_BITS) + (lo - b.lo)
                if age > self.max_age_us:
                    framer.flush_block(b)
        return taken

    def _advance(self, s, us):
        """Move the stream's next tick on by us (< 2**29)."""
        nlo = s.lo + us
        while nlo >= UNIT:
            nlo -= UNIT
            s.hi += 1
        s.lo = nlo

    def _skip(self, s, n):
        """Skip n grid points; the block ends here so the grid restarts in a new frame."""
        self.framer.flush_block(s.block)
        s.skipped += n
        self.late += n
        step = s.period * n  # under 2**30: n * period <= d < 2**30
        while step >= UNIT:
            self._advance(s, UNIT - 1)
            step -= UNIT - 1
        self._advance(s, step)

    def _skip_far(self, s, hi, lo):
        """A stall of minutes: skip to within one period of now (big ints: rare)."""
        behind = ((hi - s.hi) << UNIT_BITS) + (lo - s.lo)
        n = behind // s.period
        self.framer.flush_block(s.block)
        s.skipped += n
        self.late += n
        t = (s.hi << UNIT_BITS) + s.lo + n * s.period
        s.hi = t >> UNIT_BITS
        s.lo = t & (UNIT - 1)

    def flush(self):
        for s in self.streams:
            self.framer.flush_block(s.block)
