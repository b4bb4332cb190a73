"""Faults in a whole run: the board's mirror file cut by a power loss at any
point, the capture cut at any point. Whatever a source still holds is counted,
the loss report closes, and its terms equal the truth of the plan with only
the frames that survived the cut (truth from slipless.sim.lossy, never from
the decoder)."""

from __future__ import annotations

import dataclasses
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_loss_accounting import plans

from slipless.loss.account import analyse
from slipless.loss.collect import collect
from slipless.sim.lossy import Plan, frames, truth, write


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(plans(), st.floats(0.0, 1.0))
def test_mirror_cut_by_power_loss(plan: Plan, where: float) -> None:
    fr = frames(plan)
    held = sorted(plan.mirror)
    with tempfile.TemporaryDirectory() as tmp:
        cap, mirror = write(plan, Path(tmp))
        data = mirror.read_bytes()
        cut = int(where * len(data))
        mirror.write_bytes(data[:cut])  # the last flush before the power went
        kept, end = set(), 0
        for seq in held:
            end += len(fr[seq])
            if end <= cut:
                kept.add(seq)
        # an empty mirror is refused with one line (inputs.check_input): leave it out
        facts = collect([cap], [mirror] if cut else [])
        (acc,) = analyse(facts)
    want = truth(dataclasses.replace(plan, mirror=kept))
    assert acc.closes, acc.discrepancies
    assert acc.expected == plan.n_frames
    assert sum(acc.terms.values()) == acc.expected
    for term in ("received", "recovered_resend", "recovered_mirror"):
        assert acc.terms[term] == want["frames"][term], term
    assert (acc.terms["lost"] + acc.terms["dropped_board"]
            == want["frames"]["lost"] + want["frames"]["dropped_board"])


def _records(path: Path) -> list[tuple[int, int, int, bytes]]:
    """(offset, end, type, payload) of every record, from the uncut file."""
    from slipless.io.capture import CaptureReader

    with path.open("rb") as f:
        recs = [(r.offset, r.type, r.payload) for r in CaptureReader(f)]
    size = path.stat().st_size
    ends = [o for o, _, _ in recs[1:]] + [size]
    return [(o, e, t, p) for (o, t, p), e in zip(recs, ends, strict=True)]


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(plans(), st.floats(0.0, 1.0))
def test_capture_cut_with_the_mirror_whole(plan: Plan, where: float) -> None:
    """The laptop's capture cut at any point (its disk filled, the laptop died);
    the board's mirror holds every frame: nothing is lost, and each frame is
    counted where it survived (live, by resend, or from the mirror)."""
    from slipless.io import capture
    from slipless.protocol import wire

    plan = dataclasses.replace(plan, mirror=set(range(plan.n_frames)))
    with tempfile.TemporaryDirectory() as tmp:
        cap, mirror = write(plan, Path(tmp))
        recs = _records(cap)
        first = recs[0][0]
        cut = first + int(where * (cap.stat().st_size - first))
        cap.write_bytes(cap.read_bytes()[:cut])
        live, resent, after_tx = set(), set(), False
        for _, end, type_, payload in recs:
            if type_ == capture.TX:
                after_tx = True
            if type_ != capture.RX or end > cut:
                continue
            bodies = wire.Deframer().feed(payload)
            if bodies:  # a frame flipped on the way is no copy of anything
                (resent if after_tx else live).add(wire.parse_header(bodies[0])[4])
        facts = collect([cap], [mirror])
        (acc,) = analyse(facts)
    gone = set(range(plan.n_frames)) - live - plan.corrupt - plan.board_drop
    want = truth(dataclasses.replace(plan, lost=plan.lost | gone, resend=plan.resend & resent))
    assert acc.closes, acc.discrepancies
    assert acc.expected == plan.n_frames
    assert acc.terms["lost"] == acc.terms["dropped_board"] == 0
    for term in ("received", "recovered_resend", "recovered_mirror"):
        assert acc.terms[term] == want["frames"][term], term
