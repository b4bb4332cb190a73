"""`make bench` key demo_seconds: wall time of `slipless demo` (defaults: 180 s
of simulated run, seed 1) on this machine, as a user runs it."""

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
        return {"demo_seconds": round(time.perf_counter() - t0, 2)}


if __name__ == "__main__":
    print(demo_figures())
