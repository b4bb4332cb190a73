"""The board's frame ring: every frame built lives here until overwritten.

One preallocated slot per frame, indexed by seq % size. The newest
`queue_frames` unsent frames form the live send queue; when the link falls
behind, the oldest unsent frame leaves the queue (counted in `dropped`, which
goes into STATUS frames) but stays in the ring, so the laptop can still ask for
it with a resend command until it is overwritten.
"""

from array import array

import wire


class Ring:
    def __init__(self, size, queue_frames):
        self.size = size
        self.queue_frames = queue_frames
        self.slots = [bytearray(wire.MAX_WIRE) for _ in range(size)]
        self.lens = array("H", bytes(2 * size))
        self.seqs = array("i", [-1] * size)  # seq held by each slot, -1 if none
        self.head = 0  # seq the next frame will get
        self.send = 0  # next seq to send live
        self.dropped = 0  # frames that left the send queue unsent
        self.high = 0  # most frames waiting at once (STATUS queue_high)
        # resend requests, as a small queue of [first, last] ranges
        self._rs_first = array("i", [0] * 8)
        self._rs_last = array("i", [0] * 8)
        self._rs_n = 0

    def slot(self, seq):
        """The buffer a frame with this seq is built into."""
        return self.slots[seq % self.size]

    def commit(self, seq, length):
        """Record a frame built into slot(seq); keep the send queue bounded."""
        i = seq % self.size
        self.lens[i] = length
        self.seqs[i] = seq
        self.head = seq + 1
        waiting = self.head - self.send
        if waiting > self.queue_frames:
            self.dropped += waiting - self.queue_frames
            self.send = self.head - self.queue_frames
            waiting = self.queue_frames
        if waiting > self.high:
            self.high = waiting

    def pending(self):
        return self.head - self.send

    def held(self, seq):
        """Slot index holding seq, or -1 if the ring no longer has it."""
        i = seq % self.size
        if self.seqs[i] == seq:
            return i
        return -1

    def oldest(self):
        """Smallest seq still held."""
        return max(0, self.head - self.size)

    def request_resend(self, first, last):
        """Queue a resend; return (first, last) of the part no longer held, or None."""
        lo = self.oldest()
        gone = None
        if first < lo:
            gone = (first, min(last, lo - 1))
            first = lo
        last = min(last, self.head - 1)
        if first <= last and self._rs_n < len(self._rs_first):
            self._rs_first[self._rs_n] = first
            self._rs_last[self._rs_n] = last
            self._rs_n += 1
        return gone

    def peek(self):
        """Slot index of the next frame for the link (resends first), or -1.

        Does not consume it: the link calls take() once the frame is in its
        transmit buffer, so a frame that does not fit yet is not lost.
        """
        while self._rs_n:
            seq = self._rs_first[0]
            if seq > self._rs_last[0]:
                self._pop_resend()
                continue
            i = self.held(seq)
            if i >= 0:
                return i
            self._rs_first[0] = seq + 1  # overwritten since the request: skip
        if self.send < self.head:
            return self.send % self.size
        return -1

    def take(self):
        """Consume what peek() returned."""
        if self._rs_n:
            self._rs_first[0] += 1
        else:
            self.send += 1

    def _pop_resend(self):
        for k in range(1, self._rs_n):
            self._rs_first[k - 1] = self._rs_first[k]
            self._rs_last[k - 1] = self._rs_last[k]
        self._rs_n -= 1
