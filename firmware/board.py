"""The board's core: one object that owns the clock, ring, framer, sampler,
coil and link, and one poll() that turns the main loop once.

Hardware comes in through `hw` (hal.py on a real board, simulated parts in
tests), so this file runs unchanged on MicroPython and CPython. Work per poll
is bounded: sampling first, then the coil, then periodic frames, then at most
a few notifications, so nothing here can stall sampling for long.
"""

import json

import auth as auth_mod
import commands
import config as config_mod
from coil import TRIP_ERROR, TRIP_LINK, Coil, Program
from compat import const, ticks_add, ticks_diff
from framer import Block, Framer
from ring import Ring
from sampler import Sampler, Stream

import wire
from clock import UNIT_BITS

FW = (0, 3, 0)  # the firmware version the descriptor reports (the package version)
TICK_HZ = const(1000000)
END_STOP = const(1)
END_DONE = const(2)
END_ERROR = const(3)


class Board:
    def __init__(self, cfg, hw, run_id):
        self.cfg = cfg
        self.hw = hw
        self.board_id = cfg["board_id"]
        self.clock = hw.clock
        link_cfg = cfg["link"]
        self.ring = Ring(link_cfg["ring_frames"], link_cfg["queue_frames"])
        self.framer = Framer(self.board_id, run_id, self.ring, hw.on_frame)
        self.status_every_ms = link_cfg["status_every_ms"]
        self.descriptor_every_ms = link_cfg["descriptor_every_ms"]
        streams = []
        entries = []
        for s in cfg["streams"]:
            t = ord(s["type"])
            period = config_mod.period_us(s)
            streams.append(Stream(s["id"], t, period, hw.channel(s["source"]), Block(s["id"], t)))
            entries.append((s["id"], t, 1 if s.get("state") else 0, period, s["scale"],
                            s["offset"], s["name"], s["unit"]))
        self.framer.set_descriptor(TICK_HZ, FW, self.status_every_ms, entries)
        # Blocks older than half the gap promise are sent part-full (SPEC: P2).
        self.sampler = Sampler(self.clock, self.framer, streams, self.status_every_ms * 500)
        c = cfg["coil"]
        now = hw.ticks_ms()
        self.coil = Coil(hw.bridge, now, c["max_on_ms"], c["max_duty"], c["duty_window_ms"])
        self.program = Program(c["program"], c["repeat"])
        self.link_timeout_ms = c["link_timeout_ms"]
        self.running = False
        self.ended = False  # the run sent END: no periodic frames until the next START
        self.started_ms = 0
        self.duration_ms = 0
        self.next_status = now
        self.next_descriptor = now
        self.link_lost_at = now
        self.rx_hi = 0  # board time when the last command arrived (SYNC rx_tick)
        self.rx_lo = 0
        self.deframer = wire.Deframer()
        self.link = None
        self.mirror = None  # mirror.Mirror when the config enables it (main.py)
        self.config_error = None
        self.config_saved = False  # set_config wrote a new /config.json: it runs from the next boot
        self.fw_hash = None  # (files, bytes, sha) of the code files, read at the first FIRMWARE
        # Key set: state-changing commands must be authenticated (commands.py). The
        # counter file lives on flash; hw.auth_path None (simulations) keeps it in RAM.
        key = link_cfg["key_hex"]
        self.auth = (auth_mod.Auth(auth_mod.unhex(key), getattr(hw, "auth_path", "/auth.ctr"))
                     if key else None)

    @property
    def run_id(self):
        return self.framer.run

    # ---- runs ---------------------------------------------------------------------
    def start(self, duration_s, label):
        """START command: a new run. Return 0 or an ERROR code."""
        if self.running:
            return wire.ERR_BUSY
        self.new_run()
        now = self.hw.ticks_ms()
        c = self.clock
        c.update()
        self.framer.descriptor_now(c.hi, c.lo)
        self.next_descriptor = ticks_add(now, self.descriptor_every_ms)
        self.sampler.start()
        self.running = True
        self.ended = False
        self.duration_ms = duration_s * 1000
        self.started_ms = now
        self.program.start(now)
        self._apply_program(now)
        return 0

    def stop(self, reason):
        """STOP command, end of program or error: coil off first, then END."""
        now = self.hw.ticks_ms()
        self.coil.off(now)
        self.program.stop()
        if not self.running:
            return
        self.running = False
        self.sampler.flush()
        c = self.clock
        c.update()
        self._event(wire.EV_COIL, 0)
        self.framer.flush_events()
        self.status()  # the board's counters as they stand at the end, just before END
        totals = [(s.stream, s.count) for s in self.sampler.streams]
        self.framer.end_now(c.hi, c.lo, reason, totals)
        self.ended = True

    def new_run(self):
        self.framer.run = self.hw.next_run_id()
        self.framer.seq = 0
        self.ring.head = self.ring.send = 0
        for i in range(self.ring.size):
            self.ring.seqs[i] = -1
        self.ring.dropped = 0
        self.ring.high = 0

    def set_config(self, key, value):
        """SET_CONFIG: key is a dotted path, value JSON. Applied at the next boot."""
        if self.running:
            return wire.ERR_BUSY
        try:
            new = json.loads(json.dumps(self.cfg))
            node = new
            parts = key.split(".")
            for p in parts[:-1]:
                node = node[p]
            if parts[-1] not in node:
                return wire.ERR_BAD_ARGUMENT
            node[parts[-1]] = json.loads(value)
            config_mod.validate(new)
        except (ValueError, KeyError, TypeError):
            return wire.ERR_BAD_ARGUMENT
        self.cfg = new
        self.hw.save_config(json.dumps(new))
        self.config_saved = True
        return 0

    def pull(self, request):
        """PULL command: stream the mirror file over the link. Return 0 or an ERROR code."""
        if self.mirror is None:
            return wire.ERR_NO_MIRROR
        if self.running or self.link is None:
            return wire.ERR_BUSY
        self.mirror.flush()
        try:
            f = open(self.mirror.path, "rb")
        except OSError:
            return wire.ERR_NO_MIRROR
        self.link.bulk = f
        self.link.on_bulk_done = lambda: self.framer.ack_now(request, wire.CMD_PULL)
        return 0

    def status(self):
        c = self.clock
        c.update()
        hw = self.hw
        s = self.sampler
        self.framer.status_now(c.hi, c.lo, hw.battery_mv(), hw.temp_cdeg(), hw.free_ram(), s.late,
                               s.jitter_us)
        s.jitter_us = 0

    # ---- the loop -------------------------------------------------------------------
    def poll(self):
        try:
            self._poll()
        except Exception:  # anything unexpected: coil off before anything else
            self.coil.off(self.hw.ticks_ms())
            self.program.stop()
            self._event(wire.EV_SAFETY, TRIP_ERROR)
            self.stop(END_ERROR)
            raise

    def _poll(self):
        hw = self.hw
        if self.running:
            self.sampler.poll()
        now = hw.ticks_ms()
        if self.running:
            if self.program.advance(now):
                self._apply_program(now)
            if not self.program.running and self.coil.state:
                self.coil.off(now)
                self._event(wire.EV_COIL, 0)
            trip = self.coil.check(now)
            if trip:
                self._trip(trip)
            if self.duration_ms and ticks_diff(now, self.started_ms) >= self.duration_ms:
                self.stop(END_DONE)
            elif self.program.done and not self.duration_ms:
                self.stop(END_DONE)
        link = self.link
        if link is not None:
            if link.connected:
                self.link_lost_at = now
            elif self.coil.state and ticks_diff(now, self.link_lost_at) >= self.link_timeout_ms:
                self._trip(TRIP_LINK)
        if ticks_diff(now, self.next_status) >= 0 and not self.ended:
            self.next_status = ticks_add(now, self.status_every_ms)
            self.status()
        if self.running and ticks_diff(now, self.next_descriptor) >= 0:
            self.next_descriptor = ticks_add(now, self.descriptor_every_ms)
            c = self.clock
            self.framer.descriptor_now(c.hi, c.lo)
        if self.framer.ev_n:
            self.framer.flush_events()
        if link is not None:
            link.poll()
        hw.feed_watchdog()

    def command_bytes(self, data):
        """Bytes written by the laptop (may hold several or partial frames)."""
        c = self.clock
        c.update()
        self.rx_hi = c.hi
        self.rx_lo = c.lo
        for body in self.deframer.feed(data):
            commands.handle(self, body)

    # ---- coil -------------------------------------------------------------------------
    def _apply_program(self, now):
        state = self.program.state()
        self._event(wire.EV_STEP, self.program.index)
        if state != self.coil.state:
            trip = self.coil.set(state, now)
            if trip:
                self._trip(trip)
                return
            self._event(wire.EV_COIL, state)

    def _trip(self, reason):
        now = self.hw.ticks_ms()
        was = self.coil.state
        self.coil.off(now)
        self.program.stop()
        self._event(wire.EV_SAFETY, reason)
        if was:
            self._event(wire.EV_COIL, 0)

    def _event(self, code, value):
        c = self.clock
        c.update()
        self.framer.event(code, value, c.hi, c.lo)

    def conn_params(self, interval_us, latency, timeout_ms):
        """Link callback (main loop, not the IRQ): the connection's new
        parameters, as three events at one tick."""
        c = self.clock
        c.update()
        f = self.framer
        f.event(wire.EV_CONN_INTERVAL, interval_us, c.hi, c.lo)
        f.event(wire.EV_CONN_LATENCY, latency, c.hi, c.lo)
        f.event(wire.EV_CONN_TIMEOUT, timeout_ms, c.hi, c.lo)


def board_time_us(hi, lo):
    return (hi << UNIT_BITS) + lo
