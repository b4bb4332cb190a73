"""What the live view shows, kept as the decoder hands a run over (sans-IO).

LiveState is a decoder sink. It keeps little per sample: each stream as
min/max display bins over the last window (a ring), the coil's transitions,
each SAMPLES frame's (seq, last tick) for the loss by rotor angle, the rotor
angle integrated from the rate stream (one point a frame), SYNC round trips
for the clock offset, and STATUS figures. `snapshot(now_ns)` returns the
page's JSON-ready dict (schema in live/schema.md); times on the laptop axis
are seconds since the first arrival seen, stream times are run seconds
(board ticks since the run's first sample).
"""

from __future__ import annotations

import math
from array import array
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from slipless.decode.decoder import Arrival, NullSink, RunState, StreamInfo, expand_frames
from slipless.live.alarms import AlarmBook, evaluate
from slipless.loss.collect import rate_factor
from slipless.protocol import wire

Key = tuple[int, int]
DEFAULT_TICK_HZ = 1_000_000
CLOCK_FILTER = 8  # pings the clock offset is chosen from
CLOCK_WARMUP = 4  # pings before the first offset is drawn


@dataclass
class WatchOptions:
    window_s: float = 30.0  # run seconds each stream plot spans
    points: int = 400  # display bins per stream plot
    history: int = 720  # points kept of each series over the watch (halved when full)
    every_s: float = 1.0  # laptop seconds between points of those series
    angle_bins: int = 12
    angle_stream: str | None = None  # default: the first stream whose unit is a rate
    current: str = "coil_current"
    settle_s: float = 0.05  # coil current checked only this long after a switch
    rail_margin: float = 0.01  # share of full scale that counts as "at the rail" (common practice)
    battery_warn_v: float = 3.5  # one Li-ion cell under load (common practice)
    battery_alarm_v: float = 3.3
    loss_window_s: float = 10.0  # the recent loss rate is taken over this many seconds
    loss_warn_pct: float = 1.0
    loss_alarm_pct: float = 10.0
    quiet_s: float = 2.0  # no frame for this long while the link is up: warn
    held_s: float = 10.0  # a drops/late/coil alarm stays up this long after its last cause


class Series:
    """(t, value) points every `every` seconds at most, halved when `cap` is reached."""

    def __init__(self, cap: int, every: float) -> None:
        self.t: list[float] = []
        self.v: list[float | None] = []
        self.cap, self.every = cap, every

    def add(self, t: float, v: float | None, force: bool = False) -> None:
        if self.t and t - self.t[-1] < self.every and not force:
            self.v[-1] = v  # the latest value within the step stands for it
            return
        self.t.append(t)
        self.v.append(v)
        if len(self.t) > self.cap:
            self.t, self.v = self.t[::2], self.v[::2]
            self.every *= 2


