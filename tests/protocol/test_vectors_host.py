"""The host decoder reproduces every golden vector, however the bytes are chunked."""

from __future__ import annotations

import json
import random
import sys
from pathlib import Path

import pytest
from collect_sink import CollectSink

from slipless.decode.decoder import Decoder, RunState

VECTORS = Path(__file__).resolve().parents[2] / "protocol" / "vectors"
CASES = sorted(p.stem for p in VECTORS.glob("*.json"))
sys.path.insert(0, str(VECTORS))
from build import compress_fates  # noqa: E402


def chunkings(data: bytes):
    yield "whole", [data]
    yield "bytewise", [data[i : i + 1] for i in range(len(data))]
    for size in (20, 244):  # default and negotiated BLE notification payloads
        yield f"by{size}", [data[i : i + size] for i in range(0, len(data), size)]
    rng = random.Random(len(data))
    cuts = sorted(rng.sample(range(len(data) + 1), min(len(data), 7)))
    yield "random", [data[a:b] for a, b in zip([0] + cuts, cuts + [len(data)])]


class StreamsSink(CollectSink):
    """CollectSink that also keeps each descriptor() call: the streams a run lists."""

    def __init__(self) -> None:
        super().__init__()
        self.streams: list[list[int]] = []

    def descriptor(self, run: RunState) -> None:
        self.streams += [[run.board, run.run, sid] for sid in sorted(run.streams)]


def decode(chunks) -> tuple[Decoder, StreamsSink]:
    sink = StreamsSink()
    dec = Decoder(sink)
    for chunk in chunks:
        dec.feed(chunk)
    dec.finish()
    return dec, sink


@pytest.mark.parametrize("stem", CASES)
def test_vector(stem: str) -> None:
    case = json.loads((VECTORS / f"{stem}.json").read_text())
    data = (VECTORS / f"{stem}.bin").read_bytes()
    exp = case["expect"]
    for how, chunks in chunkings(data):
        dec, sink = decode(chunks)
        c = dec.counters
        got_samples = sorted(list(r) for r in sink.samples_rows)
        assert got_samples == exp["samples"], how
        assert sorted(list(r) for r in sink.events) == exp["events"], how
        assert sorted(list(r) for r in sink.status_rows) == exp["status"], how
        assert sorted(list(r) for r in sink.replies) == exp["replies"], how
        assert compress_fates([list(r) for r in sink.frames]) == exp["frames"], how
        assert sorted(sink.streams) == exp["streams"], how  # once per run, every part's streams
        counters = exp["counters"]
        assert c.corrupt + c.overlong == counters["damaged_segments"], how
        assert c.commands == counters["commands"], how
        assert c.unknown_kind == counters["unknown_kind"], how
        assert c.bad_version == counters["bad_version"], how
        assert c.skipped_bytes == counters.get("skipped_bytes", 0), how
        assert c.malformed == counters["malformed"], how
        assert sum(r.undecodable for r in dec.runs.values()) == counters["undecodable"], how
        for run in dec.runs.values():
            assert run.ticks_uncertain == 0, how


def test_vector_count() -> None:
    assert len(CASES) >= 20
