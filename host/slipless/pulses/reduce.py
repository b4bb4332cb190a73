"""Reducing each coil pulse of a run to one response with its standard error.

response = plateau mean - baseline line at the plateau's centre, where the
line joins the means of the baselines before and after (with symmetric
windows: their plain mean). A linear drift cancels. The standard error of
each window mean comes from batch means (contiguous blocks of the window), so
noise correlated over a few samples (the amplifier's bandwidth) is not
mistaken for independent samples.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from slipless.errors import InputError
from slipless.pulses.data import RunData, Series
from slipless.pulses.find import (
    Pulse,
    Windows,
    choose_windows,
    from_events,
    merge,
    pulses_in_current,
    rise_of,
)

MIN_COVER = 0.5  # a window needs half its expected samples (the rest lost on the link)
MIN_WINDOW = 4  # samples
MAX_BATCHES = 32
BATCH_MIN = 16  # samples per batch, enough to span the amplifier's correlation time
STEADY_RAD_S, STEADY_FRACTION = 0.05, 0.05  # rotation change allowed between the baselines
STEADY_CURRENT = 0.10  # plateau current may sag this much (the coil warms up) [common practice]


@dataclass
class Settings:
    signal: str = "cap_amp"
    current: str = "coil_current"
    rotation: str | None = None  # None: the first of ROTATION_NAMES present
    rotation_rate: dict[tuple[int, int] | None, float] = field(default_factory=dict)
    source: str = "auto"  # auto, events, current
    on_amps: float | None = None
    off_amps: float | None = None
    settle_s: float | None = None
    baseline_s: float | None = None
    plateau_s: float | None = None


ROTATION_NAMES = ("gyro_z", "rotation_rate")


@dataclass
class PulseResult:
    board: int
    run: int
    index: int
    onset_s: float
    end_s: float
    polarity: int
    current_a: float
    rotation_rad_s: float
    response_v: float
    se_v: float
    plateau_v: float
    before_v: float
    after_v: float
    n_plateau: int
    found_by: str = ""
    note: str = ""
    shape: WaveShape | None = field(default=None, repr=False, compare=False)  # None: no waveform

    @property
    def used(self) -> bool:
        return not self.note

    def waves(self) -> tuple[np.ndarray | None, np.ndarray | None]:
        """(signal minus the baseline line, coil current) on the common grid."""
        return (None, None) if self.shape is None else (self.shape.signal(), self.shape.current())

    @property
    def wave(self) -> np.ndarray | None:
        return self.waves()[0]

    @property
    def wave_amps(self) -> np.ndarray | None:
        return self.waves()[1]


@dataclass(frozen=True, eq=False)
class WaveShape:
    """What a pulse's waveforms are made from, when asked: thousands of pulses'
    waveforms kept at once would outweigh the run's own samples."""

    sig: Series
    cur: Series | None
    onset_s: float
    grid_s: np.ndarray  # shared by every pulse
    sample_s: float
    cur_s: float
    before_v: float  # the baseline line: means and centres of the baselines
    after_v: float
    before_c: float
    after_c: float

    def signal(self) -> np.ndarray:
        t = self.onset_s + self.grid_s
        m_b, m_a, c_b, c_a = self.before_v, self.after_v, self.before_c, self.after_c
        drift = m_b + (t - c_b) / (c_a - c_b) * (m_a - m_b)  # the baseline line
        return _resample(self.sig, t, self.sample_s) - drift

    def current(self) -> np.ndarray | None:
        return None if self.cur is None else _resample(self.cur, self.onset_s + self.grid_s,
                                                       self.cur_s)


@dataclass
class RunPlan:
    """A run's pulses and windows, found before any reduction."""

    data: RunData
    pulses: list[Pulse]
    windows: Windows
    source: str
    sample_s: float
    rotation_from: str


