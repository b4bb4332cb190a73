"""The BLE link: a GATT service with a notify characteristic carrying the
frame stream to the laptop and a write characteristic carrying commands in.

IRQ handlers only copy and flag (no allocation, no work); poll() does the
rest from the main loop. Whole frames are packed into each notification up
to the negotiated size (ATT MTU - 3); at the default MTU a frame spans
several notifications. When the stack refuses a notification (its queue is
full) the same buffer is offered again on the next poll: nothing is lost and
sampling never waits. Frames the link cannot keep up with leave the ring's
send queue and are counted (ring.dropped); the laptop can ask for them again.
"""

import struct

from compat import const

import wire

_IRQ_CENTRAL_CONNECT = const(1)
_IRQ_CENTRAL_DISCONNECT = const(2)
_IRQ_GATTS_WRITE = const(3)
_IRQ_MTU_EXCHANGED = const(21)

_FLAG_READ = const(0x0002)
_FLAG_WRITE_NO_RESPONSE = const(0x0004)
_FLAG_WRITE = const(0x0008)
_FLAG_NOTIFY = const(0x0010)

_ADV_INTERVAL_US = const(100000)
MAX_PAYLOAD = const(244)  # ATT MTU 247 - 3
DEFAULT_PAYLOAD = const(20)  # ATT MTU 23 - 3
NOTIFY_PER_POLL = const(4)  # bounds the time one poll spends in the stack
COMMAND_BUFFER = const(512)


def adv_payload(name, service_uuid_bytes):
    """Advertising data: flags + complete 128-bit service UUID; name goes in
    the scan response (31 bytes each are not enough for both)."""
    adv = bytearray(b"\x02\x01\x06")  # LE general discoverable, BR/EDR not supported
    adv += struct.pack("BB", 1 + len(service_uuid_bytes), 0x07) + service_uuid_bytes
    raw = name.encode()[:29]
    resp = struct.pack("BB", 1 + len(raw), 0x09) + raw
    return bytes(adv), bytes(resp)


def uuid_le(text):
    """128-bit UUID text -> the 16 bytes in the order BLE sends them (little-endian)."""
    b = bytes.fromhex(text.replace("-", ""))
    return bytes(reversed(b))


class Link:
    def __init__(self, ble, bluetooth, name, ring, on_command_bytes):
        self.ble = ble
        self.ring = ring
        self.on_command_bytes = on_command_bytes
        self.connected = False
        self.conn = -1
        self.payload = DEFAULT_PAYLOAD
        self._write_pending = False
        self._readvertise = False
        self.tx = bytearray(MAX_PAYLOAD)
        self.tx_n = 0
        # One view per length, made once: sending never slices (slicing allocates).
        mv = memoryview(self.tx)
        self._views = [mv[:n] for n in range(MAX_PAYLOAD + 1)]
        self.frame_at = 0  # bytes of the current frame already in tx (small MTU split)
        self.refused = 0  # notifications the stack refused (retried)
        self.notified = 0
        self.bulk = None  # an open file streamed when the ring is idle (PULL of the mirror)
        self.on_bulk_done = None
        self._bulk_mid = False  # the last bulk chunk ended inside a frame
        svc = bluetooth.UUID(wire.SERVICE_UUID)
        data = (bluetooth.UUID(wire.DATA_UUID), _FLAG_READ | _FLAG_NOTIFY)
        cmd = (bluetooth.UUID(wire.COMMAND_UUID), _FLAG_WRITE | _FLAG_WRITE_NO_RESPONSE)
        ble.active(True)
        try:
            ble.config(mtu=MAX_PAYLOAD + 3, gap_name=name)
        except (ValueError, OSError):
            pass  # ports that cannot set these keep their defaults
        ((self.h_data, self.h_cmd),) = ble.gatts_register_services(((svc, (data, cmd)),))
        ble.gatts_set_buffer(self.h_cmd, COMMAND_BUFFER, True)  # append: no write is lost
        ble.irq(self._irq)
        self._adv, self._resp = adv_payload(name, uuid_le(wire.SERVICE_UUID))
        self.advertise()

    def advertise(self):
        self.ble.gap_advertise(_ADV_INTERVAL_US, adv_data=self._adv, resp_data=self._resp)

    def _irq(self, event, data):
        if event == _IRQ_CENTRAL_CONNECT:
            self.conn = data[0]
            self.connected = True
            self.payload = DEFAULT_PAYLOAD
        elif event == _IRQ_CENTRAL_DISCONNECT:
            self.connected = False
            self.conn = -1
            self._readvertise = True
        elif event == _IRQ_GATTS_WRITE:
            if data[1] == self.h_cmd:
                self._write_pending = True
        elif event == _IRQ_MTU_EXCHANGED:
            self.payload = min(MAX_PAYLOAD, data[1] - 3)

    def poll(self):
        if self._readvertise:
            self._readvertise = False
            self.tx_n = 0
            self.frame_at = 0
            self.advertise()
        if self._write_pending:
            self._write_pending = False
            data = self.ble.gatts_read(self.h_cmd)
            if data:
                self.on_command_bytes(data)
        if not self.connected:
            return
        for _ in range(NOTIFY_PER_POLL):
            if not self._fill():
                return
            if not self._notify():
                return

    def _fill(self):
        """Pack frames into tx; return True if there is something to send."""
        r = self.ring
        cap = self.payload
        while True:
            i = -1 if self._bulk_mid else r.peek()
            if i < 0:
                if self.tx_n == 0 and self.bulk is not None:
                    return self._fill_bulk(cap)
                return self.tx_n > 0
            n = r.lens[i]
            slot = r.slots[i]
            if n <= cap:  # whole frames only
                if self.tx_n + n > cap:
                    return True
                for k in range(n):
                    self.tx[self.tx_n + k] = slot[k]
                self.tx_n += n
                r.take()
                continue
            # a frame longer than one notification: send it in pieces
            if self.tx_n:
                return True
            k = min(cap, n - self.frame_at)
            for j in range(k):
                self.tx[j] = slot[self.frame_at + j]
            self.tx_n = k
            self.frame_at += k
            if self.frame_at == n:
                self.frame_at = 0
                r.take()
            return True

    def _fill_bulk(self, cap):
        """Next piece of the pulled file, cut after its last whole frame so live
        frames never land inside one of its frames. Not a steady-state path: it
        may allocate."""
        f = self.bulk
        if f is None:
            return False
        n = f.readinto(self._views[cap])
        if not n:
            f.close()
            self.bulk = None
            self._bulk_mid = False
            if self.on_bulk_done is not None:
                self.on_bulk_done()
            return False
        k = n - 1
        while k >= 0 and self.tx[k] != 0:
            k -= 1
        if k < 0 or n < cap:  # no frame end in reach (small MTU), or the file's tail
            self.tx_n = n
            self._bulk_mid = self.tx[n - 1] != 0
        else:
            self.tx_n = k + 1
            f.seek(k + 1 - n, 1)
            self._bulk_mid = False
        return True

    def _notify(self):
        try:
            self.ble.gatts_notify(self.conn, self.h_data, self._views[self.tx_n])
        except OSError:  # the stack's queue is full: offer the same bytes next time
            self.refused += 1
            return False
        self.notified += 1
        self.tx_n = 0
        return True
