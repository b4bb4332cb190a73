"""`slipless demo`: a simulated pulsed-field run, from the rotor to the report.

Scenario (invented, for the demo only; sim/scenario.py): board 1 rides on a
turntable that runs stopped, counter-clockwise and clockwise blocks at one
turn per second while a solenoid around a rotating coaxial capacitor is
pulsed +, off, -, off. An electrometer amplifier reads the capacitor; the
board samples it, the coil current and a gyro on a clock 23 ppm fast. The
radio loses what the board sends while its antenna faces a dead sector of
the turn, drops the link once (the recorder asks for the gap afterwards and
the board resends what its ring still holds), and the board's send queue
overflows once. The laptop decodes the capture, merges the board's mirror,
accounts for every frame, fits the board's clock, reduces every pulse,
compares the field x rotation term with the model and writes the report.
Every figure printed is checked against the simulation's own truth.
"""

from __future__ import annotations

import argparse
import json
import time
from dataclasses import asdict
from pathlib import Path
from typing import Any

import numpy as np
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from slipless.cli import decode_files
from slipless.sim.scenario import Scenario, ScenarioConfig, build

STAGES = ("simulating the rig, the board and the link", "decoding capture + mirror",
          "accounting for every frame", "fitting the board's clock", "reducing the pulses",
          "writing the report")


def run_demo(args: argparse.Namespace, console: Console) -> int:
    t0 = time.perf_counter()
    out: Path = args.out
    out.mkdir(parents=True, exist_ok=True)
    with Progress(TextColumn("[{task.completed}/{task.total}] {task.description}"), BarColumn(),
                  TimeElapsedColumn(), console=console, transient=True) as bar:
        task = bar.add_task(STAGES[0], total=len(STAGES))

        def stage(k: int, lines: list[str]) -> None:
            for line in lines:  # printed above the progress bar as each stage ends
                console.print(line, highlight=False)
            bar.update(task, completed=k, description=STAGES[k] if k < len(STAGES) else "done")

        sc = build(out, ScenarioConfig(seed=args.seed, seconds=args.seconds))
        prediction = out / "prediction.json"
        prediction.write_text(json.dumps({"inputs": asdict(sc.rig.rig_inputs()),
                                          "results": sc.rig.prediction()}, indent=1, default=float))
        stage(1, _scenario_lines(sc))
        dec = decode_files([sc.capture], out / "tables", "csv", None, [sc.mirror])
        run = dec.runs[(sc.rig.board, sc.rig.run)]
        stage(2, [f"decode: {run.received:,} frames ({sc.frames:,} built), {run.samples:,} "
                  f"samples, end of run {'seen' if run.end else 'not seen'} -> {out / 'tables'}/"])
        stage(3, _loss_lines(sc, out))
        from slipless.report import collect, write

        data = collect([sc.capture], [sc.mirror], prediction)
        stage(4, _clock_lines(sc, data, out))
        stage(5, _pulse_lines(sc, data, out))
        report = write(data, out / "report.html", "slipless demo run (simulated)",
                       f"simulated run, seed {args.seed}, {sc.rig.seconds:.0f} s")
        stage(6, [])
    console.print(f"report: {report}  (open it in a browser)", highlight=False)
    console.print(f"demo finished in {time.perf_counter() - t0:.1f} s", highlight=False)
    return 0


def _scenario_lines(sc: Scenario) -> list[str]:
    c, rc = sc.cfg, sc.rig
    return [
        f"scenario: {rc.seconds:.0f} s of board {rc.board} (seed {c.seed}), blocks of "
        f"{rc.block_s:.0f} s stopped / ccw / cw at 1 turn/s, coil +, off, -, off; "
        f"board clock {c.skew_ppm:+.1f} ppm",
        f"simulated: {sc.frames:,} frames built; {len(sc.board_dropped)} dropped by the board's "
        f"queue; {len(sc.shadow_lost)} lost at the dead angle "
        f"({c.dead_from_deg:.0f}-{c.dead_to_deg:.0f} deg) or at random; link down "
        f"{sc.down_board_s[0]:.1f}-{sc.down_board_s[1]:.1f} s ({len(sc.down)} frames, "
        f"{len(sc.resent)} resent after reconnecting); {sc.pings} pings",
        f"capture: {sc.capture}  mirror: {sc.mirror}",
    ]


