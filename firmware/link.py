"""The BLE link: a GATT service with a notify characteristic carrying the
frame stream to the laptop and a write characteristic carrying commands in.

IRQ handlers only copy and flag (no allocation, no work); poll() does the
rest from the main loop. Whole frames are packed into each notification up
to the negotiated size (ATT MTU - 3); at the default MTU a frame spans
several notifications. When the stack refuses a notification (its queue is
full) the same buffer is offered again on the next poll: nothing is lost and
sampling never waits. Frames the link cannot keep up with leave the ring's
send queue and are counted (ring.dropped); the laptop can ask for them again.

Stacks differ (the board profile's "ble" object says which kind the port has):
- NimBLE (ESP32): gatts_notify raises OSError when its queue is full; the link
  retries the same buffer (above).
- BTstack (Pico W, Pico 2 W): gatts_notify never refuses. When the controller's
  buffers are full it copies the value onto the heap and sends it later, with
  no limit, so a link slower than the data grows the heap until the board
  dies. For such a stack ("notify_queue": "unbounded") the link paces itself:
  at most notify_per_interval notifications per connection interval (learnt
  from the connection-update event; DEFAULT_INTERVAL_US until then), and none
  while the free heap is under min_free_heap. Frames it holds back stay in the
  ring's send queue, so the ring's drop count stays the exact account.

Connection-parameter updates are copied by the IRQ and handed to
on_conn_params(interval_us, latency, timeout_ms) from poll(), in the main loop.
"""

import gc
import struct

from compat import const, ticks_add, ticks_diff, ticks_us

import wire

_IRQ_CENTRAL_CONNECT = const(1)
_IRQ_CENTRAL_DISCONNECT = const(2)
_IRQ_GATTS_WRITE = const(3)
_IRQ_MTU_EXCHANGED = const(21)
_IRQ_CONNECTION_UPDATE = const(27)

_FLAG_READ = const(0x0002)
_FLAG_WRITE_NO_RESPONSE = const(0x0004)
_FLAG_WRITE = const(0x0008)
_FLAG_NOTIFY = const(0x0010)

