"""The loss accounting against runs whose every frame's fate is known.

Runs come from slipless.sim.lossy: a capture with chosen losses, damaged
frames, duplicates, swapped pairs, board queue drops, resends and a mirror
file; the truth is computed from that plan alone, never from the decoder.
"""

from __future__ import annotations

import struct
import tempfile
import zlib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from slipless.loss.account import RunAccount, analyse
from slipless.loss.collect import collect
from slipless.protocol import wire
from slipless.sim.lossy import BOARD, RUN, Plan, frames, truth, write

FATES = ("ok", "ok", "ok", "ok", "lost", "corrupt", "dup", "swap", "drop")
BOARD_ONLY = ("ok", "ok", "ok", "dup", "swap", "drop", "drop")  # the split is then certain
RADIO_ONLY = ("ok", "ok", "ok", "lost", "corrupt", "dup", "swap")
SETS = {"lost": "lost", "corrupt": "corrupt", "dup": "duplicate", "swap": "swap", "drop": "board_drop"}


@st.composite
def plans(draw: st.DrawFn) -> Plan:
    n = draw(st.integers(14, 70))
    plan = Plan(n, queue=draw(st.integers(1, 4)), status_every=draw(st.integers(3, 8)),
                seed=draw(st.integers(0, 2**16)))
    statuses = plan.status_seqs()
    drop_limit = (statuses[-1] - 1 - plan.queue) if statuses else -1  # counted by a later STATUS
    kinds = draw(st.sampled_from((FATES, BOARD_ONLY, RADIO_ONLY)))
    fates = draw(st.lists(st.sampled_from(kinds), min_size=n, max_size=n))
    fates[0] = fates[-1] = "ok"  # the descriptor and END arrive
    if statuses:  # and the last STATUS: drops no STATUS reports are unknowable
        fates[statuses[-1]] = "ok"
    for seq, fate in enumerate(fates):
        if fate == "drop" and seq > drop_limit:
            fate = "lost"
        if fate == "swap":  # with a plain successor that is not END
            if seq + 2 < n and fates[seq + 1] == "ok":
                fates[seq + 1] = "partner"
            else:
                fate = "ok"
        if fate in SETS:
            getattr(plan, SETS[fate]).add(seq)
    missing = sorted(plan.lost | plan.corrupt | plan.board_drop)
    for seq in missing:
        way = draw(st.sampled_from(("none", "none", "resend", "mirror")))
        if way == "resend":
            plan.resend.add(seq)
        elif way == "mirror":
            plan.mirror.add(seq)
    plan.mirror |= set(draw(st.lists(st.integers(0, n - 1), max_size=4)))  # copies of frames held
    return plan


def _run(plan: Plan) -> RunAccount:
    with tempfile.TemporaryDirectory() as tmp:
        cap, mirror = write(plan, Path(tmp))
        facts = collect([cap], [mirror] if plan.mirror else [])
        (acc,) = analyse(facts)
    (st,) = facts.decoder.runs.values()
    assert acc.corrupt == facts.decoder.corrupt_guess(st)  # one rule: the frames table's
    return acc


def _spec6_corrupt(plan: Plan) -> int:
    """SPEC section 6 applied to the plan's arrivals alone (the live link as
    sim.lossy.write sends it, then the resent frames, then the mirror): the
    frames never obtained that the rule calls corrupt."""
    order = list(range(plan.n_frames))
    for s in sorted(plan.swap):
        i = order.index(s)
        order[i], order[i + 1] = order[i + 1], order[i]
    arrivals: list[int | None] = []  # a seq, or None for a damaged segment
    for seq in order:
        if seq in plan.board_drop or seq in plan.lost:
            continue
        arrivals.append(None if seq in plan.corrupt else seq)
        if seq in plan.duplicate:
            arrivals.append(seq)
    arrivals += sorted(plan.resend) + sorted(plan.mirror)
    high, damage, gaps = -1, 0, []
    for a in arrivals:
        if a is None:
            damage += 1
            continue
        if a > high:
            if a > high + 1:
                gaps.append([high + 1, a - 1, damage if high >= 0 else 0])
            high = a
        else:
            for i, (first, last, d) in enumerate(gaps):
                if first <= a <= last:  # split: the first part keeps what it can hold
                    head = min(d, a - first)
                    parts = [[first, a - 1, head], [a + 1, last, min(d - head, last - a)]]
                    gaps[i : i + 1] = [p for p in parts if p[0] <= p[1]]
                    break
        damage = 0  # every frame of the run that arrives, duplicates too (SPEC 6)
    return sum(min(d, last - first + 1) for first, last, d in gaps)


