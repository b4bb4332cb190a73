"""Faults in a whole run: a 24-hour run, long enough for the 32-bit tick of the
SAMPLES frames to wrap about twenty times (2**32 us is 71.6 minutes), kept
sparse so it stays fast: one 1 Hz stream, ten samples a frame, a STATUS each
minute. Frames are lost on the radio (some asked for again, some found in the
mirror) and the board's queue overflows once. Through capture -> `slipless
decode` -> `slipless loss --json`, every sample held must carry its exact
64-bit tick and the account must close. Truth: the frames this test builds
with wire.Encoder and the fates it chose, never the decoder."""

from __future__ import annotations

import csv
import json
import random

import pytest

from slipless.cli import main
from slipless.decode.tables import read_decoded
from slipless.io import capture
from slipless.protocol import wire

BOARD, RUN = 7, 2
H = ord("h")
PERIOD_US = 1_000_000
PER_FRAME = 10
T0 = 5 * 2**32 - 3_000_000  # the first wrap comes 3 s in
HOURS = 24
QUEUE = 3
STATUS_EVERY = 7  # seqs: six SAMPLES frames (one minute) then a STATUS


def _build(board_drop: set[int]) -> tuple[list[bytes], dict[int, int], list[int]]:
    """The run's frames, seq -> first tick of each SAMPLES frame, the STATUS seqs."""
    enc = wire.Encoder(BOARD, RUN)
    n_samples_frames = HOURS * 3600 // PER_FRAME
    stream = [(0, H, 0, PERIOD_US, 0.01, 0.0, "slow", "V")]
    out = [enc.frame(enc.descriptor(T0, 1_000_000, (0, 9, 0), 15_000, 1, stream))]
    first_tick: dict[int, int] = {}
    statuses: list[int] = []
    k = 0
    while k < n_samples_frames:
        seq = len(out)
        if seq % STATUS_EVERY == 0:
            dropped = sum(1 for x in board_drop if x <= seq - 1 - QUEUE)  # sim.lossy's queue rule
            tick = T0 + k * PER_FRAME * PERIOD_US
            out.append(enc.frame(enc.status(tick, 3900, 2500, 50_000, QUEUE, dropped, 0, 30)))
            statuses.append(seq)
            continue
        tick = T0 + k * PER_FRAME * PERIOD_US
        first_tick[seq] = tick
        values = [(seq * 13 + i) % 2000 - 1000 for i in range(PER_FRAME)]
        out.append(enc.frame(enc.samples(0, tick, H, values)))
        k += 1
    end_tick = T0 + k * PER_FRAME * PERIOD_US
    out.append(enc.frame(enc.end(end_tick, 1, [(0, k * PER_FRAME)])))
    return out, first_tick, statuses


@pytest.fixture(scope="module")
def day(tmp_path_factory: pytest.TempPathFactory) -> dict:
    rng = random.Random(24)
    n = 1 + HOURS * 3600 // PER_FRAME
    n += (n + STATUS_EVERY - 2) // (STATUS_EVERY - 1)  # rough size, for choosing fates
    # one queue overflow at hour 13: five SAMPLES frames never sent, nothing else lost near it
    over = [s for s in range(int(n * 13 / 24), n) if s % STATUS_EVERY][:5]
    board_drop = set(over)
    fr, first_tick, statuses = _build(board_drop)
    n = len(fr)
    quiet = set(range(over[0] - 3 * STATUS_EVERY, over[-1] + 3 * STATUS_EVERY))
    candidates = [s for s in range(1, n - 1) if s not in quiet and s != statuses[-1]]
    lost = set(rng.sample(candidates, 180))
    resend = set(rng.sample(sorted(lost), 60))
    mirror_only = set(rng.sample(sorted(lost - resend), 50))
    resend |= {over[0]}  # the ring still held the first dropped frame
    mirror_only |= {over[1]}
    folder = tmp_path_factory.mktemp("day")
    cap = folder / "day.slcap"
    w = capture.CaptureWriter(cap, {"sources": [{}]}, sync_every_s=1e9)
    mono = 1_000_000_000
    w.event(0, "connected", mtu=247)
    for seq, data in enumerate(fr):
        mono += 1_000_000_000 if seq in first_tick else 1_000_000
        if seq not in lost and seq not in board_drop:
            w.write(capture.RX, 0, data, mono, mono + 1_700_000_000 * 10**9)
    laptop = wire.Encoder(0xFFFF, RUN)
    for i, seq in enumerate(sorted(resend)):
        mono += 1_000_000
        w.write(capture.TX, 0, laptop.frame(laptop.resend(i + 1, seq, seq)), mono, mono)
        mono += 1_000_000
        w.write(capture.RX, 0, fr[seq], mono, mono)
    w.close()
    mirror = folder / "mirror.bin"
    mirror.write_bytes(b"".join(fr[s] for s in sorted(mirror_only)))
    return {"cap": cap, "mirror": mirror, "frames": fr, "first_tick": first_tick,
            "lost": lost - resend - mirror_only, "resend": resend, "mirror_only": mirror_only,
            "board_drop": board_drop - resend - mirror_only, "folder": folder}


