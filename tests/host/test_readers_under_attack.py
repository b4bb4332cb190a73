"""Every reader under attack (property tests): random bytes, bit flips,
truncation at every offset, chunk splits, duplicated and reordered chunks.

Invariants: no reader raises anything but its one-line user error; every
intact frame next to damage is recovered; no damaged frame is accepted (a
frame is accepted only with the exact bytes the board sent)."""

from __future__ import annotations

import random
import sys
from collections import Counter
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from slipless.decode.deframe import FastDeframer
from slipless.io.capture import CaptureReader, CaptureWriter
from slipless.protocol import wire
from slipless.sim.board import SimConfig, simulate

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "fuzz"))
import targets  # noqa: E402

FRAMES = [bytes(f) for _, f in simulate(SimConfig(seconds=3, seed=11))]
BODIES = {bytes(b) for f in FRAMES for b in wire.Deframer().feed(f)}


@pytest.mark.parametrize("name", sorted(targets.ALL))
@settings(max_examples=40, deadline=None, suppress_health_check=list(HealthCheck))
@given(data=st.binary(max_size=3000))
def test_random_bytes(name: str, data: bytes) -> None:
    targets.ALL[name](data)


@pytest.mark.parametrize("name", ["deframe", "decoder", "capture_records", "mirror", "commands"])
@settings(max_examples=25, deadline=None, suppress_health_check=list(HealthCheck))
@given(seed=st.integers(0, 2**32), n=st.integers(1, 20))
def test_damaged_valid_streams(name: str, seed: int, n: int) -> None:
    """Valid frames with damage: the readers' contracts hold on near-valid input too."""
    data, _ = damage(FRAMES[:n], random.Random(seed))
    if name == "capture_records":
        data = record_bytes(data)
    targets.ALL[name](data)


def record_bytes(data: bytes) -> bytes:
    import struct
    import zlib

    from slipless.io.capture import _REC_HEAD, SYNC

    out = b""
    for i in range(0, len(data), 200):
        part = data[i : i + 200]
        rec = _REC_HEAD.pack(SYNC, 1, 0, len(part), i, i) + part
        out += rec + struct.pack("<I", zlib.crc32(rec))
    return out


def damage(frames: list[bytes], rng: random.Random) -> tuple[bytes, list[bool]]:
    """Join frames, damaging some; return the stream and which frames stay intact
    (own bytes untouched and the byte before them a delimiter or the start)."""
    out = bytearray()
    intact = []
    for f in frames:
        kind = rng.choice(["keep", "keep", "flip", "cut", "junk", "dup", "swap", "bytes"])
        g = bytearray(f)
        if kind == "flip":
            for _ in range(rng.randint(1, 4)):
                g[rng.randrange(len(g))] ^= 1 << rng.randrange(8)
        elif kind == "cut":
            g = g[: rng.randrange(len(g))]  # delimiter lost too
        elif kind == "junk":
            g = bytearray(rng.randbytes(rng.randint(1, 300))) + g
        elif kind == "dup":
            a = rng.randrange(len(g))
            g = g[:a] + g[a : a + rng.randint(1, 40)] + g[a:]
        elif kind == "swap":
            a = rng.randrange(len(g))
            b = rng.randrange(a, len(g))
            g = g[a:b] + g[:a] + g[b:]
        elif kind == "bytes":
            for _ in range(rng.randint(1, 3)):
                g[rng.randrange(len(g))] = rng.randrange(256)
        # junk just before a frame merges with it unless the junk ends in a delimiter
        ok = (bytes(g) == f or (kind == "junk" and g[-len(f) - 1] == 0)) and (
            not out or out[-1] == 0)
        intact.append(ok)
        out += g
    return bytes(out), intact


def _bodies(frame: bytes) -> bytes:
    return bytes(wire.Deframer().feed(frame)[0])


@settings(max_examples=300, deadline=None)
@given(seed=st.integers(0, 2**64))
def test_intact_recovered_and_nothing_damaged_accepted(seed: int) -> None:
    rng = random.Random(seed)
    n = rng.randint(1, len(FRAMES))
    start = rng.randrange(len(FRAMES) - n + 1)
    frames = FRAMES[start : start + n]
    data, intact = damage(frames, rng)
    got = targets.check_deframers(data)
    assert all(b in BODIES for b in got)  # no damaged frame accepted
    want = Counter(_bodies(f) for f, ok in zip(frames, intact, strict=True) if ok)
    have = Counter(got)
    assert not want - have  # every intact frame recovered


def test_truncation_at_every_offset() -> None:
    frames = FRAMES[:8]
    data = b"".join(frames)
    ends = []
    pos = 0
    for f in frames:
        pos += len(f)
        ends.append(pos)
    for cut in range(len(data) + 1):
        got = targets.check_deframers(data[:cut])
        want = [_bodies(f) for f, e in zip(frames, ends, strict=True) if e <= cut]
        assert got == want
        # joining mid-stream: the part before the first delimiter is skipped, the rest kept
        later = [_bodies(f) for f, e in zip(frames, ends, strict=True) if e - len(f) >= cut]
        assert [bytes(b) for b, _, _ in FastDeframer().feed(data[cut:])] == later


