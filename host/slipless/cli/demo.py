"""`slipless demo`: a simulated pulsed-field run, from the rotor to the report.

Scenario (invented, for the demo only; sim/scenario.py): board 1 rides on a
turntable that runs stopped, counter-clockwise and clockwise blocks at one
turn per second while a solenoid around a rotating coaxial capacitor is
pulsed +, off, -, off. An electrometer amplifier reads the capacitor. The
board's own firmware, on a simulated hardware layer whose clock runs 23 ppm
fast, samples it, the coil current and a gyro, drives the coil program and
radios its frames over a real BLE stack (bumble's virtual link) to the
recorder of `slipless record`. The radio loses what the board sends while
its antenna faces a dead sector of the turn, stalls once so the board's send
queue overflows, and drops the link once; the recorder asks for the gaps and
the board resends what its ring still holds. The laptop decodes the capture,
merges the board's mirror, accounts for every frame, fits the board's clock,
reduces every pulse, compares the field x rotation term with the model and
writes the report. Every figure printed is checked against the simulation's
own truth.

`--link` picks the radio link (sim/links.py): `fast` (15 ms connection
interval, Data Length Extension) or `slow-50ms` (Linux's 50 ms end, no Data
Length Extension), where the board makes more than the link carries: its
queue drops frames all through the run and the mirror brings them back.
"""

from __future__ import annotations

import argparse
import csv
import json
import time
from dataclasses import asdict
from pathlib import Path
from typing import Any

import numpy as np
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from slipless.errors import InputError
from slipless.run import Run, open_run
from slipless.sim.links import DEFAULT_LINK
from slipless.sim.scenario import Scenario, ScenarioConfig, build

STAGES = ("running the board's firmware, the radio and the recorder", "decoding capture + mirror",
          "accounting for every frame", "fitting the board's clock", "reducing the pulses",
          "writing the report")


MIN_SECONDS, MAX_SECONDS = 60.0, 3600.0  # six blocks of at least 10 s; an hour of signals in RAM


def run_demo(args: argparse.Namespace, console: Console) -> int:
    t0 = time.perf_counter()
    out: Path = args.out
    if not MIN_SECONDS <= args.seconds <= MAX_SECONDS:  # (NaN fails this too)
        raise InputError(f"--seconds: between {MIN_SECONDS:.0f} and {MAX_SECONDS:.0f}, "
                         f"not {args.seconds}")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"--out {out}: cannot make the folder ({exc.strerror})") from exc
    with Progress(TextColumn("[{task.completed:.0f}/{task.total:.0f}] {task.description}"), BarColumn(),
                  TimeElapsedColumn(), console=console, transient=True) as bar:
        task = bar.add_task(STAGES[0], total=len(STAGES))

        def stage(k: int, lines: list[str]) -> None:
            for line in lines:  # printed above the progress bar as each stage ends
                console.print(line, highlight=False)
            bar.update(task, completed=k, description=STAGES[k] if k < len(STAGES) else "done")

        _print_safety(console)
        link = getattr(args, "link", DEFAULT_LINK)
        sc = build(out, ScenarioConfig(seed=args.seed, seconds=args.seconds, link=link),
                   lambda done: bar.update(task, completed=done,
                                           description=f"{STAGES[0]} ({done:.0%} of the run)"))
        prediction = out / "prediction.json"
        prediction.write_text(json.dumps({"inputs": asdict(sc.rig.rig_inputs()),
                                          "results": sc.rig.prediction()}, indent=1, default=float))
        stage(1, _scenario_lines(sc))
        # One decoding pass for the whole analysis: tables, loss, clocks, pulses, report.
        decoded = open_run([sc.capture], [sc.mirror], tables=out / "tables", account_inputs=True)
        run = decoded.decoder.runs[(sc.rig.board, sc.run)]
        stage(2, [f"decode: {run.received:,} frames ({sc.frames:,} built), {run.samples:,} "
                  f"samples, end of run {'seen' if run.end else 'not seen'} -> {out / 'tables'}/",
                  _coil_line(sc, out / "tables" / "events.csv")])
        stage(3, _loss_lines(sc, out, decoded))
        from slipless.report.page import collect, write

        data = collect(decoded, prediction)
        stage(4, _clock_lines(sc, data, out, decoded))
        stage(5, _pulse_lines(sc, data, out))
        report = write(data, out / "report.html", "slipless demo run (simulated)",
                       f"simulated run, seed {args.seed}, {sc.rig.seconds:.0f} s"
                       + ("" if link == DEFAULT_LINK else f", link {link}"))
        stage(6, [])
    console.print(f"report: {report}  (open it in a browser)", highlight=False)
    console.print(f"demo finished in {time.perf_counter() - t0:.1f} s", highlight=False)
    return 0


def _print_safety(console: Console) -> None:
    console.print("simulated only: nothing spins and no coil is driven. On a real rig, guard the "
                  "rotor, size the flyback path, watch coil heating and the board's battery, and "
                  "follow your local codes (README, Safety).", highlight=False)


