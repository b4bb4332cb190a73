"""The demo's radio model (sim.rotating_link): connection-event timing, the
stall, the outage, loss at the dead angle and the truth it keeps."""

from __future__ import annotations

import math

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


# Hand arithmetic for a link without Data Length Extension. A notification's
# value rides in an ATT PDU (opcode 1 + handle 2 octets) inside an L2CAP frame
# (4-octet header), cut into link-layer payloads of at most 27 octets (251 with
# DLE: Bluetooth Core Specification v4.2; references.md, LE Data Length
# Extension). A 244-byte value: 244 + 3 + 4 = 251 octets -> ceil(251 / 27) = 10
# packets; a 20-byte value (ATT MTU 23): 27 octets -> 1 packet. Six packets per
# 50 ms connection event is common practice, not a spec figure.
SLOW = {"interval_s": 0.050, "per_event": 6, "ll_payload": 27}


def test_a_244_byte_notification_is_ten_packets_without_dle_and_one_with() -> None:
    assert link(**SLOW).packets(244) == 10 and link(**SLOW).packets(20) == 1
    assert link(**SLOW).packets(21) == 2  # 28 octets
    assert link(ll_payload=251).packets(244) == 1  # 251 octets: one DLE payload


def test_throughput_at_50_ms_without_dle_follows_the_hand_arithmetic() -> None:
    r = link(**SLOW)
    # 100 notifications offered at once (events at 0, 50, 100 ms ...): the i-th
    # (from 1) ends with packet 10 i, in event ceil(10 i / 6) - 1
    times = [r.next_event(0.0, 244) for _ in range(100)]
    assert times == [pytest.approx(0.050 * (math.ceil(10 * i / 6) - 1)) for i in range(1, 101)]
    in_first_second = sum(1 for t in times if t < 1.0 - 1e-9)  # 20 events x 6 = 120 packets
    assert in_first_second == 12  # -> 12 x 244 = 2,928 B/s
    assert r.carries_Bps(244) == pytest.approx(12 * 244)
    # at the default ATT MTU: 20-byte values, one packet each: 6 x 20 per 50 ms = 2,400 B/s
    r = link(**SLOW)
    times = [r.next_event(0.0, 20) for _ in range(240)]
    assert sum(1 for t in times if t < 1.0 - 1e-9) == 120 and r.carries_Bps(20) == pytest.approx(2400)
    # with DLE and 4 packets per 15 ms event, one 244-byte notification per packet
    assert link(interval_s=0.015, per_event=4).carries_Bps(244) == pytest.approx(244 * 4 / 0.015)
