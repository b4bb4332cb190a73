"""`slipless demo`: a simulated pulsed-field run, from the rotor to the result.

Scenario (invented, for the demo only): board 1 rides on a turntable that
runs stopped, counter-clockwise and clockwise blocks at one turn per second
while a solenoid around a rotating coaxial capacitor is pulsed +, off, -, off.
A charge amplifier reads the capacitor; the board samples it, the coil current
and a gyro, and radios 244-byte notifications over a link that loses about 1 %
of them and flips a bit now and then; the laptop reads them in random-size
pieces. The laptop decodes the stream into tables, accounts for every lost
frame, reduces every pulse and compares the field x rotation term with the
model's prediction.
"""

from __future__ import annotations

import argparse
import json
import time
from dataclasses import asdict

from rich.console import Console

from slipless.cli import build_parser, decode_files, print_summary
from slipless.sim import rig
from slipless.sim.channel import ChannelConfig, ChannelLog, transmit

BLOCKS = 6  # rotor blocks in the rig's program


def run_demo(args: argparse.Namespace, console: Console) -> int:
    t0 = time.perf_counter()
    out = args.out
    out.mkdir(parents=True, exist_ok=True)
    cfg = rig.RigConfig(seed=args.seed, block_s=max(10.0, args.seconds / BLOCKS))
    truth = cfg.truth()
    console.print(f"[1/4] simulating {cfg.seconds:.0f} s of board {cfg.board} (seed {cfg.seed}): "
                  "rotor blocks stopped / ccw / cw, coil pulsed +, off, -, off ...")
    frames = list(rig.frames(cfg))
    log = ChannelLog()
    capture = out / "link.bin"
    with capture.open("wb") as f:
        for chunk in transmit(frames, ChannelConfig(seed=args.seed + 1), log):
            f.write(chunk)
    console.print(f"      link: {len(frames):,} frames in {log.notifications:,} notifications, "
                  f"{log.dropped} notifications lost, {log.flipped} with a flipped bit -> {capture}")
    prediction = out / "prediction.json"
    prediction.write_text(json.dumps({"inputs": asdict(cfg.rig_inputs()),
                                      "results": cfg.prediction()}, indent=1, default=float))

    console.print("[2/4] decoding into tables ...")
    tables = out / "tables"
    dec = decode_files([capture], tables, "csv", console)
    print_summary(dec, console)
    run = dec.runs[(cfg.board, cfg.run)]
    lost = len(frames) - run.received
    accounted = dec.missing(run)
    tail = len(frames) - 1 - run.high_seq  # after the last frame received: unknowable without END
    verdict = "every lost frame accounted for" if accounted + tail == lost else "MISMATCH"
    console.print(f"      check against the simulation: {len(frames)} frames sent, {run.received} "
                  f"decoded, {lost} lost on the link; {accounted} reported missing or corrupt"
                  + (f", {tail} lost after the last frame received (end of run not seen)"
                     if tail else "") + f": {verdict}")

    console.print("[3/4] reducing the pulses ...")
    from slipless.pulses import analyse, settings_from_args
    from slipless.pulses_data import load_runs
    from slipless.pulses_report import print_report, write_outputs

    pargs = build_parser().parse_args(["pulses", str(capture), "--out", str(out / "pulses"),
                                       "--prediction", str(prediction)])
    st, opt = settings_from_args(pargs)
    result = analyse(load_runs([capture]), st, opt)
    paths = write_outputs(result, out / "pulses", "csv", plots=True)
    print_report(result, console)

    console.print("[4/4] against the simulation's truth:")
    names = list(result.fit.names)
    from scipy import stats

    tq = stats.t.ppf(0.5 + opt.level / 2, result.fit.dof)
    for term, what in (("d", "field x rotation (induction)"), ("b", "field only (artifact)")):
        k = names.index(term)
        est, se = float(result.fit.coef[k]), float(result.fit.se[k])
        covered = abs(est - truth[term]) <= tq * se
        console.print(f"      {term} ({what}): estimate {est:.4g} +- {tq * se:.2g}, truth "
                      f"{truth[term]:.4g}: {'inside' if covered else 'OUTSIDE'} the "
                      f"{opt.level:.0%} interval")
    console.print(f"tables: {tables}/  pulse results: {out / 'pulses'}/ "
                  f"({', '.join(p.name for p in paths)})")
    console.print(f"demo finished in {time.perf_counter() - t0:.1f} s")
    return 0
