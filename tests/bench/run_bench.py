"""`make bench`: decoder throughput and memory, framing efficiency.

Prints one line per figure, then one JSON line with every figure:
  decode_MBps           streaming decode of a >= 100 MB capture (samples unpacked into typed
                        arrays with each frame's seq, first tick and count: the form the Run
                        takes); the median of 3 runs
  decode_rows_MBps      the same with a seq and tick made for every sample (the samples() form)
  crc32_MBps            zlib.crc32 alone over the same bytes (the floor of any checked read)
  construct_loop_MBps   a plain per-frame construct parse of the same frames
  bytes_per_sample      bytes on air per sample, two 16-bit 1 kHz streams, default framing
  decode_peak_rss_MB    peak resident memory of a process decoding the big capture
  decode_peak_rss_small_MB  the same for a capture a tenth the size (memory must not grow)
  board_alloc_bytes_per_frame, board_frame_us, board_loop_us   board code on MicroPython
  record_kBps, sink_kBps, record_host_drops   recorder over bumble's virtual link
  align_p99_ms, align_lsq_p99_ms, align_err_over_u, align_seconds_1M   clock fit (bench_align.py)
  align_ci_p99_ms, align_ci_err_over_u, align_sine_p99_ms   connection-interval link, sine skew
  fuzz_cases, fuzz_false_accepts, fuzz_intact_recovered   corrupted frames read (bench_fuzz.py)
  decode_csv_MBps, decode_parquet_MBps, decode_parquet_rss_MB   decode into tables (bench_tables.py)
  demo_seconds          wall time of `slipless demo` (bench_demo.py)
  demo_sim_seconds      its firmware + radio + recorder stage, 180 s simulated (bench_demo.py)
  live_cpu_fraction     share of one core the live view takes at 8 streams x 2 kHz, real time
                        (live_samples_per_s: what it took in; bench_live.py)
  run8h_*               seconds and peak RSS of each analysis command on an 8-hour run (bench_run8h.py)
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
import zlib
from pathlib import Path

import numpy as np
from cobs.cobs import encode as cobs_encode

from slipless.protocol import wire

H = ord("h")
RATE = 1000
STREAMS = [(0, H, 0, 1000, 1e-4, 0.0, "cap_amp", "V"), (1, H, 0, 1000, 1e-3, 0.0, "coil_current", "A")]


def _seal(body: bytes) -> bytes:
    return cobs_encode(body + zlib.crc32(body).to_bytes(4, "little")) + b"\x00"


def write_capture(path: Path, target_bytes: int) -> int:
    """A run like the demo's (frame mix of the default firmware settings).

    The encoder's frame layout is used through wire's own structs; COBS is the
    C package here only to make 100 MB in seconds. Returns samples written.
    """
    enc = wire.Encoder(1, 1)
    per = wire.max_samples(H)
    rng = np.random.default_rng(1)
    block = rng.normal(2048, 300, size=(4096, per)).astype("<i2")
    written = samples = 0
    tick = 0
    next_status, next_desc = 5_000_000, 10_000_000
    with path.open("wb") as f:
        f.write(enc.frame(enc.descriptor(0, 1_000_000, (0, 1, 0), 5000, 2, STREAMS)))
        k = 0
        while written < target_bytes:
            chunk = bytearray()
            for _ in range(2000):
                for stream in (0, 1):
                    head = bytearray(wire.HEADER_SIZE + wire.SAMPLES_FIXED_SIZE)
                    enc.begin(wire.SAMPLES)
                    head[: wire.HEADER_SIZE] = enc.body[: wire.HEADER_SIZE]
                    head[wire.HEADER_SIZE] = stream
                    head[wire.HEADER_SIZE + 1 :] = (tick & 0xFFFFFFFF).to_bytes(4, "little")
                    chunk += _seal(bytes(head) + block[k % 4096].tobytes())
                    enc.seq += 1
                    k += 1
                    samples += per
                tick += per * 1000
                if tick >= next_status:
                    chunk += enc.frame(enc.status(tick, 3900, 2500, 90000, 3, 0, 0, 50))
                    next_status += 5_000_000
                if tick >= next_desc:
                    chunk += enc.frame(enc.descriptor(tick, 1_000_000, (0, 1, 0), 5000, 2, STREAMS))
                    next_desc += 10_000_000
            f.write(chunk)
            written += len(chunk)
    return samples


def decode_file(path: Path, rows: bool = False) -> tuple[float, int]:
    """Seconds and samples of one streaming decode. A sink that ignored samples
    would let the decoder skip unpacking them: that would not be the figure's
    meaning, so both sinks take the unpacked arrays."""
    from slipless.decode.decoder import Decoder, NullSink

    class Frames(NullSink):
        n = 0

        def sample_frames(self, run, info, seqs, ticks, counts, raw):  # type: ignore[no-untyped-def]
            self.n += raw.size

    class Rows(NullSink):
        n = 0

        def samples(self, run, info, seq, tick, raw):  # type: ignore[no-untyped-def]
            self.n += raw.size

    sink = Rows() if rows else Frames()
    dec = Decoder(sink)
    t0 = time.perf_counter()
    with path.open("rb") as f:
        while chunk := f.read(1 << 20):
            dec.feed(chunk)
    dec.finish()
    dt = time.perf_counter() - t0
    assert sink.n == sum(r.samples for r in dec.runs.values())
    return dt, sink.n


def crc_file(path: Path) -> float:
    t0 = time.perf_counter()
    with path.open("rb") as f:
        while chunk := f.read(1 << 20):
            zlib.crc32(chunk)
    return time.perf_counter() - t0


def construct_loop(path: Path, limit: int) -> tuple[float, int]:
    """Per frame: split, COBS, CRC, then one construct parse of the whole body."""
    from cobs.cobs import decode as cobs_decode
    from construct import Array, GreedyBytes, Int8ul, Int16sl, Int32ul, Struct, Switch, this

    frame = Struct(
        "vk" / Int8ul, "board" / wire_u16(), "run" / wire_u16(), "seq" / Int32ul,
        "body" / Switch(this.vk & 0x0F, {
            wire.SAMPLES: Struct("stream" / Int8ul, "tick32" / Int32ul,
                                 "values" / Array(wire.max_samples(H), Int16sl)),
        }, default=GreedyBytes),
    )
    data = path.read_bytes()[:limit]
    data = data[: data.rfind(b"\x00") + 1]
    t0 = time.perf_counter()
    for seg in data.split(b"\x00")[:-1]:
        raw = cobs_decode(seg)
        if zlib.crc32(raw) == 0x2144DF1C:
            frame.parse(raw[:-4])
    return time.perf_counter() - t0, len(data)


def wire_u16():
    from construct import Int16ul

    return Int16ul


def peak_rss(path: Path) -> float:
    """Peak resident memory (VmHWM) of a fresh process decoding `path`, in MB.

    VmHWM belongs to the process image, so unlike ru_maxrss it does not carry
    the parent's size over fork and exec.
    """
    code = ("import sys; sys.path.insert(0, %r); from run_bench import decode_file; "
            "from pathlib import Path; decode_file(Path(%r)); "
            "print([l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1])")
    out = subprocess.run([sys.executable, "-c", code % (str(Path(__file__).parent), str(path))],
                         capture_output=True, text=True, check=True).stdout
    return int(out.strip()) / 1024.0


REPO = Path(__file__).resolve().parents[2]
BOARD_BENCH = """
import gc, time, json, config
from board import Board
from simhw import SimHW, SinkLink
from framer import Block
cfg = config.validate({"board_id": 1, "streams": [
    {"id": k, "name": "s%d" % k, "unit": "V", "source": "adc%d" % k, "rate_hz": 5000, "type": "h",
     "scale": 0.001, "offset": 0.0} for k in range(4)],
    "coil": {"program": [[1, 200], [0, 200], [-1, 200], [0, 200]], "repeat": 100000,
             "max_on_ms": 1000, "max_duty": 0.5, "duty_window_ms": 2000, "link_timeout_ms": 500}})