def _scenario_lines(sc: Scenario) -> list[str]:
    c, rc, t = sc.cfg, sc.rig, sc.truth
    return [
        f"scenario: {rc.seconds:.0f} s of board {rc.board} (seed {c.seed}), blocks of "
        f"{rc.block_s:.0f} s stopped / ccw / cw at 1 turn/s, coil +, off, -, off; "
        f"board clock {c.skew_ppm:+.1f} ppm",
        f"board firmware: run {sc.run}, {sc.frames:,} frames built; its send queue dropped "
        f"{sc.board_dropped:,} (counted in STATUS) "
        + ("while" if c.link == DEFAULT_LINK else "all through the run, the link being slower "
           "than the board, and more while") + " the link stalled "
        f"{sc.stall_board_s[0]:.1f}-{sc.stall_board_s[1]:.1f} s and was down "
        f"{sc.down_board_s[0]:.1f}-{sc.down_board_s[1]:.1f} s",
        *([] if c.link == DEFAULT_LINK else _link_lines(sc)),
        f"radio: {t.notes_dead} notifications lost at the dead angle "
        f"({c.dead_from_deg:.0f}-{c.dead_to_deg:.0f} deg), {t.notes_random} elsewhere; "
        f"{sc.progress.reconnects} reconnection{'s' if sc.progress.reconnects != 1 else ''}; "
        f"recorder: {sc.pings} pings, "
        f"{len(t.asked):,} frames asked for again",
        f"capture: {sc.capture}  mirror: {sc.mirror}",
    ]


def _link_lines(sc: Scenario) -> list[str]:
    """What the link can carry against what the board makes (sim/links.py)."""
    from slipless.sim.ble_board import INTERVAL_UNIT_MS, TIMEOUT_UNIT_MS

    air, radio = sc.cfg.air, sc.radio
    assert radio is not None
    value = sc.mtu - 3  # the firmware packs notifications to the negotiated MTU
    _, interval, latency, timeout, _ = sc.conn_updates[-1] if sc.conn_updates else (0,) * 5
    return [
        f"link {air.name}: {air.what}; ATT MTU {sc.mtu}, so a {value}-byte notification takes "
        f"{radio.packets(value)} packets",
        f"      it carries at most {radio.carries_Bps(value):,.0f} B/s of notifications; the "
        f"board makes {sc.built_bytes / sc.rig.seconds:,.0f} B/s of frames",
        f"      frames that got across waited a median {sc.wait_s():.2f} s in the board's full "
        "queues, so receive times and pings pin the board's clock only loosely",
        f"      the board's stack told the firmware (_IRQ_CONNECTION_UPDATE, {len(sc.conn_updates)} "
        f"times in {sc.progress.reconnects + 1} connections): interval {interval * INTERVAL_UNIT_MS:g} ms, "
        f"latency {latency}, supervision timeout {timeout * TIMEOUT_UNIT_MS:g} ms",
    ]


def _coil_line(sc: Scenario, events: Path) -> str:
    """The board's coil events (decoded) against the rig's plan."""
    from slipless.sim.rig import coil_program

    plan_t, plan_s = coil_program(sc.rig)
    with events.open() as f:  # in the order they arrived: resent and mirrored ones come late
        rows = sorted({(int(r["tick_us"]), int(r["value"])) for r in csv.DictReader(f)
                       if r["event"] == "coil" and int(r["run"]) == sc.run})
    got_t = np.array([tick / 1e6 - sc.run_start_s for tick, _ in rows])
    got_s = np.array([value for _, value in rows])
    n = plan_t.size  # the board also switches off at the end of the run
    same = got_t.size == n + 1 and bool(np.all(got_s[:n] == plan_s))
    worst = float(np.max(np.abs(got_t[:n] - plan_t))) * 1e3 if same else float("nan")
    return (f"      coil: the board switched {got_t.size} times; "
            + (f"its program matches the rig's plan within {worst:.2f} ms" if same and worst < 2.0
               else "it DOES NOT FOLLOW the rig's plan"))


