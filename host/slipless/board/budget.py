"""Will a planned run fit? The board's data rate against the BLE link, the file
mirror and the battery.

Pure computation from a validated board config (firmware/config.py) and stated
assumptions: no I/O, no printing. `slipless budget` (cli/budget.py) shows a
report; `slipless flash --dry-run` prints `summary_lines(config, profile)`.

What the board sends follows the firmware exactly (board.py, sampler.py,
framer.py, link.py): each stream fills SAMPLES frames of wire.max_samples
values and sends a block part-full once its first sample is older than half
the gap promise (status_every_ms / 2); STATUS, DESCRIPTOR, one EVENTS frame per
coil-program step and one SYNC per recorder ping come on top. Every v1 frame
costs its body + 4 CRC + 1 COBS + 1 delimiter bytes on air.

What the link carries is link-layer arithmetic on the LE 1M PHY (Bluetooth
Core Specification, Vol 6 Part B): each notification is an L2CAP PDU (4-octet
header) holding an ATT notification (3-octet header) and the frame bytes,
split into link-layer data PDUs of 27 octets (251 with LE Data Length
Extension, Core v4.2). Each PDU the board sends costs its air time, T_IFS,
the central's empty PDU and T_IFS again; a connection event holds as many as
its length allows, and no more than a controller's packets-per-event limit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from slipless.protocol import wire

# ---- what the board sends --------------------------------------------------------
# Every v1 body + CRC is under 254 bytes, so COBS adds exactly one byte (SPEC 1).
FRAME_OVERHEAD = wire.CRC_SIZE + 1 + 1  # CRC-32, the COBS code byte, the 0x00 delimiter
TICK_HZ = 1000000  # board.py TICK_HZ (the descriptor's size does not depend on it)
FW = (0, 3, 0)  # board.py FW (likewise)
PING_EVERY_S = 1.0  # the recorder's default ping cadence (record.py RecordOptions): one SYNC each

# ---- the BLE link (Bluetooth Core Specification; sources in tests/host/test_budget.py) ----
LL_PAYLOAD_BASIC = 27  # link-layer data PDU payload without LE Data Length Extension (octets)
LL_PAYLOAD_DLE = 251  # with LE Data Length Extension (Core v4.2)
LL_FRAMING_OCTETS = 1 + 4 + 2 + 3  # LE 1M: preamble, access address, PDU header, CRC
MIC_OCTETS = 4  # only on an encrypted link, only on PDUs that carry a payload
US_PER_OCTET = 8  # LE 1M: 1 Mb/s, 1 us per bit
T_IFS_US = 150  # inter frame space
EMPTY_PDU_US = LL_FRAMING_OCTETS * US_PER_OCTET  # the central's empty PDU: 80 us
L2CAP_HEADER = 4  # length + channel id
ATT_NOTIFY_HEADER = 3  # opcode + attribute handle
ATT_MTU_MIN = 23  # the LE default and minimum
ATT_MTU_MAX = 517  # the usual stacks' ceiling (a 512-byte value + 5): not a spec limit
BOARD_MAX_MTU = 247  # firmware/link.py MAX_PAYLOAD (244) + 3: the board asks for no more
INTERVAL_MIN_MS = 7.5  # connection interval range, in 1.25 ms steps
INTERVAL_MAX_MS = 4000.0
INTERVAL_STEP_MS = 1.25
PACKETS_PER_EVENT = 4  # common practice: many controllers send 4-6 data PDUs per event
PACE_INTERVAL_MS = 50.0  # firmware/link.py DEFAULT_INTERVAL_US: a paced board's guess until told
PACE_PER_INTERVAL = 4  # firmware/link.py DEFAULT_NOTIFY_PER_INTERVAL

# ---- verdict thresholds and battery figures (common practice, no single source) ----
HEADROOM_WARN = 1.5  # spare capacity to catch up after a stall, the dead angle and resends
BATTERY_WARN = 1.2  # the battery should outlast the run by this factor
BATTERY_USABLE = 0.8  # share of rated capacity a lithium cell gives in use (age, cut-off, cold)
TYPICAL_CURRENT_MA = {  # board alone, BLE connected, main loop busy; the coil's supply excluded
    "esp32-devkitc": 110.0,
    "pico-w": 45.0,
    "pico2-w": 40.0,
}

OK, WARN, REFUSE = "ok", "warn", "refuse"


@dataclass(frozen=True)
class Flow:
    """One kind of frame the board sends at a steady rate."""

    what: str
    frame_bytes: int  # on air: body + CRC + COBS + delimiter
    frames_per_s: float
    samples_per_frame: int = 0

    @property
    def bytes_per_s(self) -> float:
        return self.frame_bytes * self.frames_per_s

    @property
    def samples_per_s(self) -> float:
        return self.samples_per_frame * self.frames_per_s


def wire_bytes(body_len: int) -> int:
    """Bytes on air of a frame with this body length."""
    if not wire.MIN_BODY <= body_len <= wire.MAX_BODY:
        raise ValueError(f"frame body of {body_len} bytes is outside {wire.MIN_BODY}..{wire.MAX_BODY}")
    return body_len + FRAME_OVERHEAD


def period_us(stream: dict[str, Any]) -> int:
    """The board's sampling period, whole microseconds (firmware/config.py period_us)."""
    return int(1000000 / stream["rate_hz"] + 0.5)