def _capture(tmp_path: Path, payloads: list[bytes]) -> bytes:
    path = tmp_path / "c.slcap"
    w = CaptureWriter(path, {"slipless": "test"}, 3600)
    for i, p in enumerate(payloads):
        w.write(1, 0, p, i, i)
    w.close()
    return path.read_bytes()


def test_capture_cut_and_flipped(tmp_path: Path) -> None:
    """A cut capture gives a prefix of its records; a flipped byte costs only the
    record it hits (records carry their own CRC)."""
    payloads = FRAMES[:12]
    blob = _capture(tmp_path, payloads)
    path = tmp_path / "x.slcap"
    head = len(targets.capture_header())
    for cut in range(head, len(blob) + 1, 7):
        path.write_bytes(blob[:cut])
        with path.open("rb") as f:
            got = [r.payload for r in CaptureReader(f)]
        assert got == payloads[: len(got)]
    rng = random.Random(2)
    for _ in range(200):
        b = bytearray(blob)
        at = rng.randrange(200, len(b))
        b[at] ^= 1 << rng.randrange(8)
        path.write_bytes(bytes(b))
        try:
            with path.open("rb") as f:
                got = [r.payload for r in CaptureReader(f)]
        except Exception as exc:  # only the header may be refused, with one line
            raise AssertionError(f"flip at {at}: {exc!r}") from exc
        assert all(p in payloads for p in got)
        assert len(got) >= len(payloads) - 2


CRAFTED_CONFIGS = [b'{"name": "\\ud800"}', b"[" * 100000, b'{"link": {"key_hex": "\\udc00"}}']


@pytest.mark.parametrize("data", CRAFTED_CONFIGS)
def test_crafted_configs_are_one_line(data: bytes) -> None:
    """Found by fuzzing: a lone-surrogate escape and deep nesting once escaped as
    UnicodeEncodeError / RecursionError instead of ConfigError."""
    config = targets._firmware()
    with pytest.raises(config.ConfigError) as err:
        config.parse(data.decode())
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("payload", [b"[1]", b"[" * 60000, b'"text"', b"\xff"])
def test_crafted_capture_json_never_raises(payload: bytes) -> None:
    """Found by fuzzing: a capture header or event record holding JSON that is not
    an object (or is nested past the parser's limit) once raised AttributeError /
    RecursionError; now a one-line refusal (header) or a skipped record (event)."""
    import struct
    import zlib

    from slipless.io import capture

    head = capture._FILE_HEAD.pack(capture.MAGIC, capture.VERSION, len(payload),
                                   zlib.crc32(payload)) + payload
    targets.check_capture(head[8:])
    rec = capture._REC_HEAD.pack(capture.SYNC, capture.EVENT, 0, len(payload), 0, 0) + payload
    targets.check_capture_records(rec + struct.pack("<I", zlib.crc32(rec)))


def test_bulk_corruption_counts_and_its_control(monkeypatch) -> None:
    """A small run of bench_fuzz (make bench runs >= 10 million): no corrupted frame
    accepted, every intact neighbour back; and with the CRC check disabled the same
    harness does count false accepts (so a zero means something)."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))
    import bench_fuzz

    import slipless.decode.deframe as deframe

    fig = bench_fuzz.run(20_000, seed=3)
    assert fig["fuzz_cases"] >= 20_000 and fig["fuzz_false_accepts"] == 0
    assert fig["fuzz_intact_recovered"] == 1.0

    class NoCrc:
        @staticmethod
        def crc32(data: bytes) -> int:
            return deframe._CRC_RESIDUE

    monkeypatch.setattr(deframe, "zlib", NoCrc)
    assert bench_fuzz.run(20_000, seed=3)["fuzz_false_accepts"] > 1000


def test_names_from_the_board_never_become_paths(tmp_path: Path) -> None:
    """Stream names come from the board (or from a damaged or hostile capture):
    output files are named by slipless alone, all inside the chosen folder."""
    from slipless.cli import decode_files

    enc = wire.Encoder(1, 1)
    evil = [(0, ord("h"), 0, 1000, 1.0, 0.0, "../../escape", "/etc/x"),
            (1, ord("h"), 0, 1000, 1.0, 0.0, "..", "..\\..")]
    data = enc.frame(enc.descriptor(0, 1_000_000, (0, 1, 0), 5000, 2, evil))
    for stream in (0, 1):
        data += enc.frame(enc.samples(stream, 0, ord("h"), list(range(50))))
    src = tmp_path / "in" / "stream.bin"
    src.parent.mkdir()
    src.write_bytes(data)
    out = tmp_path / "in" / "out"
    before = {p for p in tmp_path.rglob("*")}
    decode_files([src], out, "csv", None)
    made = {p for p in tmp_path.rglob("*")} - before
    assert made and all(p.resolve().is_relative_to(out.resolve()) for p in made)