def _loss_lines(sc: Scenario, out: Path) -> list[str]:
    from slipless.loss import analyse
    from slipless.loss_collect import collect
    from slipless.loss_plot import plot
    from slipless.loss_report import document

    lines = []
    for label, mirrors in (("radio only", []), ("with the mirror", [sc.mirror])):
        facts = collect([sc.capture], mirrors, None)
        accounts = analyse(facts)
        doc = document(accounts, facts, None)
        name = "loss-radio" if not mirrors else "loss"
        (out / f"{name}.json").write_text(json.dumps(doc, indent=1) + "\n")
        plot(accounts, out / f"{name}.png")
        lines.append(f"loss ({label}): {doc['frames_expected']:,} expected = "
                     f"{doc['frames_received']:,} received + {doc['frames_recovered_resend']} "
                     f"resent + {doc['frames_recovered_mirror']} from the mirror + "
                     f"{doc['frames_lost']} lost + {doc['frames_dropped_board']} dropped on the "
                     f"board: {'closes' if doc['closes'] else 'DOES NOT CLOSE'} -> {out / name}.json")
        if not mirrors:
            lost = len(sc.shadow_lost) + len(sc.down) - len(sc.resent)
            ok = (doc["frames_lost"] == lost and doc["frames_dropped_board"] == len(sc.board_dropped)
                  and doc["frames_recovered_resend"] == len(sc.resent))
            causes = sorted({g["cause"] for g in doc["gaps"]})
            worst = (doc["runs"][0].get("angle") or {}).get("worst_deg", float("nan"))
            lines.append(f"      against the simulation: lost {lost}, dropped "
                         f"{len(sc.board_dropped)}, resent {len(sc.resent)}: "
                         f"{'every term matches' if ok else 'MISMATCH'}; gap causes found: "
                         f"{', '.join(causes)}; worst angle (integrated gyro) {worst:.0f} deg "
                         f"(dead sector {sc.cfg.dead_from_deg:.0f}-{sc.cfg.dead_to_deg:.0f})")
    return lines


def _clock_lines(sc: Scenario, data: Any, out: Path) -> list[str]:
    from slipless.align import align_files

    align_files([sc.capture], out / "aligned", "csv", 10_000_000, 600.0, None, [sc.mirror])
    c = data.clocks[(sc.rig.board, sc.rig.run)]
    m = c.model
    ticks = np.linspace(0, sc.rig.seconds * 1e6, 200).astype(np.int64)
    err_ms = float(np.max(np.abs(m.laptop_ns(ticks) - sc.clock.laptop_ns(ticks)))) / 1e6
    bound_ms = m.uncertainty_s * 1e3
    return [f"clock: skew {m.skew_ppm:+.2f} ppm (simulated {sc.clock.skew_ppm:+.2f}); mapped time "
            f"off by at most {err_ms:.2f} ms over the run, "
            f"{'inside' if err_ms <= bound_ms else 'OUTSIDE'} the bound +-{bound_ms:.2f} ms "
            f"-> {out / 'aligned'}/"]


def _pulse_lines(sc: Scenario, data: Any, out: Path) -> list[str]:
    from scipy import stats

    from slipless.pulses_report import write_outputs

    a = data.pulses
    write_outputs(a, out / "pulses", "csv", plots=True)
    truth = sc.truth()
    tq = stats.t.ppf(0.5 + a.options.level / 2, a.fit.dof)
    lines = [f"pulses: {len(a.pulses)} found, {len(a.used)} used -> {out / 'pulses'}/"]
    names = list(a.fit.names)
    for term, what in (("d", "field x rotation (induction)"), ("b", "field only (artifact)")):
        k = names.index(term)
        est, se = float(a.fit.coef[k]), float(a.fit.se[k])
        covered = abs(est - truth[term]) <= tq * se
        lines.append(f"      {term} ({what}): estimate {est:.4g} +- {tq * se:.2g}, simulated "
                     f"{truth[term]:.4g}: {'inside' if covered else 'OUTSIDE'} the "
                     f"{a.options.level:.0%} interval")
    if a.ratio is not None:
        lines.append(f"      d / model {a.ratio.ratio:.3f} ({a.ratio.low:.3f} to {a.ratio.high:.3f})")
    return lines
