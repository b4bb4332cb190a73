"""A stand-in for MicroPython's `bluetooth` module (a mock: the WebAssembly
port has no radio; the real BLE stack is exercised through bumble in the
recorder's end-to-end tests). It records what the board asks of the stack and
can refuse notifications to imitate a full controller queue (NimBLE, ESP32), or,
with unbounded set, never refuse and keep what the radio has not carried yet in
a queue on the heap (BTstack, Pico W); drain(n) is one connection event carrying
at most n of them."""


class UUID:
    def __init__(self, value):
        self.value = value


class BLE:
    def __init__(self):
        self.handler = None
        self.services = None
        self.adv = None
        self.notes = []
        self.refuse = 0  # refuse this many notifications next
        self.values = {}
        self.cfg = {}
        self.unbounded = False  # never refuse: queue on the heap instead
        self.carried = 0  # notifications the radio has carried (of notes)
        self.queued_bytes = 0
        self.max_queued = 0
        self.max_queued_bytes = 0

    def active(self, on=None):
        return True

    def config(self, **kw):
        self.cfg.update(kw)

    def irq(self, handler):
        self.handler = handler

    def gatts_register_services(self, services):
        self.services = services
        return ((10, 12),)

    def gatts_set_buffer(self, handle, n, append=False):
        self.values[handle] = b""

    def gatts_read(self, handle):
        v = self.values.get(handle, b"")
        self.values[handle] = b""
        return v

    def gap_advertise(self, interval_us, adv_data=None, resp_data=None, connectable=True):
        self.adv = (interval_us, adv_data, resp_data)

    def gatts_notify(self, conn, handle, data=None):
        if self.refuse and not self.unbounded:
            self.refuse -= 1
            raise OSError(12)
        self.notes.append(bytes(data))
        self.queued_bytes += len(data)
        q = self.queued()
        if q > self.max_queued:
            self.max_queued = q
        if self.queued_bytes > self.max_queued_bytes:
            self.max_queued_bytes = self.queued_bytes

    def queued(self):
        return len(self.notes) - self.carried

    def drain(self, n):
        """One connection event: the radio carries up to n queued notifications."""
        k = min(n, self.queued())
        for i in range(self.carried, self.carried + k):
            self.queued_bytes -= len(self.notes[i])
        self.carried += k

    # -- what the central does --
    def connect(self, conn=0):
        self.handler(1, (conn, 0, b"\x00" * 6))

    def disconnect(self, conn=0):
        self.handler(2, (conn, 0, b"\x00" * 6))

    def mtu(self, value, conn=0):
        self.handler(21, (conn, value))

    def conn_update(self, interval, latency, timeout, status=0, conn=0):
        """_IRQ_CONNECTION_UPDATE: interval in 1.25 ms units, timeout in 10 ms units."""
        self.handler(27, (conn, interval, latency, timeout, status))

    def write(self, data, conn=0):
        self.values[12] = self.values.get(12, b"") + data
        self.handler(3, (conn, 12))
