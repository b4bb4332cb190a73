"""`slipless loss` as terminal tables (rich), from the accounts and the JSON document."""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any

from rich.console import Console
from rich.table import Table

from slipless.cli.text_tables import column, print_table, table
from slipless.loss.account import TERMS, RunAccount

_LABELS = {"received": "received", "recovered_resend": "recovered by resend",
           "recovered_mirror": "recovered from mirror",
           "lost": "lost (radio)", "dropped_board": "dropped (board)"}
MAX_GAP_ROWS = 20  # terminal only; the JSON document lists every gap


def _pct(n: int, of: int) -> str:
    return f"{100 * n / of:.2f} %" if of else "-"


def _clock(wall_ns: int | None) -> str:
    """The laptop's time of day in UTC, ISO 8601 with its zone (the date is in the
    JSON document's laptop_start_ns)."""
    if wall_ns is None:
        return "-"
    return dt.datetime.fromtimestamp(wall_ns / 1e9, dt.UTC).strftime("%H:%M:%S.%f")[:-3] + "Z"


def _accounting_table(a: RunAccount) -> Table:
    t = table(f"board {a.board} run {a.run}")
    column(t, "", left=True)
    column(t, "frames")
    column(t, "%")
    for s in a.streams:
        column(t, f"{s.name} samples")
        column(t, "s")
    rows = [("expected", a.expected, {s.stream: s.expected for s in a.streams}, "expected")]
    rows += [(_LABELS[k], a.terms[k], {s.stream: s.samples[k] for s in a.streams}, k) for k in TERMS]
    for label, n, per, term in rows:
        cells = [label, str(n), _pct(n, a.expected) if term != "expected" else ""]
        for s in a.streams:
            cells += [str(per[s.stream]), f"{s.seconds(term):.3f}"]
        t.add_row(*cells)
    return t


def _gap_table(a: RunAccount) -> Table:
    t = table(f"gaps in what arrived live ({len(a.gaps)})")
    for col in ("seq", "frames", "board s", "for s", "laptop UTC", "by resend", "from mirror",
                "lost", "dropped", "cause"):
        column(t, col, left=col in ("seq", "cause", "laptop UTC"))
    for g in a.gaps[:MAX_GAP_ROWS]:
        start = f"{g.board_start_us / 1e6:.3f}" if g.board_start_us is not None else "-"
        span = (f"{(g.board_end_us - g.board_start_us) / 1e6:.3f}"
                if g.board_start_us is not None and g.board_end_us is not None else "-")
        t.add_row(f"{g.first}-{g.last}", str(g.frames), start, span, _clock(g.laptop_start_ns),
                  str(g.terms["recovered_resend"]), str(g.terms["recovered_mirror"]),
                  str(g.terms["lost"]), str(g.terms["dropped_board"]), g.cause)
    return t


def _burst_lines(b: dict[str, Any]) -> list[str]:
    r57, r11, ts = b["rfc3357"], b["rfc3611"], b["two_state"]
    return [
        f"loss periods (RFC 3357): {r57['loss_periods']}, mean length {r57['period_length_mean']:.2f}"
        f" frames (max {r57['period_length_max']}), mean loss distance {r57['loss_distance_mean']:.1f}",
        f"bursts (RFC 3611, Gmin {r11['gmin']}): {r11['bursts']}, burst density "
        f"{r11['burst_density']:.3f}, gap density {r11['gap_density']:.4f}, mean burst "
        f"{r11['burst_mean_s']:.3f} s, mean gap {r11['gap_mean_s']:.3f} s",
        f"two-state model: p(arrive -> lose) = {ts['p_good_to_bad']:.4f} (se {ts['p_stderr']:.4f}), "
        f"r(lose -> arrive) = {ts['r_bad_to_good']:.3f} (se {ts['r_stderr']:.3f}), "
        f"mean burst {ts['mean_burst_frames']:.2f} frames",
    ]


def _angle_table(angle: dict[str, Any]) -> Table:
    t = table(f"not received live, by rotor angle ({angle['source']})")
    for col in ("degrees", "frames", "not live", "share", ""):
        column(t, col, left=col in ("", "degrees"))
    top = max((b["loss_fraction"] for b in angle["bins"]), default=0.0) or 1.0
    for b in angle["bins"]:
        bar = "#" * round(20 * b["loss_fraction"] / top)
        t.add_row(f"{b['from_deg']:.0f}-{b['to_deg']:.0f}", str(b["frames"]), str(b["lost"]),
                  f"{100 * b['loss_fraction']:.1f} %", bar)
    return t


def print_report(accounts: Sequence[RunAccount], doc: dict[str, Any], console: Console) -> None:
    for a in accounts:
        if a.idle and a.closes:
            console.print(f"board {a.board} run {a.run}: {a.expected} frame"
                          f"{'s' if a.expected != 1 else ''} sent while no run was started "
                          "(status while idling; --json has its account)")
            continue
        print_table(console, _accounting_table(a))
        where = "on the link or in the files" if doc["file_damaged_segments"] else "on the link"
        extra = (f"side tallies: {a.corrupt} damaged {where}, {a.duplicates} duplicate copies, "
                 f"{a.out_of_order} out of order")
        if a.mirror_copies:
            extra += f", {a.mirror_copies} mirror copies of frames already held"
        console.print(extra)
        for line in a.checks:
            console.print(("closes: " if a.closes else "does NOT close: ") + line)
        for d in a.discrepancies:
            console.print(f"[bold]discrepancy:[/bold] {d}")
        for n in a.notes:
            console.print(f"note: {n}")
        if a.gaps:
            print_table(console, _gap_table(a))
            if len(a.gaps) > MAX_GAP_ROWS:
                console.print(f"... {len(a.gaps) - MAX_GAP_ROWS} more gaps (--json lists all)")
        else:
            console.print("no gaps: every frame arrived live")
        for line in _burst_lines(a.burst):
            console.print(line)
        if a.angle and a.angle["worst_deg"] is None:
            console.print(f"loss against rotor angle ({a.angle['source']}): no frame missed, "
                          "no worst sector")
        elif a.angle:
            print_table(console, _angle_table(a.angle))
    console.print(f"missing {doc['frames_missing']} of {doc['frames_expected']} frames "
                  f"({100 * doc['loss_fraction']:.3f} %), {doc['samples_missing']} of "
                  f"{doc['samples_expected']} samples; {doc['corrupt_segments']} damaged segments "
                  f"({doc['corrupt_bytes']} B) in the inputs"
                  + (f", {doc['file_damaged_segments']} of them stretches of capture files "
                     f"skipped ({doc['file_damaged_bytes']} B)" if doc["file_damaged_segments"]
                     else ""))
