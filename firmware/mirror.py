"""The file mirror: every frame also appended to a file on flash or SD card.

Frames are copied into a RAM buffer and written in whole buffers; the rest is
flushed every flush_every_ms, so after a power cut the file holds everything
up to the last flush (the laptop decodes it like any capture: frames are
self-delimiting and a cut tail is simply skipped). Writing stops at max_bytes
(counted in `skipped`): flash wears and fills, and the ring still has the frames.
A write the filesystem refuses (full, worn, card pulled) ends mirroring the same
way, with its errno kept in `failed`: the run goes on; the mirror only stops.
"""

from compat import ticks_add, ticks_diff

BUFFER = 2048


class Mirror:
    def __init__(self, path, max_bytes, flush_every_ms, now_ms):
        self.path = path
        self.f = open(path, "ab")
        self.size = self.f.tell() if hasattr(self.f, "tell") else 0
        self.max_bytes = max_bytes
        self.every = flush_every_ms
        self.next_flush = ticks_add(now_ms, flush_every_ms)
        self.buf = bytearray(BUFFER)
        self.n = 0
        self.skipped = 0
        self.failed = 0  # errno of the write the filesystem refused (0: none)

    def write(self, slot, length):
        """Framer hook: called with each new frame's ring slot and length."""
        if self.failed or self.size + self.n + length > self.max_bytes:
            self.skipped += 1
            return
        buf = self.buf
        for k in range(length):
            if self.n == BUFFER:
                if not self._put(buf):
                    self.skipped += 1
                    return
                self.size += BUFFER
                self.n = 0
            buf[self.n] = slot[k]
            self.n += 1

    def _put(self, data):
        try:
            self.f.write(data)
            return True
        except OSError as exc:
            self.failed = exc.args[0] if exc.args else -1
            self.n = 0
            return False

    def poll(self, now_ms):
        if ticks_diff(now_ms, self.next_flush) >= 0:
            self.next_flush = ticks_add(now_ms, self.every)
            self.flush()

    def flush(self):
        if self.failed:
            return
        if self.n:
            # one small allocation per flush
            if not self._put(memoryview(self.buf)[: self.n]):
                return
            self.size += self.n
            self.n = 0
        try:
            self.f.flush()
        except OSError as exc:
            self.failed = exc.args[0] if exc.args else -1

    def close(self):
        self.flush()
        try:
            self.f.close()
        except OSError:
            pass
