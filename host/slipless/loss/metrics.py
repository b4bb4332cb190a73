"""Burst structure of a loss sequence.

Input everywhere: one flag per frame in sequence order, True = lost (for
`slipless loss`: the frame did not arrive live over the link; loss.py).

- RFC 3357 (one-way loss pattern sample metrics): loss distance = the
  difference in sequence number between a lost frame and the previous lost
  frame, 0 for the first loss; a loss period starts at a lost frame whose
  predecessor arrived (or at frame 0). Inter-loss-period length of period k =
  the loss distance of its first frame (0 for the first period).
- RFC 3611 sec. 4.7.2 (burst and gap metrics, Gmin): a burst is the longest run
  that starts and ends with a loss and holds no Gmin or more consecutive
  arrivals; everything else is gap. The run is taken to be preceded and
  followed by Gmin arrivals, so a loss with Gmin or more arrivals on each
  side is a gap loss. Densities are fractions here; `as_octet` gives the
  RFC's 0..255 field (integer part of 256 x fraction, at most 255).
- Two-state Markov model (the Gilbert form of the Gilbert-Elliott model, the
  state observed: lost = bad): p = P(good -> bad) = n_gb / n_g and
  r = P(bad -> good) = n_bg / n_b, the maximum-likelihood estimates from the
  transition counts, with binomial standard errors. Loss inside the good state
  (the full Gilbert-Elliott model) is not fitted.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

GMIN = 16  # RFC 3611's recommended Gmin


def _flags(lost: Any) -> np.ndarray:
    return np.asarray(lost, dtype=bool).ravel()


def loss_distances(lost: Any) -> np.ndarray:
    """Per lost frame, its distance to the previous lost frame (first: 0)."""
    idx = np.flatnonzero(_flags(lost))
    return np.diff(idx, prepend=idx[:1]) if idx.size else idx


def loss_periods(lost: Any) -> list[tuple[int, int]]:
    """(index of the first frame, length) of each loss period."""
    f = _flags(lost).astype(np.int8)
    edges = np.diff(np.concatenate(([0], f, [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1)
    return [(int(s), int(e - s)) for s, e in zip(starts, ends)]


def loss_period_stream(lost: Any) -> list[tuple[int, int]]:
    """RFC 3357's Loss-Period-Stream: <period number, 1> per lost frame, <0, 0> otherwise."""
    f = _flags(lost)
    out = [(0, 0)] * f.size
    for k, (start, n) in enumerate(loss_periods(f), start=1):
        for i in range(start, start + n):
            out[i] = (k, 1)
    return out


def loss_distance_stream(lost: Any) -> list[tuple[int, int]]:
    """RFC 3357's Loss-Distance-Stream: <distance, 1> per lost frame, <0, 0> otherwise."""
    f = _flags(lost)
    out = [(0, 0)] * f.size
    for i, d in zip(np.flatnonzero(f).tolist(), loss_distances(f).tolist()):
        out[i] = (d, 1)
    return out


def inter_loss_period_lengths(lost: Any) -> list[int]:
    """Per loss period, the loss distance of its first frame (first period: 0)."""
    periods = loss_periods(lost)
    return [0] + [s - (ps + pn - 1) for (ps, pn), (s, _) in zip(periods, periods[1:])]


def noticeable_rate(lost: Any, delta: int) -> float:
    """Losses (after the first) at distance <= delta, over all losses."""
    d = loss_distances(lost)
    return float(np.count_nonzero(d[1:] <= delta) / d.size) if d.size else 0.0


@dataclass
class BurstGap:
    gmin: int
    bursts: int
    burst_frames: int  # frames inside bursts
    burst_lost: int
    gap_frames: int
    gap_lost: int
    gaps: int  # gap periods of at least one frame

    @property
    def burst_density(self) -> float:
        return self.burst_lost / self.burst_frames if self.burst_frames else 0.0

    @property
    def gap_density(self) -> float:
        return self.gap_lost / self.gap_frames if self.gap_frames else 0.0

    @property
    def burst_mean_frames(self) -> float:
        return self.burst_frames / self.bursts if self.bursts else 0.0

    @property
    def gap_mean_frames(self) -> float:
        return self.gap_frames / self.gaps if self.gaps else 0.0


def as_octet(fraction: float) -> int:
    """RFC 3611's rate field: integer part of 256 x fraction, at most 255."""
    return min(255, int(256 * fraction))


