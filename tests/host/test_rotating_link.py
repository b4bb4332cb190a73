"""The demo's radio model (sim.rotating_link): connection-event timing, the
stall, the outage, loss at the dead angle and the truth it keeps."""

from __future__ import annotations

import pytest

from slipless.protocol import wire
from slipless.sim.rotating_link import LinkPlan, RotatingLink


def link(angle: float = 0.0, **plan: float) -> RotatingLink:
    plan.setdefault("host_delay_s", 0.0)
    return RotatingLink(LinkPlan(**plan), lambda _t: angle, lambda: 1)  # type: ignore[arg-type]


def test_notifications_leave_at_connection_events_a_few_at_a_time() -> None:
    r = link(interval_s=0.015, per_event=4)
    assert r.next_event(0.001) == pytest.approx(0.015)
    times = [r.next_event(0.015) for _ in range(5)]  # 3 more fit in the event at 15 ms
    assert times == [pytest.approx(t) for t in (0.015, 0.015, 0.015, 0.030, 0.030)]


def test_each_connection_has_its_phase_and_the_laptop_adds_its_latency() -> None:
    r = RotatingLink(LinkPlan(seed=5, interval_s=0.015, host_delay_s=0.001), lambda _t: 0.0,
                     lambda: 1)
    phases = []
    for _ in range(20):
        r.reset()  # a new connection
        t = r.next_event(1.0)
        k = r._k(1.0)
        anchor = r._at(k)
        assert 1.0 <= anchor < 1.0 + 0.015 + 1e-12 and t >= anchor
        phases.append(r._phase)
        up = r.write_arrives(2.0)
        assert up is not None and (up - r._phase) / 0.015 == pytest.approx(round((up - r._phase) / 0.015))
    assert 0.0 <= min(phases) and max(phases) < 0.015 and len(set(phases)) == 20


def test_a_stall_holds_everything_until_it_ends() -> None:
    r = link(stall_at_s=10.0, stall_s=1.6)
    assert r.next_event(10.2) == pytest.approx(11.61, abs=0.016)
    assert r.next_event(10.2) >= 11.6
    assert r.write_arrives(10.5) == pytest.approx(11.61)  # writes wait too; the link survives


def test_an_outage_loses_writes_and_hides_the_board() -> None:
    r = link(down_at_s=20.0, down_s=3.0, supervision_s=0.5)
    assert r.write_arrives(20.1) is None
    assert r.audible_at(21.0) == pytest.approx(23.0)
    assert r.audible_at(25.0) == 25.0 and r.audible_at(5.0) == 5.0
    assert r.truth.outage == (20.0, 23.0) and r.truth.disconnected_at == pytest.approx(20.5)


def frames(run: int, seqs: range) -> bytes:
    enc = wire.Encoder(1, run)
    out = b""
    for s in seqs:
        enc.seq = s
        out += enc.frame(enc.status(0, 3900, 2500, 1000, 4, 0, 0, 0))
    return out


def test_the_dead_sector_loses_what_is_sent_there() -> None:
    inside = link(angle=365.0 + 210.0, dead_from_deg=200.0, dead_to_deg=236.0, elsewhere=0.0)
    seqs = inside.handed(frames(1, range(3, 5)))
    assert seqs == [3, 4] and inside.lost(seqs, 1.0)
    assert inside.truth.lost_dead == {3, 4} and inside.truth.notes_dead == 1
    outside = link(angle=90.0, elsewhere=0.0)
    seqs = outside.handed(frames(1, range(7, 8)) + frames(2, range(0, 1)))  # another run: not ours
    assert seqs == [7] and not outside.lost(seqs, 2.0)
    assert outside.truth.delivered == {7: 2.0}


def test_resend_requests_are_noted_when_the_laptop_sends_them() -> None:
    r = link()
    host = wire.Encoder(0xFFFF, 1)
    r.wrote(host.frame(host.resend(9, 40, 43)), 3.0)
    r.wrote(host.frame(host.ping(10, 123)), 3.5)
    r.wrote(host.frame(host.resend(11, 42, 44)), 4.0)
    assert r.truth.asked == {40: 3.0, 41: 3.0, 42: 3.0, 43: 3.0, 44: 4.0}