def samples_per_frame(stream: dict[str, Any], status_every_ms: int) -> int:
    """A block is sent full, or part-full at the first loop turn after its first
    sample became older than status_every_ms / 2 (board.py: the gap promise P2)."""
    cap = wire.max_samples(ord(stream["type"]))
    max_age_us = status_every_ms * 500
    return min(cap, max_age_us // period_us(stream) + 1)


def stream_flow(stream: dict[str, Any], status_every_ms: int) -> Flow:
    n = samples_per_frame(stream, status_every_ms)
    size = wire.SAMPLE_SIZES[ord(stream["type"])]
    body = wire.HEADER_SIZE + wire.SAMPLES_FIXED_SIZE + n * size
    frames_per_s = 1e6 / period_us(stream) / n
    return Flow(f"stream {stream['id']} {stream['name']}", wire_bytes(body), frames_per_s, n)


def descriptor_frame_bytes(cfg: dict[str, Any]) -> list[int]:
    """On-air length of each DESCRIPTOR part, split as framer.set_descriptor splits."""
    streams = cfg["streams"]
    entries = [(s["id"], ord(s["type"]), wire.FLAG_STATE if s.get("state") else 0, period_us(s),
                s["scale"], s["offset"], s["name"], s["unit"]) for s in streams]
    gap_ms = cfg["link"]["status_every_ms"]
    rest = list(entries)
    sizes = []
    while True:
        part: list[Any] = []
        while rest:
            try:
                wire.Encoder(0, 0).descriptor(0, TICK_HZ, FW, gap_ms, len(entries), part + rest[:1])
            except ValueError:
                break
            part.append(rest.pop(0))
        if not part and rest:
            raise ValueError("a stream entry does not fit a descriptor frame")
        sizes.append(wire.Encoder(0, 0).descriptor(0, TICK_HZ, FW, gap_ms, len(entries), part))
        if not rest:
            return sizes


def event_flows(coil: dict[str, Any]) -> list[Flow]:
    """EVENTS frames while the coil program runs: entering a step sends EV_STEP, and
    EV_COIL too when the polarity changes, both in one frame (board._apply_program)."""
    steps = coil["program"]
    if not steps:
        return []
    cycle_s = sum(ms for _, ms in steps) / 1000
    by_entries: dict[int, int] = {}
    for i, (state, _) in enumerate(steps):
        k = 1 + (state != steps[i - 1][0])  # the program repeats: step 0 follows the last
        by_entries[k] = by_entries.get(k, 0) + 1
    return [Flow(f"events ({k} per frame)", wire_bytes(wire.HEADER_SIZE + k * wire.EVENT_ENTRY_SIZE),
                 count / cycle_s) for k, count in sorted(by_entries.items())]


def board_flows(cfg: dict[str, Any], ping_every_s: float = PING_EVERY_S) -> list[Flow]:
    """Every steady flow of frames the board sends during a run."""
    link = cfg["link"]
    flows = [stream_flow(s, link["status_every_ms"]) for s in cfg["streams"]]
    flows.append(Flow("status", wire_bytes(wire.HEADER_SIZE + wire.STATUS_BODY_SIZE),
                      1000 / link["status_every_ms"]))
    parts = descriptor_frame_bytes(cfg)
    for i, n in enumerate(parts):
        label = "descriptor" if len(parts) == 1 else f"descriptor {i + 1}/{len(parts)}"
        flows.append(Flow(label, n, 1000 / link["descriptor_every_ms"]))
    flows += event_flows(cfg["coil"])
    if ping_every_s > 0:
        flows.append(Flow("sync (recorder pings)", wire_bytes(wire.HEADER_SIZE + wire.SYNC_BODY_SIZE),
                          1 / ping_every_s))
    return flows


def program_s(cfg: dict[str, Any]) -> float | None:
    """How long the coil program runs (a run started without a duration ends then)."""
    coil = cfg["coil"]
    if not coil["program"]:
        return None
    return sum(ms for _, ms in coil["program"]) * coil["repeat"] / 1000


def coil_window_on_ms(coil: dict[str, Any]) -> int:
    """The most on-time the repeated program puts into any duty_window_ms (an exact
    sliding window; the board's own estimate, coil.py, is close to it). Its maximum
    comes with the window starting, or ending, at a step boundary."""
    steps, window = coil["program"], coil["duty_window_ms"]
    cycle = sum(ms for _, ms in steps)
    on_cycle = sum(ms for state, ms in steps if state)
    if not steps or not on_cycle:
        return 0
    if cycle * coil["repeat"] <= window:  # the whole program fits one window
        return on_cycle * coil["repeat"]

    def on_until(t: int) -> int:  # on-time from a cycle start to t, the program repeating
        k, rest = divmod(t, cycle)
        on = k * on_cycle
        for state, ms in steps:
            if rest <= 0:
                break
            on += min(ms, rest) if state else 0
            rest -= ms
        return on

    bounds = [sum(ms for _, ms in steps[:i]) for i in range(len(steps))]
    starts = bounds + [(b - window) % cycle for b in bounds]
    return max(on_until(s + window) - on_until(s) for s in starts)


# ---- the link -----------------------------------------------------------------------------
@dataclass(frozen=True)
class LinkAssumptions:
    name: str
    interval_ms: float
    mtu: int
    dle: bool
    packets_per_event: int = PACKETS_PER_EVENT
    encrypted: bool = False
    about: str = ""


PRESETS = {
    "linux-default": LinkAssumptions(
        "linux-default", 50.0, 23, False,
        about="Linux's default connection interval (kernel: 30-50 ms, the slow end taken), "
              "ATT MTU 23 until the MTU exchange, 27-octet link-layer packets"),
    "linux-mtu247": LinkAssumptions(
        "linux-mtu247", 50.0, 247, False,
        about="the same after BlueZ's MTU exchange (247), still 27-octet link-layer packets"),
    "fast": LinkAssumptions(
        "fast", 15.0, 247, True,
        about="15 ms interval, ATT MTU 247, LE Data Length Extension (the demo's link)"),
    "fastest": LinkAssumptions(
        "fastest", 7.5, 247, True,
        about="the shortest interval the Core Specification allows, MTU 247, DLE"),
}
DEFAULT_LINK = "linux-default"


def notification_values(frame_bytes: int, payload: int) -> list[int]:
    """Notification value sizes one frame takes (link.py: a frame longer than a
    notification goes in payload-sized pieces, its tail alone; shorter frames
    are counted one per notification, the case when the link keeps up)."""
    if frame_bytes <= payload:
        return [frame_bytes]
    full, tail = divmod(frame_bytes, payload)
    return [payload] * full + ([tail] if tail else [])


def ll_pdus(value_bytes: int, ll_payload: int) -> int:
    """Link-layer data PDUs one notification needs (L2CAP + ATT headers on top)."""
    return -(-(L2CAP_HEADER + ATT_NOTIFY_HEADER + value_bytes) // ll_payload)


def pdu_air_us(payload_octets: int, encrypted: bool) -> int:
    """Air time of one link-layer data PDU on the LE 1M PHY."""
    mic = MIC_OCTETS if encrypted and payload_octets else 0
    return (LL_FRAMING_OCTETS + payload_octets + mic) * US_PER_OCTET


def exchange_us(payload_octets: int, encrypted: bool) -> int:
    """One PDU from the board within an event: the central's empty PDU, T_IFS, the
    board's PDU, T_IFS before the next exchange."""
    return EMPTY_PDU_US + T_IFS_US + pdu_air_us(payload_octets, encrypted) + T_IFS_US


@dataclass(frozen=True)
class LinkBudget:
    link: LinkAssumptions
    notify_payload: int  # notification value bytes (ATT MTU - 3, the board's cap applied)
    ll_payload: int  # octets per link-layer PDU (27 or 251)
    largest_pdu: int  # the largest link-layer payload this traffic uses (sets the time per PDU)
    pdus_per_event: int  # what fits an event: the controller's limit or the event's length
    needed_Bps: float  # frame bytes on air per second the board makes
    needed_frames_per_s: float
    needed_pdus_per_s: float
    available_pdus_per_s: float
    needed_notifications_per_s: float
    board_notifications_per_s: float = math.inf  # the board's own pace (paced stacks), else none

    @property
    def headroom(self) -> float:
        if not self.needed_pdus_per_s:
            return math.inf
        return min(self.available_pdus_per_s / self.needed_pdus_per_s,
                   self.board_notifications_per_s / self.needed_notifications_per_s)

    @property
    def limited_by(self) -> str:
        if self.board_notifications_per_s / max(self.needed_notifications_per_s, 1e-12) \
                < self.available_pdus_per_s / max(self.needed_pdus_per_s, 1e-12):
            return "the board's own pacing of notifications"
        if self.pdus_per_event < self.link.packets_per_event:
            return "the connection event's length"
        return "packets per connection event"

    @property
    def carried_Bps(self) -> float:
        """Frame bytes per second the link carries with this mix of frames."""
        return self.needed_Bps * self.headroom if self.needed_pdus_per_s else 0.0


def board_pace(profile: dict[str, Any]) -> int | None:
    """Notifications per connection interval a board paces itself to, for stacks
    that queue without limit (firmware/link.py, the profile's "ble" object)."""
    ble = profile.get("ble") or {}
    if ble.get("notify_queue") != "unbounded":
        return None
    return int(ble.get("notify_per_interval", PACE_PER_INTERVAL))


def link_budget(flows: list[Flow], link: LinkAssumptions, pace: int | None = None) -> LinkBudget:
    """pace: the board's notifications per interval (board_pace), None if it sends freely."""
    payload = min(link.mtu, BOARD_MAX_MTU) - ATT_NOTIFY_HEADER
    ll = LL_PAYLOAD_DLE if link.dle else LL_PAYLOAD_BASIC
    pdus = notes = 0.0
    largest = 0
    for f in flows:
        values = notification_values(f.frame_bytes, payload)
        pdus += f.frames_per_s * sum(ll_pdus(v, ll) for v in values)
        notes += f.frames_per_s * len(values)
        largest = max(largest, min(ll, L2CAP_HEADER + ATT_NOTIFY_HEADER + max(values)))
    per_event = min(link.packets_per_event,
                    max(1, int(link.interval_ms * 1000 // exchange_us(largest or ll, link.encrypted))))
    # Until the central updates the connection the board cannot know its interval
    # and paces as if it were PACE_INTERVAL_MS (firmware/link.py DEFAULT_INTERVAL_US).
    board = math.inf if pace is None else pace * 1000 / max(link.interval_ms, PACE_INTERVAL_MS)
    return LinkBudget(link, payload, ll, largest, per_event, sum(f.bytes_per_s for f in flows),
                      sum(f.frames_per_s for f in flows), pdus, per_event * 1000 / link.interval_ms,
                      notes, board)


# ---- mirror and battery ------------------------------------------------------------------
@dataclass(frozen=True)
class MirrorBudget:
    enabled: bool
    bytes_per_s: float  # every frame built is mirrored (board.py hw.on_frame)
    max_bytes: int
    flash_bytes: int | None  # free space on the board's filesystem, if stated

    @property
    def room_bytes(self) -> int:
        return self.max_bytes if self.flash_bytes is None else min(self.max_bytes, self.flash_bytes)

    @property
    def lasts_s(self) -> float:
        return self.room_bytes / self.bytes_per_s if self.bytes_per_s else math.inf

    @property
    def flash_first(self) -> bool:
        """The filesystem fills before max_bytes stops the writing."""
        return self.flash_bytes is not None and self.flash_bytes < self.max_bytes


def mirror_budget(cfg: dict[str, Any], flows: list[Flow], flash_bytes: int | None) -> MirrorBudget:
    m = cfg["mirror"]
    return MirrorBudget(bool(m["enabled"]), sum(f.bytes_per_s for f in flows), m["max_bytes"],
                        flash_bytes)


@dataclass(frozen=True)
class BatteryBudget:
    capacity_mAh: float
    current_mA: float
    current_from: str  # where the current figure comes from
    usable: float = BATTERY_USABLE

    @property
    def lasts_s(self) -> float:
        return self.capacity_mAh * self.usable / self.current_mA * 3600


def battery_budget(profile_name: str, capacity_mAh: float,
                   current_mA: float | None) -> BatteryBudget:
    if current_mA is not None:
        return BatteryBudget(capacity_mAh, current_mA, "stated")
    if profile_name not in TYPICAL_CURRENT_MA:
        raise ValueError(f"no typical current for profile {profile_name!r}: state the draw")
    return BatteryBudget(capacity_mAh, TYPICAL_CURRENT_MA[profile_name],
                         f"typical for {profile_name}, common practice: measure your board")


# ---- the report ----------------------------------------------------------------------------
@dataclass
class Report:
    profile: str
    flows: list[Flow]
    link: LinkBudget
    mirror: MirrorBudget
    battery: BatteryBudget | None
    run_s: float | None
    run_from: str  # "stated", "coil program" or "" (no run length known)
    program_s: float | None
    queue_frames: int
    ring_frames: int
    coil_on_ms: int = 0  # the most on-time in one duty window
    coil_window_ms: int = 0
    coil_budget_ms: int = 0  # what coil.py allows in it: int(max_duty x window), trips at >=
    others: dict[str, LinkBudget] = field(default_factory=dict)  # the presets, for comparison
    verdict: str = OK
    reasons: list[str] = field(default_factory=list)  # why warn / refuse
    notes: list[str] = field(default_factory=list)

    @property
    def bytes_per_sample(self) -> float:
        samples = sum(f.samples_per_s for f in self.flows)
        return self.link.needed_Bps / samples if samples else math.inf

    @property
    def queue_s(self) -> float:
        """Data the board's live send queue holds: a link stall longer than this drops frames."""
        fps = self.link.needed_frames_per_s
        return self.queue_frames / fps if fps else math.inf

    @property
    def ring_s(self) -> float:
        """How long a frame stays in the ring, where the laptop can ask for it again."""
        fps = self.link.needed_frames_per_s
        return self.ring_frames / fps if fps else math.inf


def check(cfg: dict[str, Any], profile: dict[str, Any], link: LinkAssumptions | None = None,
          run_s: float | None = None, flash_bytes: int | None = None,
          battery_mAh: float | None = None, current_mA: float | None = None,
          ping_every_s: float = PING_EVERY_S) -> Report:
    """The budget of a validated config on a board profile under stated assumptions."""
    link = link or PRESETS[DEFAULT_LINK]
    flows = board_flows(cfg, ping_every_s)
    prog = program_s(cfg)
    run_from = "stated" if run_s is not None else ("coil program" if prog is not None else "")
    if run_s is None:
        run_s = prog
    name = profile.get("name", cfg.get("profile", "?"))
    coil = cfg["coil"]
    battery = battery_budget(name, battery_mAh, current_mA) if battery_mAh is not None else None
    pace = board_pace(profile)
    r = Report(name, flows, link_budget(flows, link, pace), mirror_budget(cfg, flows, flash_bytes), battery,
               run_s, run_from, prog, cfg["link"]["queue_frames"], cfg["link"]["ring_frames"],
               coil_window_on_ms(coil), coil["duty_window_ms"],
               int(coil["max_duty"] * coil["duty_window_ms"]),
               {n: link_budget(flows, p, pace) for n, p in PRESETS.items() if n != link.name})
    _judge(r)
    return r


def _judge(r: Report) -> None:
    lb = r.link
    if not math.isinf(lb.board_notifications_per_s):
        r.notes.append(f"{r.profile}'s BLE stack queues without limit, so the board paces itself: "
                       f"{lb.board_notifications_per_s:g} notifications/s here (per interval, taken "
                       f"as {PACE_INTERVAL_MS:g} ms until the central updates the connection)")
    if lb.headroom < 1:
        short = 1 - lb.headroom  # the share of frames the link cannot take
        drop_fps = lb.needed_frames_per_s * short
        r.reasons.append(
            f"the link carries {lb.carried_Bps:,.0f} B/s of this traffic but the board makes "
            f"{lb.needed_Bps:,.0f} B/s ({_limit_figures(lb)}): the send queue ({r.queue_frames} frames) "
            f"fills within {r.queue_frames / drop_fps:.1f} s, then about {drop_fps:.1f} frames/s "
            f"({100 * short:.0f} %) are dropped")
    elif lb.headroom < HEADROOM_WARN:
        r.reasons.append(
            f"link headroom {lb.headroom:.2f}x is under {HEADROOM_WARN}x: little spare capacity to "
            "catch up after a stall, the rotor's dead angle or resends")
    m = r.mirror
    if m.enabled and m.flash_first:
        r.notes.append(f"the filesystem ({m.flash_bytes:,} B free) is smaller than mirror.max_bytes "
                       f"({m.max_bytes:,} B)")
    if m.enabled and r.run_s is not None and m.lasts_s < r.run_s:
        if m.flash_first:
            r.reasons.append(f"the filesystem fills after {duration(m.lasts_s)}, before the run ends "
                             f"({duration(r.run_s)}): the failed write stops the run (coil off, no "
                             "END frame) and the board errors at every loop turn until reset; set "
                             "mirror.max_bytes below the free space")
        else:
            r.reasons.append(f"the mirror reaches max_bytes after {duration(m.lasts_s)}, before the "
                             f"run ends ({duration(r.run_s)}): later frames are not mirrored")
    b = r.battery
    if b is not None and r.run_s is not None and b.lasts_s < BATTERY_WARN * r.run_s:
        r.reasons.append(f"the battery lasts about {duration(b.lasts_s)}, under {BATTERY_WARN}x the "
                         f"run ({duration(r.run_s)})")
    if r.program_s is not None and r.run_from == "stated" and r.run_s is not None \
            and r.run_s > r.program_s:
        r.notes.append(f"the coil program ends after {duration(r.program_s)}: a run started without "
                       "a duration ends then")
    if r.coil_on_ms and r.coil_on_ms >= r.coil_budget_ms:
        r.reasons.append(
            f"the coil program puts up to {r.coil_on_ms:,} ms of on-time into a "
            f"{r.coil_window_ms:,} ms duty window, the limit is {r.coil_budget_ms:,} ms "
            "(coil.max_duty): the board will switch the coil off and stop the program "
            "(a safety event) part-way through the run")
    r.verdict = REFUSE if lb.headroom < 1 else (WARN if r.reasons else OK)


# ---- lines for a terminal ------------------------------------------------------------------
def duration(s: float) -> str:
    if math.isinf(s):
        return "unlimited"
    if s < 120:
        return f"{s:.0f} s" if s >= 10 else f"{s:.1f} s"
    if s < 7200:
        return f"{s / 60:.0f} min"
    if s < 172800:
        return f"{s / 3600:.1f} h"
    return f"{s / 86400:.1f} days"


def link_line(lb: LinkBudget) -> str:
    k = lb.link
    mtu = f"ATT MTU {k.mtu}" + (f" (the board uses {BOARD_MAX_MTU})" if k.mtu > BOARD_MAX_MTU else "")
    dle = "DLE (251-octet packets)" if k.dle else "no DLE (27-octet packets)"
    capped = " (fewer fit the event)" if lb.pdus_per_event < k.packets_per_event else ""
    return (f"link {k.name}: interval {k.interval_ms:g} ms, {mtu}, {dle}, {k.packets_per_event} "
            f"packets per event{capped}, {'encrypted' if k.encrypted else 'unencrypted'}, LE 1M PHY")


def _limit_figures(lb: LinkBudget) -> str:
    if lb.limited_by.startswith("the board"):
        return (f"{lb.board_notifications_per_s:,.0f} notifications/s offered, "
                f"{lb.needed_notifications_per_s:,.0f} needed")
    return (f"{lb.available_pdus_per_s:,.0f} link-layer packets/s available, "
            f"{lb.needed_pdus_per_s:,.0f} needed")


def report_lines(r: Report) -> list[str]:
    lb = r.link
    samples = sum(f.samples_per_s for f in r.flows)
    lines = [
        link_line(lb),
        f"board sends {lb.needed_Bps:,.0f} B/s on air ({lb.needed_frames_per_s:.1f} frames/s, "
        f"{samples:,.0f} samples/s, {r.bytes_per_sample:.3f} B per sample with all overhead)",
        f"link carries {lb.carried_Bps:,.0f} B/s of it: headroom {lb.headroom:.2f}x, limited by "
        f"{lb.limited_by} ({_limit_figures(lb)})",
        f"send queue {r.queue_frames} frames = {duration(r.queue_s)} of data (a longer stall drops "
        f"frames); ring {r.ring_frames} frames = {duration(r.ring_s)} (resend window)",
    ]
    run = f"run {duration(r.run_s)} ({r.run_from})" if r.run_s is not None else "run length not given"
    m = r.mirror
    if m.enabled:
        room = f"{m.room_bytes:,} B" + (" (filesystem)" if m.flash_first else " (max_bytes)")
        lines.append(f"mirror: {m.bytes_per_s:,.0f} B/s into {room} lasts {duration(m.lasts_s)}; {run}")
    else:
        lines.append(f"mirror: off; {run}")
    b = r.battery
    if b is not None:
        lines.append(f"battery: {b.capacity_mAh:g} mAh x {b.usable:g} usable (common practice) / "
                     f"{b.current_mA:g} mA ({b.current_from}) = {duration(b.lasts_s)}")
    if r.others:
        lines.append("other links: " + ", ".join(f"{n} {o.headroom:.2f}x" for n, o in r.others.items()))
    lines += [f"note: {n}" for n in r.notes]
    lines.append(f"verdict: {r.verdict}")
    lines += [f"  - {why}" for why in r.reasons]
    return lines


def preflight(cfg: dict[str, Any], profile: dict[str, Any],
              link: LinkAssumptions | None = None) -> tuple[list[str], str]:
    """For `slipless flash --dry-run`: the budget's lines and its verdict."""
    r = check(cfg, profile, link)
    return ["data budget (slipless budget --config FILE has the link, run and battery options):"]\
        + ["  " + line for line in report_lines(r)], r.verdict


def summary_lines(cfg: dict[str, Any], profile: dict[str, Any]) -> list[str]:
    """The lines of `preflight` alone."""
    return preflight(cfg, profile)[0]


# ---- one JSON document --------------------------------------------------------------------
def _num(x: float) -> float | None:
    return None if math.isinf(x) or math.isnan(x) else round(x, 4)


def _link_doc(lb: LinkBudget) -> dict[str, Any]:
    k = lb.link
    return {"name": k.name, "about": k.about, "interval_ms": k.interval_ms, "mtu": k.mtu,
            "dle": k.dle, "packets_per_event": k.packets_per_event, "encrypted": k.encrypted,
            "notify_payload": lb.notify_payload, "ll_payload": lb.ll_payload,
            "pdus_per_event": lb.pdus_per_event, "needed_pdus_per_s": _num(lb.needed_pdus_per_s),
            "available_pdus_per_s": _num(lb.available_pdus_per_s),
            "needed_notifications_per_s": _num(lb.needed_notifications_per_s),
            "board_notifications_per_s": _num(lb.board_notifications_per_s),
            "carried_Bps": _num(lb.carried_Bps), "headroom": _num(lb.headroom),
            "limited_by": lb.limited_by}


def document(r: Report) -> dict[str, Any]:
    m, b = r.mirror, r.battery
    return {
        "verdict": r.verdict,
        "reasons": r.reasons,
        "notes": r.notes,
        "profile": r.profile,
        "needed_Bps": _num(r.link.needed_Bps),
        "carried_Bps": _num(r.link.carried_Bps),
        "headroom": _num(r.link.headroom),
        "bytes_per_sample": _num(r.bytes_per_sample),
        "frames_per_s": _num(r.link.needed_frames_per_s),
        "queue_s": _num(r.queue_s),
        "ring_s": _num(r.ring_s),
        "run_s": r.run_s,
        "run_from": r.run_from,
        "program_s": r.program_s,
        "flows": [{"what": f.what, "frame_bytes": f.frame_bytes, "frames_per_s": _num(f.frames_per_s),
                   "samples_per_frame": f.samples_per_frame, "bytes_per_s": _num(f.bytes_per_s)}
                  for f in r.flows],
        "link": _link_doc(r.link),
        "other_links": {n: _link_doc(o) for n, o in r.others.items()},
        "mirror": {"enabled": m.enabled, "bytes_per_s": _num(m.bytes_per_s), "max_bytes": m.max_bytes,
                   "flash_bytes": m.flash_bytes, "lasts_s": _num(m.lasts_s) if m.enabled else None},
        "battery": None if b is None else {
            "capacity_mAh": b.capacity_mAh, "current_mA": b.current_mA, "current_from": b.current_from,
            "usable": b.usable, "lasts_s": _num(b.lasts_s)},
        "assumptions": ASSUMPTIONS,
    }


ASSUMPTIONS = [
    "LE 1M PHY; each board PDU costs its air time + T_IFS + the central's empty PDU + T_IFS",
    "packets per event is controller-dependent (common practice 4-6); the event length caps it",
    "frames shorter than a notification are counted one per notification (no packing)",
    "the board's main loop turns faster than any sampling period and offers notifications "
    "as fast as the stack takes them",
    "the central sends only empty PDUs and pings; no retransmissions (real radios need some: "
    "hence the headroom margin)",
    "battery: the board alone; add the coil's and sensors' draw to --current-mA if they share it",
]
