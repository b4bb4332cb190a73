"""Every analysis command on a long run (long_run.py), for `make bench`.

One board, BENCH_HOURS (default 8) of it: two 1 kHz int16 streams, a 100 Hz
gyro, a coil state stream, pulses with coil events, pings, disconnections and
resends. The capture is written once into a temporary folder; then each
command runs as its own fresh process (`python -m slipless ...`) under an
address-space limit (RLIMIT_AS, BENCH_RUN8H_LIMIT_GB, default 8) so a runaway
cannot take the machine with it. Per command: wall seconds and peak resident
memory (VmHWM, read by the child itself as it exits: unlike ru_maxrss it does
not carry the parent's size over fork and exec). A command that fails, runs
out of its memory limit or past BENCH_RUN8H_TIMEOUT_S (default 3600) gives -1
for both figures and its reason is printed; the bench carries on.

  run8h_capture_MB      size of the capture
  run8h_crc32_s         zlib.crc32 over the same file (the floor of any checked read)
  run8h_<cmd>_s         wall seconds of `slipless <cmd>`
  run8h_<cmd>_rss_MB    its peak resident memory
     decode --out, loss --json, align --grid 10ms --out, pulses --out, report --out
Goal: every rss under 1 GB at 8 h (and under 2 GB at 24 h).

    BENCH_HOURS=1 .venv/bin/python tests/bench/bench_run8h.py
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from long_run import LongRun, write_long_run  # noqa: E402

# The child: limit its address space, run the command, report VmHWM on the way out
# (atexit also runs after SystemExit and after an uncaught exception).
_CHILD = """
import atexit, resource, sys
limit = int(sys.argv[1])
resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
def _hwm():
    with open('/proc/self/status') as f:
        kb = [l for l in f if l.startswith('VmHWM')][0].split()[1]
    with open(sys.argv[2], 'w') as out:
        out.write(kb)
atexit.register(_hwm)
from slipless.cli import main
sys.exit(main(sys.argv[3:]))
"""
TAIL_CHARS = 600  # of a failing command's stderr, printed with its reason


def commands(cap: Path, out: Path) -> dict[str, list[str]]:
    return {"decode": ["decode", str(cap), "--out", str(out / "decoded"), "--quiet"],
            "loss": ["loss", str(cap), "--json"],
            "align": ["align", str(cap), "--grid", "10ms", "--out", str(out / "aligned"),
                      "--quiet"],
            "pulses": ["pulses", str(cap), "--out", str(out / "pulses"), "--quiet"],
            "report": ["report", str(cap), "--out", str(out / "report.html")]}


def run_command(argv: list[str], hwm_file: Path, limit_bytes: int,
                timeout_s: float) -> tuple[float, float, str]:
    """(wall s, peak RSS MB, '' or why it failed) of one fresh process."""
    hwm_file.unlink(missing_ok=True)
    t0 = time.perf_counter()
    try:
        p = subprocess.run([sys.executable, "-c", _CHILD, str(limit_bytes), str(hwm_file), *argv],
                           stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                           timeout=timeout_s)
    except subprocess.TimeoutExpired:
        return -1.0, -1.0, f"no answer within {timeout_s:.0f} s"
    dt = time.perf_counter() - t0
    rss = int(hwm_file.read_text()) / 1024.0 if hwm_file.exists() else -1.0
    if p.returncode != 0:
        tail = p.stderr.strip()[-TAIL_CHARS:]
        memory = "MemoryError" in p.stderr or p.returncode < 0
        why = f"exit {p.returncode}" + (" (memory limit?)" if memory else "") + f": {tail}"
        return -1.0, -1.0, why
    return dt, rss, ""


def run8h_figures() -> dict[str, float]:
    hours = float(os.environ.get("BENCH_HOURS", "8"))
    limit = int(float(os.environ.get("BENCH_RUN8H_LIMIT_GB", "8")) * (1 << 30))
    timeout_s = float(os.environ.get("BENCH_RUN8H_TIMEOUT_S", "3600"))
    figures: dict[str, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        cap = Path(tmp) / "long.slcap"
        print(f"writing a {hours:g}-hour capture ...", flush=True)
        w = write_long_run(cap, LongRun(hours=hours))
        print(f"  {cap.stat().st_size / 1e6:.1f} MB, {w.records:,} records, {w.frames:,} frames, "
              f"{w.samples:,} samples, {w.pulses:,} pulses, {len(w.outages)} disconnections, "
              f"{w.resent:,} resent, {w.lost} lost; written in {w.seconds:.1f} s", flush=True)
        figures["run8h_capture_MB"] = round(cap.stat().st_size / 1e6, 1)
        from run_bench import crc_file

        figures["run8h_crc32_s"] = round(crc_file(cap), 3)
        for name, argv in commands(cap, Path(tmp)).items():
            dt, rss, why = run_command(argv, Path(tmp) / "hwm", limit, timeout_s)
            figures[f"run8h_{name}_s"] = round(dt, 2)
            figures[f"run8h_{name}_rss_MB"] = round(rss, 1)
            print(f"  {name:8s} {dt:9.2f} s {rss:9.1f} MB" + (f"  FAILED: {why}" if why else ""),
                  flush=True)
    return figures


if __name__ == "__main__":
    figs = run8h_figures()
    for k, v in figs.items():
        print(f"{k:28s} {v}")
    print(json.dumps(figs, sort_keys=True))