def _loss_lines(sc: Scenario, out: Path, decoded: Run) -> list[str]:
    from slipless.loss.account import analyse
    from slipless.loss.plot import plot
    from slipless.loss.report import document

    lines = []
    for label, mirrors in (("radio only", []), ("with the mirror", [sc.mirror])):
        # radio only: the decoder's state as the mirror began (open_run's account_inputs)
        facts = decoded.facts if mirrors else decoded.before_mirrors
        assert facts is not None
        accounts = analyse(facts)
        doc = document(accounts, facts, None)
        name = "loss-radio" if not mirrors else "loss"
        (out / f"{name}.json").write_text(json.dumps(doc, indent=1) + "\n")
        plot(accounts, out / f"{name}.png")
        run = next(r for r in doc["runs"] if r["run"] == sc.run)
        lines.append(f"loss ({label}): {run['frames_expected']:,} expected = "
                     f"{run['frames_received']:,} received + {run['frames_recovered_resend']} "
                     f"recovered by resend + {run['frames_recovered_mirror']} from the mirror + "
                     f"{run['frames_lost']} lost + {run['frames_dropped_board']} dropped on the "
                     f"board: {'closes' if run['closes'] else 'DOES NOT CLOSE'} -> {out / name}.json")
        if not mirrors:
            # frames built after the last one heard (replies as the recorder hangs up) are
            # beyond what a radio-only account can know of: compare the rest
            t = sc.truth_terms(run["frames_expected"])
            ok = (run["frames_received"] == t["received"] and run["frames_lost"] == t["lost"]
                  and run["frames_recovered_resend"] == t["resent"]
                  and run["frames_dropped_board"] == t["dropped"])
            verdict = "every term matches" if ok else _split_verdict(run, t)
            causes = sorted({g["cause"] for g in run["gaps"]})
            worst = (run.get("angle") or {}).get("worst_deg", float("nan"))
            lines.append(f"      against the simulation: received {t['received']:,}, "
                         f"recovered by resend {t['resent']}, lost {t['lost']}, dropped {t['dropped']}: "
                         f"{verdict}; gap causes found: "
                         f"{', '.join(causes)}; worst angle (integrated gyro) {worst:.0f} deg "
                         f"(dead sector {sc.cfg.dead_from_deg:.0f}-{sc.cfg.dead_to_deg:.0f})")
            if run["frames_expected"] < sc.frames:
                lines.append(f"      the board built {sc.frames - run['frames_expected']} more "
                             "after END: replies to the recorder's last commands, not frames of "
                             "the run (SPEC 3.8)")
    if sc.cfg.link != DEFAULT_LINK:
        back = len(sc.queue_dropped & set(sc.truth.delivered))
        lines.append(f"      of the {sc.board_dropped:,} frames the board's queue dropped, {back:,} "
                     f"came across when the recorder asked again; the mirror holds the other "
                     f"{sc.board_dropped - back:,}")
    return lines


def _split_verdict(run: dict[str, Any], t: dict[str, int]) -> str:
    """When only the split between radio loss and board drops differs: say so.
    The board's counters say how many frames its queue dropped in each window
    between STATUS frames, not which ones; a frame the radio lost inside such
    a window cannot be told from a dropped one (loss/drops.py)."""
    if (run["frames_received"] == t["received"] and run["frames_recovered_resend"] == t["resent"]
            and run["frames_lost"] + run["frames_dropped_board"] == t["lost"] + t["dropped"]):
        return (f"received and recovered by resend match, lost + dropped match "
                f"({t['lost'] + t['dropped']:,}) but not their split: radio losses inside the "
                f"queue's drop windows look like drops")
    return "MISMATCH"


def _clock_lines(sc: Scenario, data: Any, out: Path, decoded: Run) -> list[str]:
    decoded.align(out / "aligned", grid=10_000_000)
    c = data.clocks[(sc.rig.board, sc.run)]
    m = c.model
    ticks = np.linspace(0, sc.rig.seconds * 1e6, 200).astype(np.int64)
    err_ms = float(np.max(np.abs(m.laptop_ns(ticks) - sc.clock.laptop_ns(ticks)))) / 1e6
    bound_ms = m.uncertainty_s * 1e3
    return [f"clock: skew {m.skew_ppm:+.2f} ppm (simulated {sc.clock.skew_ppm:+.2f}); mapped time "
            f"off by at most {err_ms:.2f} ms over the run, "
            f"{'inside' if err_ms <= bound_ms else 'OUTSIDE'} the bound +-{bound_ms:.2f} ms "
            f"-> {out / 'aligned'}/"]


def _pulse_lines(sc: Scenario, data: Any, out: Path) -> list[str]:
    from slipless.pulses.report import write_outputs

    a = data.pulses
    write_outputs(a, out / "pulses", "csv", plots=True)
    truth = sc.truth_values()
    half = a.fit.t_quantiles(a.options.level) * a.fit.se  # each term's own df (Bell-McCaffrey)
    lines = [f"pulses: {len(a.pulses)} found, {len(a.used)} used -> {out / 'pulses'}/"]
    names = list(a.fit.names)
    for term, what in (("d", "field x rotation (induction)"), ("b", "field only (artifact)")):
        k = names.index(term)
        est = float(a.fit.coef[k])
        covered = abs(est - truth[term]) <= half[k]
        lines.append(f"      {term} ({what}): estimate {est:.4g}, {a.options.level:.0%} interval "
                     f"+-{half[k]:.2g}, simulated "
                     f"{truth[term]:.4g}: {'inside' if covered else 'OUTSIDE'} the "
                     f"{a.options.level:.0%} interval")
    if a.ratio is not None:
        lines.append(f"      d / model {a.ratio.ratio:.3f} ({a.ratio.low:.3f} to {a.ratio.high:.3f})")
    return lines