def burst_gap(lost: Any, gmin: int = GMIN) -> BurstGap:
    f = _flags(lost)
    idx = np.flatnonzero(f)
    bursts = burst_frames = burst_lost = 0
    spans: list[tuple[int, int]] = []
    if idx.size:
        # Losses closer than gmin arrivals (gap between indexes <= gmin) join one cluster.
        cut = np.flatnonzero(np.diff(idx) > gmin)
        firsts = np.concatenate(([0], cut + 1))
        lasts = np.concatenate((cut, [idx.size - 1]))
        for a, b in zip(firsts.tolist(), lasts.tolist()):
            if b > a:  # a lone loss with >= gmin arrivals each side is a gap loss
                spans.append((int(idx[a]), int(idx[b])))
                bursts += 1
                burst_frames += int(idx[b] - idx[a] + 1)
                burst_lost += b - a + 1
    gap_frames = f.size - burst_frames
    edges = [0] + [x for s, e in spans for x in (s, e + 1)] + [f.size]
    gaps = sum(1 for a, b in zip(edges[::2], edges[1::2]) if b > a)
    return BurstGap(gmin, bursts, burst_frames, burst_lost, gap_frames,
                    int(idx.size) - burst_lost, gaps)


@dataclass
class TwoState:
    n_good: int  # arrived frames with a successor
    n_good_bad: int
    n_bad: int  # lost frames with a successor
    n_bad_good: int

    @property
    def p(self) -> float:
        return self.n_good_bad / self.n_good if self.n_good else 0.0

    @property
    def r(self) -> float:
        return self.n_bad_good / self.n_bad if self.n_bad else 0.0

    @property
    def p_stderr(self) -> float:
        return math.sqrt(self.p * (1 - self.p) / self.n_good) if self.n_good else 0.0

    @property
    def r_stderr(self) -> float:
        return math.sqrt(self.r * (1 - self.r) / self.n_bad) if self.n_bad else 0.0

    @property
    def bad_fraction(self) -> float:
        """Stationary share of the bad state, p / (p + r)."""
        return self.p / (self.p + self.r) if self.p + self.r else 0.0


def two_state(lost: Any) -> TwoState:
    f = _flags(lost)
    a, b = f[:-1], f[1:]
    return TwoState(n_good=int(np.count_nonzero(~a)), n_good_bad=int(np.count_nonzero(~a & b)),
                    n_bad=int(np.count_nonzero(a)), n_bad_good=int(np.count_nonzero(a & ~b)))


def summary(lost: Any, seconds_per_frame: float = 0.0, gmin: int = GMIN) -> dict[str, Any]:
    """Everything above as plain numbers, for the JSON document and the report."""
    f = _flags(lost)
    periods = loss_periods(f)
    lengths = [n for _, n in periods]
    d = loss_distances(f)
    bg = burst_gap(f, gmin)
    ts = two_state(f)
    hist: dict[str, int] = {}
    for n in lengths:
        hist[str(n)] = hist.get(str(n), 0) + 1
    return {
        "frames": int(f.size),
        "lost": int(np.count_nonzero(f)),
        "rfc3357": {
            "loss_periods": len(periods),
            "period_length_mean": float(np.mean(lengths)) if lengths else 0.0,
            "period_length_max": max(lengths, default=0),
            "period_lengths": dict(sorted(hist.items(), key=lambda kv: int(kv[0]))),
            "inter_period_mean": float(np.mean(inter_loss_period_lengths(f)[1:]))
            if len(periods) > 1 else 0.0,
            "loss_distance_mean": float(np.mean(d[1:])) if d.size > 1 else 0.0,
            "loss_distance_median": float(np.median(d[1:])) if d.size > 1 else 0.0,
        },
        "rfc3611": {
            **asdict(bg),
            "burst_density": bg.burst_density,
            "gap_density": bg.gap_density,
            "burst_density_octet": as_octet(bg.burst_density),
            "gap_density_octet": as_octet(bg.gap_density),
            "burst_mean_s": bg.burst_mean_frames * seconds_per_frame,
            "gap_mean_s": bg.gap_mean_frames * seconds_per_frame,
        },
        "two_state": {
            **asdict(ts),
            "p_good_to_bad": ts.p, "r_bad_to_good": ts.r,
            "p_stderr": ts.p_stderr, "r_stderr": ts.r_stderr,
            "bad_fraction": ts.bad_fraction,
            "mean_burst_frames": 1 / ts.r if ts.r else 0.0,
            "mean_run_frames": 1 / ts.p if ts.p else 0.0,
        },
    }