def window_mean(s: Series, start: float, stop: float, sample_s: float) -> tuple[float, float, int]:
    """Mean, batch-means standard error and sample count; NaN if too few samples."""
    i0, i1 = s.span(start, stop)
    x = s.values(i0, i1)
    expected = max((stop - start) / sample_s, 1.0)
    if x.size < max(MIN_WINDOW, MIN_COVER * expected):
        return math.nan, math.nan, int(x.size)
    nb = min(MAX_BATCHES, x.size // BATCH_MIN)
    if nb >= 2:
        edges = (np.arange(nb) * x.size) // nb
        means = np.add.reduceat(x, edges) / np.diff(np.append(edges, x.size))
        se = float(means.std(ddof=1) / math.sqrt(nb))
    else:
        se = float(x.std(ddof=1) / math.sqrt(x.size))
    return float(x.mean()), se, int(x.size)


def _period(s: Series) -> float:
    return s.period()


def _stream(rd: RunData, name: str, option: str) -> Series:
    if name not in rd.streams:
        have = ", ".join(sorted(rd.streams)) or "none"
        raise InputError(f"{rd.label} has no stream {name!r} (streams: {have}); use {option} NAME")
    return rd.streams[name]


def plan_run(rd: RunData, st: Settings) -> RunPlan | None:
    """Find the pulses and windows of one run; None if it has no pulses."""
    sig = _stream(rd, st.signal, "--signal")
    cur = rd.streams.get(st.current)
    has_events = bool(rd.coil_state.size and np.any(rd.coil_state != 0))
    source = st.source
    if source == "auto":
        source = "events" if has_events else "current"
    if source == "events" and not has_events:
        raise InputError(f"{rd.label} has no coil events; use --pulses-from current")
    if source == "current":
        cur = _stream(rd, st.current, "--current")
        pulses = pulses_in_current(cur, st.on_amps, st.off_amps)
    else:
        pulses = from_events(rd.coil_t_s, rd.coil_state)
        if cur is not None and st.source == "auto":
            pulses = merge(pulses, pulses_in_current(cur, st.on_amps, st.off_amps))
    if not pulses:
        return None
    sample_s = _period(sig)
    rise = rise_of(cur, pulses) if cur is not None else None
    windows = choose_windows(pulses, rise, sample_s, st.settle_s, st.baseline_s, st.plateau_s)
    return RunPlan(rd, pulses, windows, source, sample_s, _rotation_source(rd, st))


def _rotation_source(rd: RunData, st: Settings) -> str:
    if (rd.board, rd.run) in st.rotation_rate:
        return "metadata"
    names = (st.rotation,) if st.rotation else ROTATION_NAMES
    for n in names:
        if n in rd.streams:
            return n
    if None in st.rotation_rate:
        return "metadata"
    if st.rotation:
        _stream(rd, st.rotation, "--rotation")
    raise InputError(f"{rd.label} has no rotation stream ({' or '.join(ROTATION_NAMES)}): "
                     "use --rotation NAME or --rotation-rate VALUE")


def reduce_run(plan: RunPlan, st: Settings, grid_s: np.ndarray) -> list[PulseResult]:
    rd, w = plan.data, plan.windows
    sig = rd.streams[st.signal]
    cur = rd.streams.get(st.current)
    cur_s = _period(cur) if cur is not None else math.nan
    busy = [(p.onset_s, p.end_s + w.settle_s) for p in plan.pulses]  # coil on or settling
    out = []
    for k, p in enumerate(plan.pulses):
        before, plat, after = w.spans(p)
        m_b, se_b, _ = window_mean(sig, *before, plan.sample_s)
        m_p, se_p, n_p = window_mean(sig, *plat, plan.sample_s)
        m_a, se_a, _ = window_mean(sig, *after, plan.sample_s)
        # the drift line through the baseline centres, at the plateau centre
        c_b, c_p, c_a = (sum(before) / 2, sum(plat) / 2, sum(after) / 2)
        f = (c_p - c_b) / (c_a - c_b)
        base = m_b + f * (m_a - m_b)
        resp = m_p - base
        se = math.sqrt(se_p**2 + ((1 - f) * se_b) ** 2 + (f * se_a) ** 2)
        amps = window_mean(cur, *plat, cur_s)[0] if cur is not None else math.nan
        rot = _rotation(plan, st, plat)
        note = p.note or _note(k, busy, before, after, resp, rot) or (
            _check_coil(cur, plat, cur_s, p) if cur is not None else "") or (
            "" if _steady(plan, st, before, after) else "rotation rate changed during the pulse")
        r = PulseResult(rd.board, rd.run, k, p.onset_s, p.end_s, p.polarity, amps, rot, resp, se,
                        m_p, m_b, m_a, n_p, p.source, note)
        if math.isfinite(resp):
            r.shape = WaveShape(sig, cur, p.onset_s, grid_s, plan.sample_s, cur_s, m_b, m_a, c_b, c_a)
        out.append(r)
    return out


def _rotation(plan: RunPlan, st: Settings, span: tuple[float, float]) -> float:
    rd = plan.data
    if plan.rotation_from == "metadata":
        return st.rotation_rate.get((rd.board, rd.run), st.rotation_rate.get(None, math.nan))
    s = rd.streams[plan.rotation_from]
    i0, i1 = s.span(*span)
    return float(s.values(i0, i1).mean()) if i1 > i0 else math.nan


def _steady(plan: RunPlan, st: Settings, before: tuple[float, float],
            after: tuple[float, float]) -> bool:
    """Same rotation rate in both baselines? A speed change moves offsets that
    the drift line cannot follow."""
    if plan.rotation_from == "metadata":
        return True
    w0, w1 = _rotation(plan, st, before), _rotation(plan, st, after)
    if not (math.isfinite(w0) and math.isfinite(w1)):
        return True  # judged by the plateau's own rotation data
    return abs(w1 - w0) <= max(STEADY_RAD_S, STEADY_FRACTION * max(abs(w0), abs(w1)))


def _check_coil(cur: Series, plat: tuple[float, float], cur_s: float, p: Pulse) -> str:
    """The coil current must match the pulse: its sign, and steady over the
    plateau (a lost coil event makes a 'pulse' that spans an off period)."""
    span = plat[1] - plat[0]
    first = window_mean(cur, plat[0], plat[0] + span / 5, cur_s)[0]
    last = window_mean(cur, plat[1] - span / 5, plat[1], cur_s)[0]
    if not (math.isfinite(first) and math.isfinite(last)):
        return ""  # judged by the windows' own sample counts
    if np.sign(first) != p.polarity or np.sign(last) != p.polarity:
        return "coil current does not match the coil event"
    if abs(last - first) > STEADY_CURRENT * max(abs(first), abs(last)):
        return "coil current not steady on the plateau (a coil event lost?)"
    return ""


def _note(k: int, busy: list[tuple[float, float]], before: tuple[float, float],
          after: tuple[float, float], resp: float, rot: float) -> str:
    """Why a pulse is left out ('' if it is used)."""
    if k > 0 and before[0] < busy[k - 1][1]:
        return "baseline before overlaps the previous pulse"
    if k + 1 < len(busy) and after[1] > busy[k + 1][0]:
        return "baseline after overlaps the next pulse"
    if not math.isfinite(resp):
        return "too few samples in a window (lost on the link or record edge)"
    if not math.isfinite(rot):
        return "no rotation data during the plateau"
    return ""


def _resample(s: Series, t: np.ndarray, sample_s: float) -> np.ndarray:
    """Values at times t; NaN where the nearest sample is more than 1.5 periods away.

    Only the samples around t are read: one more on each side gives np.interp
    the same neighbours it finds in the whole series."""
    n = s.n
    if n == 0 or t.size == 0:
        return np.full(t.size, np.nan)
    a = max(int(s.index(np.min(t))) - 1, 0)
    b = min(int(s.index(np.max(t), "right")) + 1, n)
    ts, vs = s.times(a, b), s.values(a, b)
    v = np.interp(t, ts, vs)
    j = np.clip(np.searchsorted(ts, t) + a, 1, n - 1) - a
    near = np.minimum(np.abs(ts[j] - t), np.abs(ts[j - 1] - t))
    return np.where(near <= 1.5 * sample_s, v, np.nan)


def waveform_grid(plans: list[RunPlan]) -> np.ndarray:
    """One time grid relative to onset for every run, so conditions average across runs."""
    dt = min(p.sample_s for p in plans)
    lead = max(p.windows.guard_s + p.windows.baseline_s for p in plans)
    tail = max(float(np.median([q.end_s - q.onset_s for q in p.pulses]))
               + p.windows.settle_s + p.windows.baseline_s for p in plans)
    return np.arange(-lead, tail + dt / 2, dt)