class StreamView:
    """A stream's min/max per display bin over the last window, as a ring."""

    def __init__(self, info: StreamInfo, run: RunState, opts: WatchOptions) -> None:
        self.info = info
        self.board, self.run = run.board, run.run
        self.hz = run.tick_hz or DEFAULT_TICK_HZ
        self.width = max(1, int(opts.window_s * self.hz / opts.points))  # ticks a bin
        self.size = opts.points + 2
        self.bins = np.full(self.size, -1, np.int64)
        self.lo = np.full(self.size, np.inf)
        self.hi = np.full(self.size, -np.inf)
        self.latest = -1  # the newest bin seen
        self.last: float | None = None
        self.last_tick = -1
        self.rails = _rails(info)
        self.near_tick = -(1 << 62)  # tick of the latest sample at a rail

    def add(self, tick: np.ndarray, raw: np.ndarray) -> None:
        value = raw.astype(np.float64) * self.info.scale + self.info.offset
        b = tick // self.width
        newest = int(b.max())
        keep = b > max(self.latest, newest) - self.size  # late ones older than the ring: gone
        if not keep.all():
            b, value, tick, raw = b[keep], value[keep], tick[keep], raw[keep]
        order = np.argsort(b, kind="stable")
        b, v = b[order], value[order]
        first = np.flatnonzero(np.r_[True, b[1:] != b[:-1]])
        ub, lo, hi = b[first], np.minimum.reduceat(v, first), np.maximum.reduceat(v, first)
        slot = ub % self.size
        stale = self.bins[slot] != ub
        self.lo[slot[stale]], self.hi[slot[stale]] = np.inf, -np.inf
        self.bins[slot] = ub
        self.lo[slot] = np.minimum(self.lo[slot], lo)
        self.hi[slot] = np.maximum(self.hi[slot], hi)
        if newest >= self.latest:
            self.latest = newest
            at = int(np.argmax(tick))
            self.last, self.last_tick = float(value[at]), int(tick[at])
        if self.rails is not None:
            lo_raw, hi_raw, margin = self.rails[2], self.rails[3], self.rails[4]
            near = (raw <= lo_raw + margin) | (raw >= hi_raw - margin)
            if near.any():
                self.near_tick = max(self.near_tick, int(tick[near].max()))

    @property
    def near_rail(self) -> bool:
        return self.last_tick - self.near_tick < self.hz  # within the last second

    def view(self, t0: int, points: int) -> dict[str, Any]:
        want = np.arange(self.latest - points + 1, self.latest + 1)
        slot = want % self.size
        have = (self.bins[slot] == want) & (want >= 0)
        t = ((want + 0.5) * self.width - t0) / self.hz
        info = self.info
        return {
            "id": f"{self.board}.{self.run}.{info.stream}", "board": self.board, "run": self.run,
            "stream": info.stream, "name": info.name, "unit": info.unit,
            "rate_hz": self.hz / info.period_us if info.period_us > 0 else None,
            "t_s": _list(t[have]), "lo": _list(self.lo[slot][have]),
            "hi": _list(self.hi[slot][have]), "last": _finite(self.last),
            "rails": None if self.rails is None else [self.rails[0], self.rails[1]],
            "near_rail": self.near_rail,
        }


def _rails(info: StreamInfo) -> tuple[float, float, int, int, int] | None:
    """(low, high in the unit, low, high raw, raw margin) of an integer stream."""
    if info.is_state or info.dtype.kind not in "iu":
        return None
    ii = np.iinfo(info.dtype)
    a, b = ii.min * info.scale + info.offset, ii.max * info.scale + info.offset
    lo, hi = (a, b) if a <= b else (b, a)
    margin = int((int(ii.max) - int(ii.min)) * 0.01)
    return float(lo), float(hi), int(ii.min), int(ii.max), margin


@dataclass
class CoilCheck:
    """Coil transitions of a run and the current's mean after each has settled."""

    ticks: list[int] = field(default_factory=list)
    states: list[int] = field(default_factory=list)
    n: list[int] = field(default_factory=list)
    total: list[float] = field(default_factory=list)
    checked: int = 0  # transitions whose interval was judged
    on_levels: list[float] = field(default_factory=list)  # |mean| x sign of each good on-interval
    failed: tuple[int, int, float, float] | None = None  # (tick, state, mean, expected) latest bad
    failed_at: int = -1  # laptop ns when it was found
    current_tick = -1  # the newest current sample

    def transition(self, tick: int, state: int) -> None:
        if self.ticks and tick <= self.ticks[-1]:
            return  # a repeat (resent) or out of order: the first copy stands
        self.ticks.append(tick)
        self.states.append(state)
        self.n.append(0)
        self.total.append(0.0)

    def add(self, tick: np.ndarray, value: np.ndarray, settle: int) -> None:
        if not self.ticks:
            return
        self.current_tick = max(self.current_tick, int(tick.max()))
        starts = np.asarray(self.ticks, np.int64)
        k = np.searchsorted(starts, tick, side="right") - 1
        ok = (k >= 0) & (tick >= starts[np.maximum(k, 0)] + settle)
        if not ok.any():
            return
        k, v = k[ok], value[ok]
        for i in np.unique(k).tolist():
            sel = k == i
            self.n[i] += int(sel.sum())
            self.total[i] += float(v[sel].sum())

    def judge(self, now_ns: int) -> None:
        """Judge each interval the current has passed the end of."""
        while self.checked + 1 < len(self.ticks) and self.ticks[self.checked + 1] <= self.current_tick:
            i = self.checked
            self.checked += 1
            if self.n[i] < 3:
                continue  # too short to say (or the current stream not there)
            mean, state = self.total[i] / self.n[i], self.states[i]
            level = float(np.median(self.on_levels)) if len(self.on_levels) >= 2 else None
            if state != 0:
                signed = mean * state
                if level is None:
                    if abs(signed) > 0:
                        self.on_levels.append(signed)
                    continue
                if signed * math.copysign(1, level) < 0.5 * abs(level):
                    self.failed, self.failed_at = (self.ticks[i], state, mean, level * state), now_ns
                else:
                    self.on_levels = (self.on_levels + [signed])[-9:]
            elif level is not None and abs(mean) > 0.25 * abs(level):
                self.failed, self.failed_at = (self.ticks[i], state, mean, 0.0), now_ns


