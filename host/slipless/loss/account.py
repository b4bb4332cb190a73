"""Loss accounting per board and run: every frame and every sample in exactly one term.

Frames (one per sequence number 0 .. expected-1):

- expected: the END frame's `frames` count; without END, the highest seq
  obtained + 1 (later frames cannot be known; the report says so).
- received: the first good copy came live over the link (a capture's radio
  bytes, or a raw stream input), in order or not. `out_of_order` counts the
  received frames that came after a higher seq of their run (a part of
  received, not a separate term).
- recovered by resend: the first good copy came over the radio after the
  laptop had asked for that seq with a RESEND command (found among the
  bytes the laptop wrote: capture TX records, btsnoop writes).
- recovered from the mirror: the first good copy came from a --mirror file.
- dropped on the board: never obtained, and the board's own `dropped` counter
  (STATUS frames) accounts for it (loss/drops.py says how).
- lost on the radio: never obtained, and not dropped on the board.

  expected = received + recovered (resend + mirror) + lost + dropped

holds by construction; what makes it a check is that each term is compared
with what the decoder and the board said independently: obtained frames with
the decoder's count of first copies, lost + dropped with its missing count,
expected with END. Any difference is named as a discrepancy.

Side tallies (not terms): corrupt = the frames never obtained that most likely
arrived damaged, by SPEC section 6's one rule (the decoder's: in each gap left
at the end, as many of its first frames as damaged segments came in its place,
the gap split around every frame that filled it later), so it is the frames
table's `corrupt` count; a gap's causes and evidence also weigh the damaged
segments that came where frames later recovered were missing. duplicates =
extra copies over the link; mirror copies of frames already held are counted
apart.

Frames at seqs at or past END's frame count are replies to commands, not frames
of the run (SPEC 3.8); one of another kind there is a discrepancy. A stream of
a sample type this release does not read (SPEC 4 allows it) has its frames
received but its samples left out of the sample accounting, with a note.

A gap's cause (the first that holds, with its evidence):

- disconnection: the link went down (capture events) between the frames
  around it;
- board_overflow: the board's dropped counter places frames in it, or the
  board answered a resend with "no longer held";
- corruption: damaged segments came in its place (the deframer's, and the
  stretches of a capture file or btsnoop log the reader stepped over:
  decode/deframe.py);
- rotor_angle: none of these, and it lies in a sector of the turn where such
  gaps gather beyond chance (loss/sector.py: a one-sided binomial test of the
  gaps' angles against the angles of the frames received live);
- unknown: nothing points anywhere.

The board's dropped counter speaks of its live send queue; frames the inputs
hold that did not come over the live link (a mirror, a raw stream, a mirror
pull) may be among those it counted (loss/drops.py): they are a note, not a
discrepancy.

Samples, per stream (loss/streams.py): expected = END's per-stream total;
obtained samples take their frame's term; the samples missing from the
stream's tick grid are lost or dropped in proportion to the frames never
obtained around them. Seconds = samples x the stream's period.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from slipless.decode.decoder import REPLY_KINDS, Decoder
from slipless.loss.angle import histogram, rotor_angle
from slipless.loss.collect import Facts, LinkDown, Resend, RunFacts
from slipless.loss.drops import allocate
from slipless.loss.metrics import GMIN, summary
from slipless.loss.sector import explain
from slipless.loss.streams import StreamAccount, account_streams
from slipless.protocol import wire

RECEIVED, RESEND, MIRROR, LOST, DROPPED = range(5)
TERMS = ("received", "recovered_resend", "recovered_mirror", "lost", "dropped_board")
BROADCAST = 0xFFFF  # a command's board field meaning any board
MAX_UNSEEN_TAIL = 1_000_000  # frames END may claim beyond the last seen (~14 h at 20/s) before
# we call it damage rather than a run: the accounting holds a few bytes per frame
# Frames of one run the account holds per seq (about 40 bytes each while it is made): a seq
# past it (a frame whose CRC passed by chance carries any u32) is left out, named.
MAX_ACCOUNT_FRAMES = 1 << 24  # 9.7 days of frames at 20 a second
_REPLIES = (wire.SYNC, wire.ACK, wire.ERROR, wire.STATUS)  # the board answers commands after END
_AFTER_END = REPLY_KINDS  # kinds a board may send past END's count (SPEC 3.8)


@dataclass
class Gap:
    """A run of frames that did not arrive live, and what became of them."""

    first: int
    last: int
    terms: dict[str, int]
    corrupt: int
    board_counted: int  # frames the board's counters say it dropped here (recovered or not)
    board_start_us: int | None  # board time of the last frame before / first after
    board_end_us: int | None
    laptop_start_ns: int | None  # laptop wall clock when those two frames arrived
    laptop_end_ns: int | None
    cause: str
    evidence: list[str]
    resendable: bool

    @property
    def frames(self) -> int:
        return self.last - self.first + 1


@dataclass
class RunAccount:
    board: int
    run: int
    expected: int
    end_seen: bool
    cls: np.ndarray  # one of RECEIVED .. DROPPED per seq
    times_us: np.ndarray  # board time per seq (interpolated where the frame carried none)
    terms: dict[str, int]
    corrupt: int
    duplicates: int
    mirror_copies: int
    out_of_order: int
    streams: list[StreamAccount]
    gaps: list[Gap]
    checks: list[str] = field(default_factory=list)
    discrepancies: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    angle: dict[str, Any] | None = None  # loss_angle.histogram + its source
    angle_rad: np.ndarray | None = None  # rotor angle per seq
    burst: dict[str, Any] = field(default_factory=dict)  # loss_metrics.summary of live_lost
    idle: bool = False  # no run was started: status (and replies) only, nothing missing

    @property
    def live_lost(self) -> np.ndarray:
        return self.cls != RECEIVED

    @property
    def recovered(self) -> int:
        return self.terms["recovered_resend"] + self.terms["recovered_mirror"]

    @property
    def closes(self) -> bool:
        return not self.discrepancies


def _requested(resends: list[Resend], board: int, run: int) -> list[Resend]:
    return [r for r in resends if r.board in (board, BROADCAST) and r.run in (run, 0)]


def _classify(f: RunFacts, expected: int, asked: list[Resend]) -> tuple[np.ndarray, int]:
    cls = np.full(expected, LOST, dtype=np.int8)
    c = f.copies.columns()
    held = c.seq < expected
    seq, origin = c.seq[held], c.origin[held]
    cls[seq] = RECEIVED
    cls[seq[origin == f.copies.code("mirror")]] = MIRROR
    resent = np.flatnonzero(origin == f.copies.code("resend"))
    if resent.size and asked:
        mono = c.mono_ns[held][resent]
        for s, m in zip(seq[resent].tolist(), mono.tolist()):
            if any(r.first <= s <= r.last and (r.mono_ns < 0 or m < 0 or r.mono_ns <= m)
                   for r in asked):
                cls[s] = RESEND
    out_of_order = int(np.count_nonzero(c.late[held] & (cls[seq] == RECEIVED)))
    return cls, out_of_order


def _not_live(f: RunFacts, expected: int, pulls: list[Resend]) -> np.ndarray:
    """Frames obtained, but not over the live link the board's queue counter speaks
    of: read from a raw stream (a mirror file named as an input, a serial log), or
    arriving after the laptop asked the board for its mirror (PULL)."""
    c = f.copies.columns()
    held = c.seq < expected
    other = c.origin[held] == f.copies.code("stream")
    if pulls:
        mono = c.mono_ns[held]
        other |= (mono >= 0) & (mono >= min(r.mono_ns for r in pulls))
    out = np.zeros(expected, dtype=bool)
    out[c.seq[held][other]] = True
    return out


def _damaged(f: RunFacts, cls: np.ndarray, dropped: np.ndarray, whole_only: bool = False
             ) -> tuple[np.ndarray, int]:
    """Frames that most likely arrived damaged: the first D frames of each gap as
    it opened (D = damaged segments that came in its place), as the decoder
    assigns them, skipping frames that arrived later or that the board never sent.
    whole_only: only gaps with at least as many damaged segments as frames."""
    mark = np.zeros(cls.size, dtype=bool)
    count = 0
    for first, last, d in f.opened:
        idx = np.arange(first, min(last, cls.size - 1) + 1)
        idx = idx[cls[idx] != RECEIVED]
        count += min(d, idx.size)
        if whole_only and d < idx.size:
            continue
        # frames the board never sent go last (the counters may have been placed wrongly)
        idx = np.concatenate((idx[~dropped[idx]], idx[dropped[idx]]))
        mark[idx[:d]] = True
    return mark, count


def _times(f: RunFacts, expected: int) -> np.ndarray:
    s, t = f.known_ticks()
    keep = s < expected
    s, t = s[keep], t[keep]
    if not s.size:
        return np.full(expected, np.nan)
    # A frame is sent after the frames before it: an EVENTS frame's tick (the
    # event's) may be older than its predecessor's, so keep the running maximum.
    return np.maximum.accumulate(np.interp(np.arange(expected), s, t.astype(np.float64)))


def _expected(f: RunFacts, notes: list[str], disc: list[str]) -> tuple[int, bool]:
    """Frames the run had (END's count, else up to the last seen) and whether END counts."""
    seen = f.copies.high()
    if seen >= MAX_ACCOUNT_FRAMES:
        seq = f.copies.columns().seq
        far = seq[seq >= MAX_ACCOUNT_FRAMES]
        disc.append(f"{far.size} frame(s) at seq {far[0]}-{far[-1]} lie past the "
                    f"{MAX_ACCOUNT_FRAMES:,} frames accounted per run: left out (damage that "
                    "passed the CRC?)")
        seen = int(seq[seq < MAX_ACCOUNT_FRAMES].max(initial=-1))
    end = f.end
    if end is not None and (end["frames"] - seen - 1 > MAX_UNSEEN_TAIL
                            or end["frames"] > MAX_ACCOUNT_FRAMES):
        disc.append(f"END says the run had {end['frames']} frames, far beyond the last seen "
                    f"(seq {seen}): not trusted")
        end = None
    if end is None:
        notes.append(f"end of run not seen: frames after seq {seen} cannot be counted")
        return seen + 1, False
    c = f.copies.columns()
    beyond = c.seq >= end["frames"]  # (taken before END came: the decoder moved them out too)
    seqs = np.concatenate((c.seq[beyond], np.array([s for s, _ in f.after_end], np.int64)))
    kinds = np.concatenate((c.kind[beyond], np.array([k for _, k in f.after_end], np.int16)))
    odd = np.sort(seqs[~np.isin(kinds, _AFTER_END)])
    if odd.size:
        disc.append(f"{odd.size} frame(s) that are not replies came after END (seq {odd[0]}-"
                    f"{odd[-1]}; END says the run had {end['frames']})")
    return end["frames"], True


def _spec_corrupt(st: Any, expected: int) -> np.ndarray:
    """SPEC 6's corrupt frames: the first min(D, size) seqs of each gap the decoder
    left (the frames table's `corrupt` rows)."""
    mark = np.zeros(expected, dtype=bool)
    for first, last, d in st.gaps:
        mark[first : min(first + d, last + 1, expected)] = True
    return mark


def account_run(f: RunFacts, dec: Decoder, resends: list[Resend], downs: list[LinkDown]
                ) -> RunAccount:
    st = f.state
    notes: list[str] = []
    disc: list[str] = []
    expected, end_seen = _expected(f, notes, disc)
    asked = _requested(resends, st.board, st.run)
    cls, out_of_order = _classify(f, expected, [r for r in asked if not r.pull])
    # A gap with as many damaged segments as missing frames was all sent: the board
    # dropped none of it. Elsewhere the board's counters go first (they are counts;
    # where the damage sat inside a gap is a guess).
    none = np.zeros(expected, dtype=bool)
    sent, _ = _damaged(f, cls, none, whole_only=True)
    elsewhere = _not_live(f, expected, [r for r in asked if r.pull]) & (cls == RECEIVED)
    alloc, problems = allocate(cls != RECEIVED, [s for s in f.status if s[0] < expected], sent,
                               elsewhere)
    kept = int(np.count_nonzero(alloc & elsewhere))
    if kept:
        notes.append(f"the board counted {kept} frame(s) dropped from its live send queue that "
                     "the inputs hold: they were read from the board's mirror, not the live link "
                     "(the mirror keeps what the queue dropped)")
    alloc &= ~elsewhere
    damaged, _ = _damaged(f, cls, alloc)
    spec_corrupt = _spec_corrupt(st, expected)
    corrupt = int(np.count_nonzero(spec_corrupt))
    disc += problems
    cls[(cls == LOST) & alloc] = DROPPED
    if f.status and np.any(cls[max(f.status)[0]:] == LOST):
        notes.append(f"no STATUS after seq {max(f.status)[0]}: frames the board dropped after it "
                     "are counted as lost on the radio")
    terms = {name: int(np.count_nonzero(cls == k)) for k, name in enumerate(TERMS)}
    obtained = terms["received"] + terms["recovered_resend"] + terms["recovered_mirror"]
    never = terms["lost"] + terms["dropped_board"]
    checks = [f"frames: {expected} expected" + (" (END)" if end_seen else " (to the last seen)")
              + f" = {terms['received']} received + {obtained - terms['received']} recovered"
              f" + {terms['lost']} lost + {terms['dropped_board']} dropped on the board"]
    if obtained != st.received:
        disc.append(f"{obtained} frames classified as obtained, the decoder counted {st.received}")
    if never != dec.missing(st):
        disc.append(f"{never} frames never obtained, the decoder counted {dec.missing(st)} missing")
    times = _times(f, expected)
    streams, stream_disc = account_streams(_readable(f, notes), cls, expected)
    disc += stream_disc
    if st.undecodable:
        notes.append(f"{st.undecodable} frames could not be decoded (no descriptor, a stream it "
                     "does not define, or a sample type this release does not read)")
    if st.ticks_uncertain:
        notes.append(f"{st.ticks_uncertain} frames gave samples or events whose board time is "
                     "uncertain (too far in seq from every tick reference)")
    acc = RunAccount(st.board, st.run, expected, end_seen, cls, times, terms, corrupt,
                     f.duplicates, f.mirror_copies, out_of_order, streams, [], checks, disc, notes)
    acc.gaps = find_gaps(acc, f, alloc, damaged, spec_corrupt, downs)
    # Only status and command replies, nothing missing, no END: the board idling
    # outside a started run (e.g. its STATUS frames between boot and START).
    kinds = f.copies.columns().kind
    acc.idle = (not end_seen and not streams and bool(kinds.size) and terms["lost"] == 0
                and terms["dropped_board"] == 0 and bool(np.isin(kinds, _REPLIES).all()))
    return acc


def _readable(f: RunFacts, notes: list[str]) -> RunFacts:
    """The facts the sample accounting can use: without END's totals of streams whose
    sample type this release does not read (their frames are received, their samples
    cannot be placed on a grid)."""
    unread = f.state.bad_stream_ids - set(f.state.streams)
    if not unread or f.end is None:
        return f
    totals = [t for t in f.end["totals"] if t["stream"] not in unread]
    for t in f.end["totals"]:
        if t["stream"] in unread:
            notes.append(f"stream {t['stream']}: a sample type this release does not read; its "
                         f"{t['samples']} samples (END) are left out of the sample accounting")
    return replace(f, end={**f.end, "totals": totals})


def analyse(facts: Facts, angle_stream: str | None = None, index_marker: int | None = None,
            bins: int = 12, gmin: int = GMIN) -> list[RunAccount]:
    """Accounting, burst structure and loss against angle for every run."""
    out = []
    for _, f in sorted(facts.runs.items()):
        acc = account_run(f, facts.decoder, facts.resends, facts.link_down)
        t = acc.times_us
        span_s = (t[-1] - t[0]) / 1e6 if t.size > 1 and np.isfinite(t[[0, -1]]).all() else 0.0
        acc.burst = summary(acc.live_lost, span_s / (t.size - 1) if t.size > 1 else 0.0, gmin)
        angle, source = rotor_angle(f, t, angle_stream, index_marker,
                                    {s.stream: s.start_us for s in acc.streams})
        if angle is not None:
            acc.angle_rad = angle
            acc.angle = {"source": source, **histogram(angle, acc.live_lost, bins)}
            sectors = explain(angle, acc.cls == RECEIVED, acc.gaps, bins)
            acc.angle["sectors"] = [s.as_dict() for s in sectors]
        elif angle_stream or index_marker is not None:
            acc.notes.append(f"no loss against angle: {source}")
        out.append(acc)
    return out


# ---- gaps ----------------------------------------------------------------------------
def _live(f: RunFacts, seq: int) -> tuple[int, int, int] | None:
    """(mono_ns, wall_ns, source) of a frame that arrived live with laptop times."""
    c = f.copies.get(seq)
    if c is None or c.mono_ns < 0 or c.origin == "mirror":
        return None
    return c.mono_ns, c.wall_ns, c.source


def _cause(down: bool, counted: int, not_held: bool, corrupt: int) -> str:
    if down:
        return "disconnection"
    if counted or not_held:
        return "board_overflow"
    if corrupt:
        return "corruption"
    return "unknown"


def _evidence(acc: RunAccount, f: RunFacts, a: int, b: int, alloc: np.ndarray,
              damaged: np.ndarray, downs: list[LinkDown]) -> tuple[str, list[str], bool]:
    """The likely cause of gap a..b, what points to it, and whether it can still be resent."""
    before = _live(f, a - 1) if a > 0 else None
    after = _live(f, b + 1) if b + 1 < acc.expected else None
    evidence = []
    down = False
    if before or after:
        lo = before[0] if before else -(1 << 62)
        hi = after[0] if after else 1 << 62
        source = (before or after or (0, 0, 0))[2]
        spans = [d for d in downs
                 if d.source == source and d.start_mono_ns < hi and d.end_mono_ns > lo]
        if spans:
            down = True
            evidence.append(f"link down {len(spans)} time(s) between the frames around it")
    counted = int(np.count_nonzero(alloc[a : b + 1]))
    if counted:
        evidence.append(f"board counted {counted} frame(s) dropped from its send queue")
    held = [(x, y) for x, y in f.not_held if x <= b and y >= a]
    if held:
        evidence.append("board no longer held " + ", ".join(f"{x}-{y}" for x, y in held)
                        + " when asked to resend")
    corrupt = int(np.count_nonzero(damaged[a : b + 1]))
    if corrupt:
        evidence.append(f"{corrupt} damaged segment(s) came in their place")
    return _cause(down, counted, bool(held), corrupt), evidence, not held


def find_gaps(acc: RunAccount, f: RunFacts, alloc: np.ndarray, damaged: np.ndarray,
              corrupt: np.ndarray, downs: list[LinkDown]) -> list[Gap]:
    """The gaps in what arrived live; damaged: where damaged segments came (for the
    causes), corrupt: SPEC 6's corrupt frames (the gap's tally)."""
    m = acc.live_lost.astype(np.int8)
    edges = np.diff(np.concatenate(([0], m, [0])))
    t = acc.times_us
    out = []
    for a, b in zip(np.flatnonzero(edges == 1).tolist(), (np.flatnonzero(edges == -1) - 1).tolist()):
        part = acc.cls[a : b + 1]
        terms = {name: int(np.count_nonzero(part == k)) for k, name in enumerate(TERMS) if k}
        cause, evidence, resendable = _evidence(acc, f, a, b, alloc, damaged, downs)
        before = _live(f, a - 1) if a > 0 else None
        after = _live(f, b + 1) if b + 1 < acc.expected else None
        out.append(Gap(
            a, b, terms, int(np.count_nonzero(corrupt[a : b + 1])),
            int(np.count_nonzero(alloc[a : b + 1])),
            int(t[a - 1]) if a > 0 and np.isfinite(t[a - 1]) else None,
            int(t[b + 1]) if b + 1 < t.size and np.isfinite(t[b + 1]) else None,
            before[1] if before else None, after[1] if after else None,
            cause, evidence, resendable))
    return out
