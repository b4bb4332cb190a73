"""The loss report as a JSON document (cli/loss_text.py draws it as terminal tables).

JSON keys are stable: scripts read them. Top-level frame and sample counts are
sums over every board and run; `runs` and `gaps` hold the detail. Board times
are integer microseconds since the board booted, laptop times integer
nanoseconds of the laptop's wall clock (Unix epoch), so nothing is rounded.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from slipless.loss.account import TERMS, Gap, RunAccount
from slipless.loss.collect import Facts
from slipless.version import __version__


def _frames(a: RunAccount) -> dict[str, int]:
    t = a.terms
    return {
        "frames_expected": a.expected,
        "frames_received": t["received"],
        "frames_recovered": a.recovered,
        "frames_recovered_resend": t["recovered_resend"],
        "frames_recovered_mirror": t["recovered_mirror"],
        "frames_lost": t["lost"],
        "frames_dropped_board": t["dropped_board"],
        "frames_missing": t["lost"] + t["dropped_board"],
        "frames_corrupt": a.corrupt,
        "frames_duplicate": a.duplicates,
        "frames_out_of_order": a.out_of_order,
        "frames_mirror_copies": a.mirror_copies,
    }


def _samples(a: RunAccount) -> dict[str, int]:
    s = {term: sum(x.samples[term] for x in a.streams) for term in TERMS}
    return {
        "samples_expected": sum(x.expected for x in a.streams),
        "samples_received": s["received"],
        "samples_recovered": s["recovered_resend"] + s["recovered_mirror"],
        "samples_lost": s["lost"],
        "samples_dropped_board": s["dropped_board"],
        "samples_missing": s["lost"] + s["dropped_board"],
    }


def _gap(a: RunAccount, g: Gap) -> dict[str, Any]:
    d: dict[str, Any] = {"board": a.board, "run": a.run, "first_seq": g.first, "last_seq": g.last,
                         "frames": g.frames, **g.terms, "corrupt": g.corrupt,
                         "board_counted": g.board_counted,
                         "board_start_us": g.board_start_us, "board_end_us": g.board_end_us,
                         "duration_s": (g.board_end_us - g.board_start_us) / 1e6
                         if g.board_start_us is not None and g.board_end_us is not None else None,
                         "laptop_start_ns": g.laptop_start_ns, "laptop_end_ns": g.laptop_end_ns,
                         "cause": g.cause, "evidence": g.evidence, "resendable": g.resendable}
    if a.angle_rad is not None:
        ang = a.angle_rad[g.first : g.last + 1]
        ang = ang[np.isfinite(ang)]
        d["angle_deg"] = (float(np.degrees(np.angle(np.exp(1j * ang).mean())) % 360)
                          if ang.size else None)
    return d


def _stream(s: Any) -> dict[str, Any]:
    d: dict[str, Any] = {"stream": s.stream, "name": s.name, "unit": s.unit, "period_us": s.period_us,
                         "expected_from_end": s.expected_known, "closes": s.closes,
                         "samples_expected": s.expected}
    d.update({f"samples_{k}": v for k, v in s.samples.items()})
    d.update({"seconds_expected": s.seconds("expected")})
    d.update({f"seconds_{k}": s.seconds(k) for k in s.samples})
    d.update({f"frames_{k}": v for k, v in s.frames.items()})
    return d


def run_dict(a: RunAccount) -> dict[str, Any]:
    return {"board": a.board, "run": a.run, "end_seen": a.end_seen, "closes": a.closes,
            "idle": a.idle, **_frames(a), **_samples(a),
            "loss_fraction": (a.terms["lost"] + a.terms["dropped_board"]) / a.expected
            if a.expected else 0.0,
            "streams": [_stream(s) for s in a.streams], "gaps": [_gap(a, g) for g in a.gaps],
            "burst": a.burst, "angle": a.angle, "checks": a.checks,
            "discrepancies": a.discrepancies, "notes": a.notes}


def file_damage(facts: Facts) -> tuple[int, int]:
    """(stretches, bytes) of the capture files and btsnoop logs the readers stepped
    over: damaged segments of their own (decode/deframe.py's rule), beside the
    deframer's."""
    stats = [s.stats for s in facts.sources if s.stats is not None]
    return sum(st.damaged_stretches for st in stats), sum(st.damaged_bytes for st in stats)


def document(accounts: Sequence[RunAccount], facts: Facts, max_loss: float | None) -> dict[str, Any]:
    runs = [run_dict(a) for a in accounts]
    keys = list(_frames(accounts[0])) + list(_samples(accounts[0])) if accounts else []
    total = {k: sum(r[k] for r in runs) for k in keys}
    frac = total["frames_missing"] / total["frames_expected"] if total.get("frames_expected") else 0.0
    sfrac = (total["samples_missing"] / total["samples_expected"]
             if total.get("samples_expected") else 0.0)
    c = facts.decoder.counters
    file_n, file_b = file_damage(facts)
    return {
        "slipless": __version__,
        "inputs": [str(s.path) for s in facts.sources if s.kind != "mirror"],
        "mirrors": [str(s.path) for s in facts.sources if s.kind == "mirror"],
        **total,
        "loss_fraction": frac,
        "samples_loss_fraction": sfrac,
        "max_loss_percent": max_loss,
        "passed": max_loss is None or frac * 100 <= max_loss,
        "closes": all(a.closes for a in accounts),
        # a board's idle boot run never ends with END: the runs that recorded say
        "end_seen": all(a.end_seen for a in accounts if not a.idle),
        # damaged segments and bytes, one rule (decode/deframe.py): the deframer's and
        # the capture files' damaged stretches, these also apart
        "corrupt_segments": c.corrupt + c.overlong + file_n,
        "corrupt_bytes": c.corrupt_bytes + file_b,
        "file_damaged_segments": file_n,
        "file_damaged_bytes": file_b,
        "skipped_bytes": c.skipped_bytes,
        "gaps": [g for r in runs for g in r["gaps"]],
        "runs": runs,
    }


# ---- terminal ----------------------------------------------------------------------------
