"""Faults in a whole run: the laptop's capture cut at a random point (its disk
filled, it lost power) and the board's mirror file cut by a power loss too, so
neither source is whole. The union must decode every frame either still holds
(in the tables, with the right board time), and `slipless loss --json` must
account for the rest exactly. Truth: the run's plan and its frame bytes
(slipless.sim.lossy), never the decoder."""

from __future__ import annotations

import csv
import json
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_loss_accounting import plans

from slipless.cli import main
from slipless.io import capture
from slipless.protocol import wire
from slipless.sim.lossy import PERIOD_US, Plan, _samples_layout, frames, write


def _records(path: Path) -> list[tuple[int, int, bytes]]:
    """(end offset, type, payload) of every record of the uncut capture."""
    with path.open("rb") as f:
        recs = [(r.offset, r.type, r.payload) for r in capture.CaptureReader(f)]
    ends = [o for o, _, _ in recs[1:]] + [path.stat().st_size]
    return [(e, t, p) for (_, t, p), e in zip(recs, ends, strict=True)]


def _held(plan: Plan, cap: Path, mirror: Path, cap_cut: int, mirror_cut: int
          ) -> tuple[set[int], set[int], set[int]]:
    """Cut both files; return the seqs each source still holds intact:
    live over the link, resent after a RESEND, in the mirror."""
    live, resent, after_tx = set(), set(), False
    for end, type_, payload in _records(cap):
        if type_ == capture.TX:
            after_tx = True
        if type_ != capture.RX or end > cap_cut:
            continue
        bodies = wire.Deframer().feed(payload)
        if bodies:  # a damaged copy is no copy
            (resent if after_tx else live).add(wire.parse_header(bodies[0])[4])
    cap.write_bytes(cap.read_bytes()[:cap_cut])
    fr = frames(plan)
    kept, end = set(), 0
    for seq in sorted(plan.mirror):
        end += len(fr[seq])
        if end <= mirror_cut:
            kept.add(seq)
    mirror.write_bytes(mirror.read_bytes()[:mirror_cut])
    return live, resent, kept


def _cli_json(capsys: pytest.CaptureFixture[str], *argv: str) -> dict:
    capsys.readouterr()
    main(list(argv))
    return json.loads(capsys.readouterr().out)


def _check(plan: Plan, cap_where: float, mirror_where: float,
           capsys: pytest.CaptureFixture[str]) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        cap, mirror = write(plan, Path(tmp))
        with cap.open("rb") as f:
            first = next(iter(capture.CaptureReader(f))).offset  # the header stays
        cap_cut = first + int(cap_where * (cap.stat().st_size - first))
        mirror_cut = int(mirror_where * mirror.stat().st_size)
        live, resent, kept = _held(plan, cap, mirror, cap_cut, mirror_cut)
        mirror_args = ["--mirror", str(mirror)] if mirror_cut else []  # an empty file is refused
        if not live | resent | kept:  # nothing left anywhere: one line, exit status 2
            assert main(["loss", str(cap), "--json", *mirror_args]) == 2
            return
        doc = _cli_json(capsys, "loss", str(cap), "--json", *mirror_args)
        out = Path(tmp) / "tables"
        assert main(["decode", str(cap), "--out", str(out), "--quiet", *mirror_args]) == 0
        with (out / "samples.csv").open(newline="") as f:
            rows = {(int(r["stream"]), int(r["seq"]), int(r["tick_us"]), int(float(r["raw"])))
                    for r in csv.DictReader(f)}
    held = live | resent | kept
    # what a report can know: END gives the count; without it, the highest seq held
    expected = plan.n_frames if plan.n_frames - 1 in held else max(held) + 1
    term = {}
    for seq in range(expected):
        term[seq] = ("received" if seq in live else "recovered_resend" if seq in resent
                     else "recovered_mirror" if seq in kept else "missing")
    count = {t: sum(1 for v in term.values() if v == t) for t in set(term.values())}
    (run,) = doc["runs"]
    assert run["closes"], run["discrepancies"]
    assert run["end_seen"] == (plan.n_frames - 1 in held)
    assert doc["frames_expected"] == expected
    assert doc["frames_received"] == count.get("received", 0)
    assert doc["frames_recovered_resend"] == count.get("recovered_resend", 0)
    assert doc["frames_recovered_mirror"] == count.get("recovered_mirror", 0)
    assert doc["frames_missing"] == count.get("missing", 0)
    assert doc["frames_lost"] + doc["frames_dropped_board"] == doc["frames_missing"]
    # every sample of every frame held is in the table, at its true tick
    # (stream s's k-th frame starts at k * per_frame periods: sim.lossy's layout)
    # (a run's samples need its DESCRIPTOR, seq 0 in sim.lossy, for their type and period;
    # without it the table can hold none of them and the loss report still counts them)
    want = set()
    for seq, (s, k) in _samples_layout(plan).items():
        if seq in held and 0 in held:
            for i in range(plan.per_frame):
                want.add((s, seq, (k * plan.per_frame + i) * PERIOD_US, (seq * 7 + i) % 1000))
    assert rows == want


@settings(max_examples=100, deadline=None, suppress_health_check=[
    HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(plan=plans(), cap_where=st.floats(0.0, 1.0), mirror_where=st.floats(0.0, 1.0))
def test_capture_and_mirror_both_cut(plan: Plan, cap_where: float, mirror_where: float,
                                     capsys: pytest.CaptureFixture[str]) -> None:
    _check(plan, cap_where, mirror_where, capsys)


def test_both_cut_in_the_middle_of_a_lossy_run(capsys: pytest.CaptureFixture[str]) -> None:
    plan = Plan(60, queue=2, status_every=6, lost={3, 4, 20, 41}, corrupt={8, 33},
                duplicate={11}, swap={14}, board_drop={25, 26, 27}, resend={4, 25, 41},
                mirror={3, 8, 20, 26, 33, 50})
    _check(plan, 0.5, 0.6, capsys)
