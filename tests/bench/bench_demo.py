"""`make bench` keys: demo_seconds, the wall time of `slipless demo` (defaults:
180 s of simulated run, seed 1) on this machine, as a user runs it; and
demo_sim_seconds, the part of it that runs the board's firmware, the radio and
the recorder in simulated time (sim/scenario.py); decode_passes_demo, how
many times a 60-second demo, run in this process, decodes its capture and
mirror after recording (inputs.decode_passes: the goal is one)."""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path


def demo_figures() -> dict[str, float]:
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-m", "slipless", "demo", "--out", str(Path(tmp) / "demo")],
                       check=True, capture_output=True, timeout=600)
        demo = time.perf_counter() - t0
        from slipless.sim.scenario import ScenarioConfig, build

        t0 = time.perf_counter()
        build(Path(tmp), ScenarioConfig(seed=1))
        sim = time.perf_counter() - t0
        from contextlib import redirect_stdout
        from io import StringIO

        from slipless.cli import main
        from slipless.io.inputs import decode_passes

        before = decode_passes()
        with redirect_stdout(StringIO()):
            main(["demo", "--out", str(Path(tmp) / "demo60"), "--seconds", "60"])
        return {"demo_seconds": round(demo, 2), "demo_sim_seconds": round(sim, 2),
                "decode_passes_demo": decode_passes() - before}


if __name__ == "__main__":
    print(demo_figures())