def test_a_day_wraps_the_tick_about_twenty_times(day: dict) -> None:
    ticks = sorted(day["first_tick"].values())
    assert (ticks[-1] >> 32) - (ticks[0] >> 32) >= 20


def test_every_tick_exact_after_a_day(day: dict) -> None:
    out = day["folder"] / "tables"
    assert main(["decode", str(day["cap"]), "--mirror", str(day["mirror"]), "--out", str(out),
                 "--quiet"]) == 0
    with (out / "samples.csv").open(newline="") as f:
        got = [(int(r["seq"]), int(r["tick_us"])) for r in csv.DictReader(f)]
    missing = day["lost"] | day["board_drop"]
    want = sorted((seq, t0 + i * PERIOD_US) for seq, t0 in day["first_tick"].items()
                  if seq not in missing for i in range(PER_FRAME))
    assert sorted(got) == want
    cols = read_decoded(out, "samples", ("tick_us", "board_time_s"))
    assert cols is not None
    for tick, secs in zip(cols["tick_us"].tolist(), cols["board_time_s"].tolist()):
        assert abs(secs - tick / 1e6) < 1e-6


def test_the_account_closes_after_a_day(day: dict, capsys: pytest.CaptureFixture[str]) -> None:
    capsys.readouterr()
    assert main(["loss", str(day["cap"]), "--mirror", str(day["mirror"]), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    (run,) = doc["runs"]
    n = len(day["frames"])
    assert run["closes"] and run["end_seen"], run["discrepancies"]
    missing = day["lost"] | day["board_drop"]
    recovered = day["resend"] | day["mirror_only"]
    assert doc["frames_expected"] == n
    assert doc["frames_received"] == n - len(missing) - len(recovered)
    assert doc["frames_recovered_resend"] == len(day["resend"])
    assert doc["frames_recovered_mirror"] == len(day["mirror_only"])
    assert doc["frames_lost"] == len(day["lost"])
    assert doc["frames_dropped_board"] == len(day["board_drop"])
    lost_samples = PER_FRAME * sum(1 for s in day["lost"] if s in day["first_tick"])
    assert doc["samples_expected"] == PER_FRAME * len(day["first_tick"])
    assert doc["samples_lost"] == lost_samples
    assert doc["samples_dropped_board"] == PER_FRAME * len(day["board_drop"])


def test_a_frame_that_comes_hours_late_keeps_its_tick() -> None:
    """Regression: a frame obtained long after its neighbours (resent, or read
    from the mirror, which is merged after the capture) was unwrapped against
    the newest reference, whole wraps away, and its time called uncertain."""
    from collect_sink import collect

    fr, first_tick, _ = _build(set())
    fr = fr[:800]  # about 2.2 hours, no END
    late = 100  # a SAMPLES frame lost on the radio, found in the mirror
    assert late in first_tick
    dec, sink = collect([b"".join(f for s, f in enumerate(fr) if s != late), fr[late]])
    ticks = sorted(t for _, _, _, seq, t, _ in sink.samples_rows if seq == late)
    assert ticks == [first_tick[late] + i * PERIOD_US for i in range(PER_FRAME)]
    (run,) = dec.runs.values()
    assert run.ticks_uncertain == 0
