"""A stand-in for MicroPython's `bluetooth` module (a mock: the WebAssembly
port has no radio; the real BLE stack is exercised through bumble in the
recorder's end-to-end tests). It records what the board asks of the stack and
can refuse notifications to imitate a full controller queue."""


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
        if self.refuse:
            self.refuse -= 1
            raise OSError(12)
        self.notes.append(bytes(data))

    # -- what the central does --
    def connect(self, conn=0):
        self.handler(1, (conn, 0, b"\x00" * 6))

    def disconnect(self, conn=0):
        self.handler(2, (conn, 0, b"\x00" * 6))

    def mtu(self, value, conn=0):
        self.handler(21, (conn, value))

    def write(self, data, conn=0):
        self.values[12] = self.values.get(12, b"") + data
        self.handler(3, (conn, 12))
