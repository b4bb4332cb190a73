"""`make bench`: decoding a capture into tables (TableSink), CSV and Parquet.

  decode_csv_MBps             capture MB per second, decode + every CSV table written
                              (the median of 3 runs in one process, Parquet's first)
  decode_parquet_MBps         the same into the Parquet dataset
  decode_parquet_rss_MB       peak resident memory of a fresh process doing the Parquet run
  decode_parquet_rss_small_MB the same for a capture a tenth the size (memory must not grow)
  decode_csv_rss_MB           peak resident memory of the CSV run on the big capture
  tables_csv_MB, tables_parquet_MB   what they wrote, MB

Run alone: .venv/bin/python tests/bench/bench_tables.py [MB]
The tables go to the system's temporary folder, or to BENCH_TABLES_DIR (a RAM
folder such as /dev/shm takes the disk out of the figures: CSV writes ~19 bytes
of text per byte of capture).
"""

from __future__ import annotations

import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def decode_tables(capture: Path, out: Path, fmt: str) -> float:
    """Seconds to decode `capture` into tables in `out`, 1 MB reads as `slipless decode` does."""
    from slipless.decode.decoder import Decoder
    from slipless.decode.tables import TableSink

    t0 = time.perf_counter()
    sink = TableSink(out, fmt)
    dec = Decoder(sink)
    with capture.open("rb") as f:
        while chunk := f.read(1 << 20):
            dec.feed(chunk)
    dec.finish()
    sink.close(list(dec.runs.values()), dec.missing, dec.corrupt_guess)
    return time.perf_counter() - t0


def _size_mb(folder: Path) -> float:
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file()) / 1e6


def tables_rss(capture: Path, out: Path, fmt: str) -> float:
    """Peak resident memory (VmHWM, MB) of a fresh process writing the tables."""
    code = ("import sys; sys.path.insert(0, %r); from bench_tables import decode_tables; "
            "from pathlib import Path; decode_tables(Path(%r), Path(%r), %r); "
            "print([l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1])")
    run = subprocess.run([sys.executable, "-c", code % (str(Path(__file__).parent), str(capture),
                                                        str(out), fmt)],
                         capture_output=True, text=True, check=True)
    shutil.rmtree(out, ignore_errors=True)
    return int(run.stdout.strip()) / 1024.0


def table_figures(big: Path, small: Path, repeats: int = 3) -> dict[str, float]:
    """The median of `repeats` runs per format, each started with the disk's
    queue flushed (os.sync, outside the timing): a run should not pay for the
    gigabytes of CSV the run before it left in the page cache."""
    mb = big.stat().st_size / 1e6
    figures: dict[str, float] = {}
    with tempfile.TemporaryDirectory(dir=os.environ.get("BENCH_TABLES_DIR")) as tmp:
        for fmt in ("parquet", "csv"):
            out = Path(tmp) / fmt
            times = []
            for _ in range(repeats):
                os.sync()
                times.append(decode_tables(big, out, fmt))
                figures[f"tables_{fmt}_MB"] = round(_size_mb(out), 1)
                shutil.rmtree(out)
            figures[f"decode_{fmt}_MBps"] = round(mb / statistics.median(times), 1)
        figures["decode_parquet_rss_MB"] = round(tables_rss(big, Path(tmp) / "p", "parquet"), 1)
        figures["decode_parquet_rss_small_MB"] = round(
            tables_rss(small, Path(tmp) / "p", "parquet"), 1)
        figures["decode_csv_rss_MB"] = round(tables_rss(big, Path(tmp) / "c", "csv"), 1)
    return figures


def main() -> int:
    sys.path.insert(0, str(Path(__file__).parent))
    from run_bench import write_capture

    size = int(sys.argv[1]) if len(sys.argv) > 1 else 110
    with tempfile.TemporaryDirectory() as tmp:
        big, small = Path(tmp) / "big.bin", Path(tmp) / "small.bin"
        write_capture(big, size << 20)
        write_capture(small, (size << 20) // 10)
        figures = {"capture_MB": round(big.stat().st_size / 1e6, 1)}
        figures.update(table_figures(big, small))
    from run_bench import print_figures

    print_figures(figures)
    return 0


if __name__ == "__main__":
    sys.exit(main())