@dataclass
class BoardView:
    board: int
    run: int
    fw: str = ""
    fields: dict[str, Any] = field(default_factory=dict)
    battery: Series | None = None
    temp: Series | None = None
    dropped_up_at = -1  # laptop ns of the latest rise of the board's drop counter
    late_up_at = -1
    dropped_rise = 0  # by how much it last rose
    late_rise = 0


class AngleView:
    """Loss by rotor angle: the rate stream integrated (trapezoid rule), one
    point per frame; each SAMPLES frame's (seq, last tick) to place it."""

    def __init__(self, bins: int) -> None:
        self.bins = bins
        self.tick = array("q")
        self.angle = array("d")  # rad, at self.tick
        self.last: tuple[int, float, float] | None = None  # (tick, rate rad/s, angle)
        self.seq = array("q")  # frames not yet placed
        self.frame_tick = array("q")
        self.all_seq = array("q")  # every frame placed, for the lost ones' ticks
        self.all_tick = array("q")
        self.seen = np.zeros(bins, np.int64)
        self.resent_seqs = array("q")  # frames that came only when asked again
        self.resent = np.zeros(bins, np.int64)  # ... placed

    def rate(self, tick: np.ndarray, rad_s: np.ndarray, hz: int) -> None:
        order = np.argsort(tick, kind="stable")
        tick, w = tick[order], rad_s[order]
        if self.last is not None:
            keep = tick > self.last[0]
            tick, w = tick[keep], w[keep]
            if not tick.size:
                return
            t = np.r_[self.last[0], tick]
            w = np.r_[self.last[1], w]
            a0 = self.last[2]
        else:
            t, a0 = tick, 0.0
        step = np.diff(t) / hz * (w[1:] + w[:-1]) / 2
        ang = a0 + np.r_[0.0, np.cumsum(step)]
        self.tick.append(int(t[-1]))
        self.angle.append(float(ang[-1]))
        self.last = (int(t[-1]), float(w[-1]), float(ang[-1]))

    def frames(self, seqs: np.ndarray, last_ticks: np.ndarray) -> None:
        self.seq.frombytes(np.asarray(seqs, np.int64).tobytes())
        self.frame_tick.frombytes(np.asarray(last_ticks, np.int64).tobytes())

    def _angle_at(self, ticks: np.ndarray) -> np.ndarray:
        at = np.frombuffer(self.tick, np.int64)
        return np.interp(ticks, at, np.frombuffer(self.angle, np.float64))

    def _bin(self, angle: np.ndarray) -> np.ndarray:
        return (np.mod(angle, 2 * math.pi) / (2 * math.pi) * self.bins).astype(np.int64) % self.bins

    def place(self) -> None:
        """Frames up to the angle's newest point go into `seen`."""
        if len(self.tick) < 2 or not len(self.seq):
            return
        seq, tick = np.frombuffer(self.seq, np.int64), np.frombuffer(self.frame_tick, np.int64)
        ready = (tick <= self.tick[-1]) & (tick >= self.tick[0])
        if ready.any():
            where = self._bin(self._angle_at(tick[ready]))
            np.add.at(self.seen, where, 1)
            if len(self.resent_seqs):
                again = np.isin(seq[ready], np.frombuffer(self.resent_seqs, np.int64))
                np.add.at(self.resent, where[again], 1)
            self.all_seq.frombytes(seq[ready].tobytes())
            self.all_tick.frombytes(tick[ready].tobytes())
        wait = tick > self.tick[-1]
        self.seq, self.frame_tick = array("q", seq[wait].tobytes()), array("q", tick[wait].tobytes())

    def lost(self, gaps: Iterable[list[int]]) -> np.ndarray:
        """Frames in the gaps, binned by the angle their seq puts them at."""
        out = np.zeros(self.bins, np.int64)
        if len(self.all_seq) < 2:
            return out
        seq, tick = np.frombuffer(self.all_seq, np.int64), np.frombuffer(self.all_tick, np.int64)
        order = np.argsort(seq, kind="stable")
        seq, tick = seq[order], tick[order]
        missing = [np.arange(a, b + 1) for a, b, _ in gaps if b - a < 1_000_000]
        if not missing:
            return out
        m = np.concatenate(missing)
        m = m[(m >= seq[0]) & (m <= seq[-1])]
        if m.size:
            np.add.at(out, self._bin(self._angle_at(np.interp(m, seq, tick))), 1)
        return out