def _mixed(plan: Plan) -> bool:
    """Does a radio loss share a board-drop counting window (then which frames the
    board dropped is a rule, not a certainty; loss_drops.py)?"""
    q = plan.queue
    radio = plan.lost | plan.corrupt
    gone = (radio | plan.board_drop) - plan.resend - plan.mirror
    prev = -1
    for b in plan.status_seqs():
        if b in gone:  # the tool never sees this STATUS: its window joins the next
            continue
        window = range(prev - q, b - q)
        if plan.board_drop & set(window) and radio & set(window):
            return True
        prev = b
    return False


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(plans())
def test_accounting_closes_and_matches_the_truth(plan: Plan) -> None:
    acc = _run(plan)
    want = truth(plan)
    assert acc.closes, acc.discrepancies
    assert acc.expected == plan.n_frames
    assert sum(acc.terms.values()) == acc.expected  # expected = received + recovered + lost + dropped
    got = acc.terms
    exp = want["frames"]
    for term in ("received", "recovered_resend", "recovered_mirror"):
        assert got[term] == exp[term], term
    assert got["lost"] + got["dropped_board"] == exp["lost"] + exp["dropped_board"]
    assert acc.corrupt == _spec6_corrupt(plan)
    assert acc.duplicates == want["duplicates"]
    assert acc.out_of_order == want["out_of_order"]
    assert acc.mirror_copies == want["mirror_copies"]
    samples = {s.stream: s.samples for s in acc.streams}
    for sid, terms in want["samples"].items():
        assert sum(samples[sid].values()) == sum(terms.values())
        for term in ("received", "recovered_resend", "recovered_mirror"):
            assert samples[sid][term] == terms[term], (sid, term)
        assert (samples[sid]["lost"] + samples[sid]["dropped_board"]
                == terms["lost"] + terms["dropped_board"])
    if not _mixed(plan):
        assert got["dropped_board"] == exp["dropped_board"]
        names = ("received", "recovered_resend", "recovered_mirror", "lost", "dropped_board")
        assert [names[k] for k in acc.cls.tolist()] == [want["term"][s] for s in range(acc.expected)]
    if not (plan.lost | plan.corrupt) or not plan.board_drop:
        for sid, terms in want["samples"].items():
            assert samples[sid] == terms, sid


def test_a_hand_made_run() -> None:
    plan = Plan(30, queue=2, status_every=5, lost={3, 4}, corrupt={7}, duplicate={9}, swap={11},
                board_drop={14, 15, 16}, resend={3, 15}, mirror={4, 2})
    acc = _run(plan)
    assert acc.closes, acc.discrepancies
    assert acc.terms == {"received": 24, "recovered_resend": 2, "recovered_mirror": 1, "lost": 1,
                         "dropped_board": 2}
    assert (acc.corrupt, acc.duplicates, acc.out_of_order, acc.mirror_copies) == (1, 1, 1, 1)
    causes = {(g.first, g.last): g.cause for g in acc.gaps}
    assert causes == {(3, 4): "unknown", (7, 7): "corruption", (14, 16): "board_overflow"}


def test_without_end_the_tail_is_unknown(tmp_path: Path) -> None:
    plan = Plan(30, lost={5})
    fr = frames(plan)
    (tmp_path / "cut.bin").write_bytes(b"".join(f for i, f in enumerate(fr[:-3]) if i != 5))
    (acc,) = analyse(collect([tmp_path / "cut.bin"]))
    assert not acc.end_seen and acc.expected == 27 and acc.closes
    assert acc.terms["lost"] == 1
    assert any("end of run not seen" in n for n in acc.notes)
    assert not any(s.expected_known for s in acc.streams)


def test_an_end_frame_claiming_far_too_many_frames_is_not_trusted(tmp_path: Path) -> None:
    plan = Plan(12)
    fr = frames(plan)[:-1]
    body = (struct.pack(wire.HEADER, (wire.VERSION << 4) | wire.END, BOARD, RUN, 11)
            + struct.pack(wire.END_FIXED, 11_000, 10**8, 1))
    fr.append(wire.cobs_encode(body + struct.pack("<I", zlib.crc32(body))) + b"\x00")
    (tmp_path / "odd.bin").write_bytes(b"".join(fr))
    (acc,) = analyse(collect([tmp_path / "odd.bin"]))
    assert acc.expected == 12 and not acc.end_seen and not acc.closes
    assert "not trusted" in acc.discrepancies[0]


def test_a_board_idling_before_its_run_is_told_apart(tmp_path: Path,
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    """STATUS frames sent before any START (run 1) are an idle run: accounted,
    flagged, printed in one line; a run whose descriptor was lost is not."""
    idle = wire.Encoder(1, 1)
    data = b"".join(idle.frame(idle.status(t, 3900, 2500, 1000, 1, 0, 0, 0)) for t in (0, 5_000_000))
    cut = wire.Encoder(1, 3)  # samples only: its descriptor never came
    off = cut.begin_samples(0, 10_000_000)
    cut.body[off : off + 4] = b"\x01\x00\x02\x00"
    data += cut.frame(cut.finish(off + 4))
    (tmp_path / "mixed.bin").write_bytes(data)
    accounts = {a.run: a for a in analyse(collect([tmp_path / "mixed.bin"]))}
    assert accounts[1].idle and accounts[1].closes and accounts[1].expected == 2
    assert not accounts[3].idle
    from slipless.cli import main

    main(["loss", str(tmp_path / "mixed.bin")])
    out = capsys.readouterr().out
    assert "board 1 run 1: 2 frames sent while no run was started" in out
    assert "board 1 run 3" in out and "run 3: " not in out  # the cut run keeps its table
