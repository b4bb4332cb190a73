"""The live view's alarms: rules over a LiveState, and the book that keeps
when each was raised and cleared (sans-IO).

Each rule gives (id, level, text) while its condition holds; "warn" asks for
a look, "alarm" for action. The thresholds are WatchOptions fields (their
defaults are common practice, not a standard). The alarms are advice on the
data, not a safety interlock: the board's own limits and the rig's hardware
interlocks stay the protection.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

# The rules read a live.state.LiveState (state.py imports this module: typed as Any
# here so the two do not import each other).
LiveState = Any
Alarm = tuple[str, str, str]  # (id, level, text)
HISTORY = 20  # cleared alarms kept on the page


def evaluate(st: LiveState, now_ns: int) -> list[Alarm]:
    out: list[Alarm] = []
    for rule in (_link, _loss, _rails, _battery, _drops, _coil):
        out += rule(st, now_ns)
    return out


def _link(st: LiveState, now_ns: int) -> list[Alarm]:
    if st.run_ended():
        return []
    if not st.link_up:
        down = st.seconds(now_ns) - st.link_since
        why = f" ({st.link_why})" if st.link_why else ""
        return [("link_down", "alarm", f"link down for {down:.1f} s, {st.link_state}{why}")]
    if st.last_arrival_ns >= 0:
        quiet = (now_ns - st.last_arrival_ns) / 1e9
        if quiet >= st.opts.quiet_s:
            return [("link_quiet", "warn", f"no data for {quiet:.1f} s while the link is up")]
    return []


def _loss(st: LiveState, now_ns: int) -> list[Alarm]:
    """Loss over the last seconds above the threshold and well above the run's
    rate before them (or any at all over the alarm threshold)."""
    recent = st.recent_loss()
    if recent is None:
        return []
    pct, span, before = recent
    o = st.opts
    if pct < o.loss_warn_pct or (pct < o.loss_alarm_pct and before is not None
                                 and pct < 1.5 * before):
        return []
    level = "alarm" if pct >= o.loss_alarm_pct else "warn"
    was = "" if before is None else f", {before:.2f} % before"
    return [("loss_rising", level,
             f"{pct:.1f} % of frames missing over the last {span:.0f} s{was}")]


def _rails(st: LiveState, now_ns: int) -> list[Alarm]:
    out: list[Alarm] = []
    for (board, run, sid), v in sorted(st.streams.items()):
        if v.rails is not None and v.near_rail:
            out.append((f"rail.{board}.{run}.{sid}", "warn",
                        f"{v.info.name} (board {board}) at its rail: full scale "
                        f"{v.rails[0]:.4g} to {v.rails[1]:.4g} {v.info.unit}"))
    return out


def _battery(st: LiveState, now_ns: int) -> list[Alarm]:
    out: list[Alarm] = []
    o = st.opts
    for (board, _run), b in sorted(st.boards.items()):
        mv = b.fields.get("battery_mv", 0)
        if not mv or mv / 1000 >= o.battery_warn_v:
            continue
        v = mv / 1000
        level = "alarm" if v < o.battery_alarm_v else "warn"
        out.append((f"battery.{board}", level,
                    f"board {board} battery {v:.2f} V (low below {o.battery_warn_v:.2f} V): "
                    f"stop the rotor before handling it"))
    return out


def _recent(st: LiveState, at_ns: int, now_ns: int) -> bool:
    return at_ns >= 0 and (now_ns - at_ns) / 1e9 < st.opts.held_s


def _drops(st: LiveState, now_ns: int) -> list[Alarm]:
    out: list[Alarm] = []
    for (board, run), b in sorted(st.boards.items()):
        f = b.fields
        if _recent(st, b.dropped_up_at, now_ns):
            out.append((f"dropped.{board}.{run}", "alarm",
                        f"board {board} dropped {b.dropped_rise} frames from its send queue "
                        f"({f.get('dropped', 0)} in the run; ask for them from the mirror)"))
        if _recent(st, b.late_up_at, now_ns):
            out.append((f"late.{board}.{run}", "warn",
                        f"board {board} skipped {b.late_rise} samples read too late "
                        f"({f.get('late', 0)} in the run)"))
    return out


def _coil(st: LiveState, now_ns: int) -> list[Alarm]:
    out: list[Alarm] = []
    for (board, run), c in sorted(st.coil.items()):
        if c.failed is None or not _recent(st, c.failed_at, now_ns):
            continue
        tick, state, mean, expected = c.failed
        hz = st.hz.get((board, run), 1_000_000)
        t = (tick - st.t0.get((board, run), 0)) / hz
        sign = {1: "+", -1: "-", 0: "off"}.get(state, str(state))
        out.append((f"coil.{board}.{run}", "alarm",
                    f"coil current not following its program: state {sign} from {t:.2f} s, "
                    f"current {mean:.3g} A where about {expected:.3g} A was due"))
    return out


@dataclass
class Entry:
    id: str
    level: str
    text: str
    since_s: float
    active: bool = True


class AlarmBook:
    """Active alarms by id (since when), and the latest cleared ones."""

    def __init__(self) -> None:
        self.active: dict[str, Entry] = {}
        self.cleared: list[Entry] = []
        self.raised: list[Entry] = []  # raised since the caller last took them (terminal lines)

    def update(self, now: list[Alarm], now_s: float) -> None:
        ids = set()
        for aid, level, text in now:
            ids.add(aid)
            e = self.active.get(aid)
            if e is None:
                e = self.active[aid] = Entry(aid, level, text, now_s)
                self.raised.append(e)
            elif level == "alarm" and e.level != "alarm":
                e.level = level
                self.raised.append(e)
            e.level, e.text = level, text
        for aid in [a for a in self.active if a not in ids]:
            e = self.active.pop(aid)
            e.active = False
            self.cleared = (self.cleared + [e])[-HISTORY:]

    def take_raised(self) -> list[Entry]:
        out, self.raised = self.raised, []
        return out

    def view(self) -> list[dict[str, Any]]:
        rows = sorted(self.active.values(), key=lambda e: (e.level != "alarm", e.since_s))
        rows += self.cleared[::-1]
        return [{"id": e.id, "level": e.level, "text": e.text, "since_s": round(e.since_s, 3),
                 "active": e.active} for e in rows]