class LiveState(NullSink):
    """The decoder's calls, kept for the live view; see the module docstring."""

    def __init__(self, opts: WatchOptions | None = None, title: str = "slipless watch",
                 speed: float | None = None) -> None:
        self.opts = opts or WatchOptions()
        self.title, self.speed = title, speed
        self.origin_ns = -1  # laptop mono ns of the first arrival: watch time 0
        self.last_arrival_ns = -1
        self.streams: dict[tuple[int, int, int], StreamView] = {}
        self.t0: dict[Key, int] = {}  # each run's first sample tick
        self.hz: dict[Key, int] = {}
        self.coil: dict[Key, CoilCheck] = {}
        self.boards: dict[Key, BoardView] = {}
        self.angles: dict[Key, AngleView] = {}
        self.runs: dict[Key, RunState] = {}
        self.clock = Series(self.opts.history, 0.0)  # offset (ms) from the first, filtered
        self.rtt = Series(self.opts.history, 0.0)  # round trip (ms) of the ping that stands
        self._pings: list[tuple[float, float]] = []  # (round trip, offset) of the latest pings
        self._clock0: float | None = None
        self._sync_rx: dict[tuple[int, int, int], int] = {}
        self.loss = Series(self.opts.history, self.opts.every_s)
        self._counts: list[tuple[float, int, int]] = []  # (t, received, missing) once a second
        self.resent = 0
        self.link_up, self.link_state, self.link_why, self.link_since = True, "live", "", 0.0
        self.alarms = AlarmBook()
        self.missing_of = _missing

    # ---- laptop time ------------------------------------------------------------
    def seconds(self, mono_ns: int) -> float:
        return 0.0 if self.origin_ns < 0 else (mono_ns - self.origin_ns) / 1e9

    def _arrived(self, arrival: Arrival) -> None:
        if arrival.mono_ns >= 0:
            if self.origin_ns < 0:
                self.origin_ns = arrival.mono_ns
            self.last_arrival_ns = max(self.last_arrival_ns, arrival.mono_ns)

    def link(self, up: bool, state: str, mono_ns: int, why: str = "") -> None:
        """The recorder's (or the replayed capture's) word on the link."""
        if self.origin_ns < 0:
            self.origin_ns = mono_ns
        if up != self.link_up or state != self.link_state:
            self.link_since = self.seconds(mono_ns)
        self.link_up, self.link_state, self.link_why = up, state, why

    def run_ended(self) -> bool:
        """Every run that sent samples has sent END (a link down after that is the end)."""
        runs = [r for r in self.runs.values() if r.samples]
        return bool(runs) and all(r.end is not None for r in runs)

    # ---- decoder sink ----------------------------------------------------------
    def descriptor(self, run: RunState) -> None:
        self.runs[run.key] = run
        self.hz[run.key] = run.tick_hz or DEFAULT_TICK_HZ
        self.boards.setdefault(run.key, self._board(run)).fw = run.fw

    def _board(self, run: RunState) -> BoardView:
        o = self.opts
        return BoardView(run.board, run.run, run.fw, {}, Series(o.history, o.every_s),
                         Series(o.history, o.every_s))

    def sample_frames(self, run: RunState, info: StreamInfo, seqs: np.ndarray, ticks: np.ndarray,
                      counts: np.ndarray, raw: np.ndarray) -> None:
        key = (run.board, run.run, info.stream)
        self.runs[run.key] = run
        view = self.streams.get(key)
        if view is None or view.info is not info:
            view = self.streams[key] = StreamView(info, run, self.opts)
        _, tick = expand_frames(info, seqs, ticks, counts)
        self.t0[run.key] = min(self.t0.get(run.key, int(ticks.min())), int(ticks.min()))
        view.add(tick, raw)
        hz = self.hz.get(run.key, DEFAULT_TICK_HZ)
        if info.name == self.opts.current:
            self._coil(run).add(tick, raw * info.scale + info.offset, int(self.opts.settle_s * hz))
        ang = self._angle(run)
        ang.frames(seqs, ticks + (counts - 1) * info.period_us)
        factor = rate_factor(info)
        wanted = (info.name == self.opts.angle_stream) if self.opts.angle_stream else factor
        if wanted and factor is not None:
            ang.rate(tick, (raw * info.scale + info.offset) * factor, hz)

    def _angle(self, run: RunState) -> AngleView:
        a = self.angles.get(run.key)
        if a is None:
            a = self.angles[run.key] = AngleView(self.opts.angle_bins)
        return a

    def _coil(self, run: RunState) -> CoilCheck:
        c = self.coil.get(run.key)
        if c is None:
            c = self.coil[run.key] = CoilCheck()
        return c

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        if code == wire.EV_COIL:
            self._coil(run).transition(tick, value)

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        b = self.boards.setdefault(run.key, self._board(run))
        now = self.last_arrival_ns
        old = b.fields
        if old and fields["dropped"] > old.get("dropped", 0):
            b.dropped_up_at, b.dropped_rise = now, fields["dropped"] - old["dropped"]
        if old and fields["late"] > old.get("late", 0):
            b.late_up_at, b.late_rise = now, fields["late"] - old["late"]
        b.fields = dict(fields)
        t = self.seconds(now)
        assert b.battery is not None and b.temp is not None
        b.battery.add(t, fields["battery_mv"] / 1000 if fields["battery_mv"] else None)
        b.temp.add(t, fields["temp_cdeg"] / 100)

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        self._arrived(arrival)
        self.runs[run.key] = run
        if fate == "received" and origin == "resend":
            self.resent += 1
            if kind == wire.SAMPLES:
                self._angle(run).resent_seqs.append(seq)

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        self._arrived(arrival)
        if kind == wire.SYNC:
            self._sync_rx[(run.board, run.run, seq)] = arrival.mono_ns

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        if kind != wire.SYNC:
            return
        rx_ns = self._sync_rx.pop((run.board, run.run, seq), -1)
        if rx_ns < 0 or fields["host_ns"] <= 0:
            return
        hz = self.hz.get(run.key, DEFAULT_TICK_HZ)
        board_s = (fields["rx_tick"] + fields["tx_tick"]) / 2 / hz
        laptop_s = (fields["host_ns"] + rx_ns) / 2 / 1e9
        rtt = (rx_ns - fields["host_ns"]) / 1e9 - (fields["tx_tick"] - fields["rx_tick"]) / hz
        # the offset is good to half the round trip: of the last few pings the one
        # with the shortest round trip stands (a clock filter, common practice)
        self._pings = (self._pings + [(rtt, board_s - laptop_s)])[-CLOCK_FILTER:]
        if len(self._pings) < CLOCK_WARMUP:
            return  # too few to choose from yet
        rtt, offset = min(reversed(self._pings), key=lambda p: p[0])  # ties: the newest
        if self._clock0 is None:
            self._clock0 = offset
        self.clock.add(self.seconds(rx_ns), (offset - self._clock0) * 1e3, force=True)
        self.rtt.add(self.seconds(rx_ns), rtt * 1e3, force=True)

    # ---- the page's view ----------------------------------------------------------
    def totals(self) -> tuple[int, int, int]:
        runs = list(self.runs.values())
        return (sum(r.received for r in runs), sum(self.missing_of(r) for r in runs),
                sum(r.samples for r in runs))

    def recent_loss(self) -> tuple[float, float, float | None] | None:
        """(loss % over about the last loss_window_s of laptop time, that span in s,
        loss % of the run before it or None); None before two counts a second apart."""
        if len(self._counts) < 2:
            return None
        t1, r1, m1 = self._counts[-1]
        older = [c for c in self._counts if c[0] <= t1 - self.opts.loss_window_s]
        t0, r0, m0 = older[-1] if older else self._counts[0]
        seen = (r1 - r0) + (m1 - m0)
        if seen <= 0:
            return None
        before = None if r0 + m0 <= 0 else 100.0 * m0 / (r0 + m0)
        return max(0.0, 100.0 * (m1 - m0) / seen), t1 - t0, before

    def update(self, now_ns: int) -> None:
        """The per-tick bookkeeping a snapshot needs (also called by the terminal view)."""
        now_s = self.seconds(now_ns)
        received, missing, _ = self.totals()
        if not self._counts or now_s - self._counts[-1][0] >= 1.0:
            self._counts.append((now_s, received, missing))
            span = self.opts.loss_window_s * 3
            while len(self._counts) > 2 and self._counts[1][0] < now_s - span:
                self._counts.pop(0)
            recent = self.recent_loss()
            self.loss.add(now_s, None if recent is None else recent[0])
        for c in self.coil.values():
            c.judge(now_ns)
        for a in self.angles.values():
            a.place()
        self.alarms.update(evaluate(self, now_ns), now_s)

    def snapshot(self, now_ns: int) -> dict[str, Any]:
        self.update(now_ns)
        now_s = self.seconds(now_ns)
        received, missing, samples = self.totals()
        return {
            "v": 1, "title": self.title, "now_s": round(now_s, 3), "speed": self.speed,
            "link": {"up": self.link_up,
                     "state": "ended" if self.run_ended() and not self.link_up else self.link_state,
                     "since_s": round(self.link_since, 3), "why": self.link_why},
            "totals": {"frames": received, "missing": missing,
                       "loss_pct": round(100.0 * missing / max(1, received + missing), 3),
                       "samples": samples, "resent": self.resent},
            "loss_series": {"t_s": _list(self.loss.t), "loss_pct": _list(self.loss.v)},
            "angle": self._angle_view(),
            "clock": {"t_s": _list(self.clock.t), "offset_ms": _list(self.clock.v),
                      "rtt_ms": _list(self.rtt.v)},
            "boards": [self._board_view(b) for _, b in sorted(self.boards.items())],
            "streams": [v.view(self.t0.get((v.board, v.run), 0), self.opts.points)
                        for _, v in sorted(self.streams.items())],
            "coil": [self._coil_view(k, c) for k, c in sorted(self.coil.items()) if c.ticks],
            "alarms": self.alarms.view(),
        }

    def _angle_view(self) -> dict[str, Any] | None:
        placed = [(k, a) for k, a in sorted(self.angles.items()) if len(a.tick) >= 2]
        if not placed:
            return None
        n = self.opts.angle_bins
        seen, lost, resent = (np.zeros(n, np.int64) for _ in range(3))
        for key, a in placed:
            seen += a.seen
            resent += a.resent
            run = self.runs.get(key)
            if run is not None:
                lost += a.lost(run.gaps)
        width = 360.0 / n
        total = seen + lost  # the link failed a frame the first time: lost now, or resent
        pct = [None if t == 0 else round(100.0 * x / t, 3)
               for x, t in zip((lost + resent).tolist(), total.tolist())]
        return {"bin_deg": width, "deg": [round((i + 0.5) * width, 3) for i in range(n)],
                "seen": seen.tolist(), "lost": lost.tolist(), "resent": resent.tolist(),
                "loss_pct": pct}

    def _board_view(self, b: BoardView) -> dict[str, Any]:
        f = b.fields
        assert b.battery is not None and b.temp is not None
        return {"board": b.board, "run": b.run, "fw": b.fw,
                "battery_v": f["battery_mv"] / 1000 if f.get("battery_mv") else None,
                "temp_c": f["temp_cdeg"] / 100 if "temp_cdeg" in f else None,
                "dropped": f.get("dropped", 0), "late": f.get("late", 0),
                "queue_high": f.get("queue_high", 0), "free_ram": f.get("free_ram", 0),
                "t_s": _list(b.battery.t), "battery_series_v": _list(b.battery.v),
                "temp_series_c": _list(b.temp.v)}

    def _coil_view(self, key: Key, c: CoilCheck) -> dict[str, Any]:
        hz, t0 = self.hz.get(key, DEFAULT_TICK_HZ), self.t0.get(key, 0)
        ticks = np.asarray(c.ticks, np.int64)
        lo = ticks[-1] - int(self.opts.window_s * hz)
        i = max(0, int(np.searchsorted(ticks, lo, side="right")) - 1)  # the state at the window's start
        return {"board": key[0], "run": key[1], "t_s": _list((ticks[i:] - t0) / hz),
                "state": c.states[i:]}


def _missing(run: RunState) -> int:
    return sum(last - first + 1 for first, last, _ in run.gaps)


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else round(float(x), 6)


def _list(values: Any) -> list[float | None]:
    return [_finite(v) for v in (values.tolist() if isinstance(values, np.ndarray) else values)]