_ADV_INTERVAL_US = const(100000)
MAX_PAYLOAD = const(244)  # ATT MTU 247 - 3
DEFAULT_PAYLOAD = const(20)  # ATT MTU 23 - 3
NOTIFY_PER_POLL = const(4)  # bounds the time one poll spends in the stack
COMMAND_BUFFER = const(512)
# Pacing for stacks that queue without limit. Until the central updates the
# connection the board cannot know its interval; the MicroPython docs give a
# central's default as "typically between 30000 and 50000 microseconds"
# (bluetooth.rst, gap_connect), so the pace assumes the slow end.
DEFAULT_INTERVAL_US = const(50000)
MIN_INTERVAL_US = const(7500)  # shortest interval BLE allows (6 x 1.25 ms)
DEFAULT_NOTIFY_PER_INTERVAL = const(4)  # common practice: controllers carry several per event
INTERVAL_UNIT_US = const(1250)  # connection interval unit (Core spec, from memory)
TIMEOUT_UNIT_MS = const(10)  # supervision timeout unit (Core spec, from memory)
COLLECT_EVERY_US = const(1000000)  # heap low: at most one gc.collect() a second


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
    def __init__(self, ble, bluetooth, name, ring, on_command_bytes, stack=None,
                 on_conn_params=None, ticks_us=ticks_us, free_heap=None):
        """stack: the board profile's "ble" object (None: a stack that refuses
        when full); on_conn_params(interval_us, latency, timeout_ms): called from
        poll() after each connection-parameter update; ticks_us: the board's
        microsecond ticks (pacing); free_heap: free heap in bytes (gc.mem_free)."""
        self.ble = ble
        self.ring = ring
        self.on_command_bytes = on_command_bytes
        self.on_conn_params = on_conn_params
        stack = stack or {}
        self.paced = stack.get("notify_queue") == "unbounded"
        self.per_interval = stack.get("notify_per_interval", DEFAULT_NOTIFY_PER_INTERVAL)
        self.min_free_heap = stack.get("min_free_heap", 0)
        self._ticks_us = ticks_us
        self._free_heap = free_heap if free_heap is not None else getattr(gc, "mem_free", None)
        self.interval_us = DEFAULT_INTERVAL_US
        self.credit = 0  # notifications still allowed in this interval (paced stacks)
        self._credit_at = ticks_us()
        self.held = 0  # polls that had frames to send but no credit (paced stacks)
        self.heap_low = 0  # intervals skipped because the free heap was under min_free_heap
        self._collected_at = ticks_add(self._credit_at, -COLLECT_EVERY_US)
        self._params_new = False  # set by the IRQ: a connection update to report
        self._ci = 0  # its interval (1.25 ms units), latency (events), timeout (10 ms units)
        self._lat = 0
        self._sto = 0
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
        self._tx_frames = 0  # whole frames packed in tx, not yet notified
        self._tx_live = 0  # of those, frames taken from the live send queue (not resends)
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
            self.interval_us = DEFAULT_INTERVAL_US  # a new connection: not known yet
        elif event == _IRQ_CENTRAL_DISCONNECT:
            self.connected = False
            self.conn = -1
            self._readvertise = True
        elif event == _IRQ_GATTS_WRITE:
            if data[1] == self.h_cmd:
                self._write_pending = True
        elif event == _IRQ_MTU_EXCHANGED:
            self.payload = min(MAX_PAYLOAD, data[1] - 3)
        elif event == _IRQ_CONNECTION_UPDATE:
            # (conn_handle, conn_interval, conn_latency, supervision_timeout, status);
            # a non-zero status is a refused update: the old parameters stand.
            if data[4] == 0 and data[0] == self.conn:
                self._ci = data[1]
                self._lat = data[2]
                self._sto = data[3]
                self._params_new = True

    def poll(self):
        if self._readvertise:
            self._readvertise = False
            self._unsent()
            self.advertise()
        if self._write_pending:
            self._write_pending = False
            data = self.ble.gatts_read(self.h_cmd)
            if data:
                self.on_command_bytes(data)
        if self._params_new:
            self._params_new = False  # cleared first: an update arriving now is not lost
            self._conn_params()
        if not self.connected:
            return
        if self.paced:
            self._refill()
        for _ in range(NOTIFY_PER_POLL):
            if self.paced and self.credit <= 0:
                if self.tx_n or self.ring.pending():
                    self.held += 1
                return
            if not self._fill():
                return
            if not self._notify():
                return
            if self.paced:
                self.credit -= 1

    def _unsent(self):
        """The link went down: whole live frames packed but not notified go
        back to the ring's send queue (sent after the reconnection, or pushed
        out and counted there). A frame cut short restarts whole."""
        r = self.ring
        back = self._tx_live
        if back and r.send - back >= r.oldest():
            r.send -= back
        self.tx_n = 0
        self.frame_at = 0
        self._tx_frames = 0
        self._tx_live = 0

    def _conn_params(self):
        interval_us = self._ci * INTERVAL_UNIT_US
        if interval_us >= MIN_INTERVAL_US:
            self.interval_us = interval_us
        if self.on_conn_params is not None:
            self.on_conn_params(interval_us, self._lat, self._sto * TIMEOUT_UNIT_MS)

    def _refill(self):
        """A new connection interval: a new credit of notifications."""
        now = self._ticks_us()
        elapsed = ticks_diff(now, self._credit_at)
        if elapsed < self.interval_us:
            return
        if elapsed >= 2 * self.interval_us:
            self._credit_at = now  # idle for a while: no credit saved up
        else:
            self._credit_at = ticks_add(self._credit_at, self.interval_us)
        credit = self.per_interval
        if self.min_free_heap and self._heap_low(now):
            credit = 0  # the stack's queue is eating the heap: let it drain first
            self.heap_low += 1
        self.credit = credit

    def _heap_low(self, now):
        f = self._free_heap
        if f is None or f() >= self.min_free_heap:
            return False
        # Garbage counts as used until collected, and this loop allocates too
        # little to trigger the collector: collect (a few ms), at most once a second.
        if ticks_diff(now, self._collected_at) < COLLECT_EVERY_US:
            return True
        self._collected_at = now
        gc.collect()
        return f() < self.min_free_heap

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
                self._take(r)
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
                self._take(r)
            return True

    def _take(self, r):
        """Consume the frame peek() gave, counting it as packed into tx."""
        send = r.send
        r.take()
        self._tx_frames += 1
        if r.send != send:
            self._tx_live += 1

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
        self._tx_frames = 0
        self._tx_live = 0
        return True
