"""The live view in the terminal (rich), for machines without a browser: the
same snapshot the page draws, as a few tables, and one line per alarm raised."""

from __future__ import annotations

from typing import Any

from rich.console import Group
from rich.table import Table
from rich.text import Text

LEVEL_STYLE = {"alarm": "bold white on red", "warn": "bold black on yellow"}


def _num(x: Any, fmt: str = ".4g", unit: str = "") -> str:
    return "-" if x is None else f"{x:{fmt}}{unit}"


def render(snap: dict[str, Any]) -> Group:
    t = snap["totals"]
    link = snap["link"]
    speed = f"  replay x{snap['speed']:g}" if snap.get("speed") else ""
    head = Text(f"{snap['title']}  t={snap['now_s']:.1f} s{speed}  link "
                f"{'up' if link['up'] else 'DOWN'} ({link['state']}"
                f"{', ' + link['why'] if link['why'] else ''})  frames {t['frames']:,}  "
                f"missing {t['missing']:,} ({t['loss_pct']:.2f} %)  resent {t['resent']:,}",
                style="bold")
    parts: list[Any] = [head]
    active = [a for a in snap["alarms"] if a["active"]]
    for a in active:
        parts.append(Text(f" {a['level'].upper()} ", style=LEVEL_STYLE.get(a["level"], ""))
                     + Text(f" {a['text']} (since {a['since_s']:.1f} s)"))
    if not active:
        parts.append(Text("no alarms", style="green"))
    streams = Table(title="streams (last window)", title_justify="left", expand=False)
    for col in ("board", "stream", "unit", "last", "min", "max", "rail"):
        streams.add_column(col, justify="right" if col not in ("stream", "rail") else "left")
    for s in snap["streams"]:
        lo = min((v for v in s["lo"] if v is not None), default=None)
        hi = max((v for v in s["hi"] if v is not None), default=None)
        streams.add_row(str(s["board"]), s["name"], s["unit"], _num(s["last"]), _num(lo),
                        _num(hi), "AT RAIL" if s["near_rail"] else "")
    parts.append(streams)
    boards = Table(title="boards", title_justify="left")
    for col in ("board", "run", "fw", "battery", "temp", "dropped", "late", "queue high"):
        boards.add_column(col, justify="right")
    for b in snap["boards"]:
        boards.add_row(str(b["board"]), str(b["run"]), b["fw"] or "?",
                       _num(b["battery_v"], ".2f", " V"), _num(b["temp_c"], ".1f", " °C"),
                       str(b["dropped"]), str(b["late"]), str(b["queue_high"]))
    parts.append(boards)
    clock = snap["clock"]["offset_ms"]
    loss = [v for v in snap["loss_series"]["loss_pct"] if v is not None]
    parts.append(Text(f"clock offset drift {_num(clock[-1] if clock else None, '.3f', ' ms')}  "
                      f"recent loss {_num(loss[-1] if loss else None, '.2f', ' %')}"))
    ang = snap.get("angle")
    if ang:
        cells = "  ".join(f"{d:.0f}°:{_num(p, '.0f', '%')}" for d, p in zip(ang["deg"], ang["loss_pct"]))
        parts.append(Text("loss by rotor angle  " + cells))
    else:
        parts.append(Text("loss by rotor angle: no rotation stream yet", style="dim"))
    return Group(*parts)


def alarm_line(entry: Any) -> Text:
    """One line for an alarm just raised (printed above the live area)."""
    return (Text(f" {entry.level.upper()} ", style=LEVEL_STYLE.get(entry.level, ""))
            + Text(f" {entry.since_s:7.1f} s  {entry.text}"))