hw = SimHW()
b = Board(cfg, hw, hw.next_run_id())
b.link = SinkLink(b.ring)
b.start(0, "")
def spin(frames):
    f0 = b.ring.head
    while b.ring.head - f0 < frames:
        hw.advance(100)
        b.poll()
spin(300)
gc.collect(); gc.disable()
a = gc.mem_alloc(); f0 = b.ring.head
spin(2000)
alloc = (gc.mem_alloc() - a) / (b.ring.head - f0)
gc.enable()
fr = b.framer
blk = Block(9, ord("h"))
N = 200
t = time.ticks_us()
for i in range(N):
    for k in range(112):
        fr.sample(blk, k, 0, 0)
frame_us = time.ticks_diff(time.ticks_us(), t) / N
s = b.sampler
b.running = False
t = time.ticks_us()
for i in range(5000):
    s.poll()
loop_us = time.ticks_diff(time.ticks_us(), t) / 5000
print(json.dumps({"alloc": alloc, "frame_us": frame_us, "loop_us": loop_us}))
"""


def board_figures() -> dict[str, float]:
    """Board code timings under the WebAssembly MicroPython (node)."""
    files = {"/lib/" + p.name: p.read_text() for p in (REPO / "firmware").glob("*.py")}
    files["/lib/wire.py"] = (REPO / "protocol" / "wire.py").read_text()
    job = json.dumps({"files": files, "code": BOARD_BENCH})
    out = subprocess.run(["node", str(REPO / "tests" / "mpy" / "run.mjs")], input=job.encode(),
                         capture_output=True, check=True, timeout=600).stdout
    r = json.loads(out)
    return {"board_alloc_bytes_per_frame": round(r["alloc"], 3),
            "board_frame_us": round(r["frame_us"], 1), "board_loop_us": round(r["loop_us"], 2)}


def main() -> int:
    size = int(os.environ.get("BENCH_MB", "110")) << 20
    figures: dict[str, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        big, small = Path(tmp) / "big.bin", Path(tmp) / "small.bin"
        print(f"writing a {size >> 20} MB capture ...", flush=True)
        n_samples = write_capture(big, size)
        write_capture(small, size // 10)
        mb = big.stat().st_size / 1e6
        figures["capture_MB"] = round(mb, 1)
        figures["bytes_per_sample"] = round(big.stat().st_size / n_samples, 4)
        # the median of 3 decodes (the first in a process also pays numpy's warm-up)
        runs = [decode_file(big) for _ in range(3)]
        assert all(got == n_samples for _, got in runs), (runs, n_samples)
        figures["decode_MBps"] = round(mb / sorted(dt for dt, _ in runs)[1], 1)
        rows = sorted(decode_file(big, rows=True)[0] for _ in range(3))
        figures["decode_rows_MBps"] = round(mb / rows[1], 1)
        figures["crc32_MBps"] = round(mb / crc_file(big), 1)
        dt_c, n_c = construct_loop(big, 8 << 20)
        figures["construct_loop_MBps"] = round(n_c / 1e6 / dt_c, 2)
        figures["decode_vs_construct"] = round(figures["decode_MBps"] / figures["construct_loop_MBps"], 1)
        figures["decode_peak_rss_MB"] = round(peak_rss(big), 1)
        figures["decode_peak_rss_small_MB"] = round(peak_rss(small), 1)
        from bench_tables import table_figures  # decoding into CSV and Parquet tables

        figures.update(table_figures(big, small))
    figures.update(board_figures())
    from bench_record import record_figures  # bumble is a test dependency, loaded on demand

    figures.update(record_figures())
    from bench_align import align_figures

    figures.update(align_figures())
    from bench_demo import demo_figures

    figures.update(demo_figures())
    from bench_fuzz import run as fuzz_figures  # >= 10 million corrupted frames

    figures.update(fuzz_figures())
    from bench_live import live_figures  # the live view at 8 x 2 kHz, real time

    figures.update(live_figures())
    from bench_run8h import run8h_figures  # every analysis command on an 8-hour run (BENCH_HOURS)

    figures.update(run8h_figures())
    print_figures(figures)
    return 0


def print_figures(figures: dict[str, float]) -> None:
    """One line per figure, then every figure as one JSON line (what `make bench` ends with)."""
    for k, v in figures.items():
        print(f"{k:28s} {v}")
    print(json.dumps(figures, sort_keys=True))


if __name__ == "__main__":
    sys.exit(main())
