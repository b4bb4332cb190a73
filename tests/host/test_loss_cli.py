"""`slipless loss` on the command line: JSON keys, exit codes, one-line errors, figures."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from slipless.cli import main
from slipless.sim import rig
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import ChannelConfig, ChannelLog, transmit
from slipless.sim.lossy import Plan, write
from slipless.sim.shadow import shadow

KEYS = ("frames_expected", "frames_received", "frames_recovered", "frames_lost",
        "frames_dropped_board", "frames_corrupt", "frames_duplicate", "samples_expected",
        "samples_lost", "loss_fraction", "gaps")


@pytest.fixture(scope="module")
def lossy(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """A capture missing 6 of 40 frames for good (and a mirror file)."""
    plan = Plan(40, queue=2, status_every=5, lost={3, 4, 20}, corrupt={8}, duplicate={11},
                board_drop={25, 26, 27}, resend={25}, mirror={4, 30})
    return write(plan, tmp_path_factory.mktemp("lossy"))


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_json_document(lossy: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    cap, mirror = lossy
    code, out, err = run(capsys, "loss", str(cap), "--mirror", str(mirror), "--json")
    assert code == 0 and err == ""
    doc = json.loads(out)
    for key in KEYS:
        assert key in doc
    assert doc["frames_expected"] == 40
    assert (doc["frames_received"], doc["frames_recovered"], doc["frames_lost"],
            doc["frames_dropped_board"]) == (33, 2, 3, 2)
    assert doc["frames_expected"] == (doc["frames_received"] + doc["frames_recovered"]
                                      + doc["frames_lost"] + doc["frames_dropped_board"])
    assert (doc["frames_corrupt"], doc["frames_duplicate"], doc["frames_mirror_copies"]) == (1, 1, 1)
    assert doc["closes"] and doc["passed"] and doc["loss_fraction"] == pytest.approx(5 / 40)
    assert doc["samples_expected"] == 10 * 31  # 31 SAMPLES frames of 10 samples
    assert [(g["first_seq"], g["last_seq"], g["cause"]) for g in doc["gaps"]] == [
        (3, 4, "unknown"), (8, 8, "corruption"), (20, 20, "unknown"), (25, 27, "board_overflow")]
    gap = doc["gaps"][0]
    assert gap["laptop_start_ns"] < gap["laptop_end_ns"]
    assert gap["board_start_us"] < gap["board_end_us"]
    run_doc = doc["runs"][0]
    assert {s["name"] for s in run_doc["streams"]} == {"alpha", "beta"}
    assert run_doc["burst"]["rfc3611"]["gmin"] == 16


def test_report_in_the_terminal(lossy: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run(capsys, "loss", str(lossy[0]))
    assert code == 0
    assert "closes: frames: 40 expected (END)" in out
    assert "board_overflow" in out and "loss periods (RFC 3357)" in out


@pytest.mark.parametrize(("limit", "code"), [("50", 0), ("20", 0), ("10", 3), ("0", 3)])
def test_exit_status_against_max_loss(lossy: tuple[Path, Path], capsys: pytest.CaptureFixture[str],
                                      limit: str, code: int) -> None:
    # Without the mirror 6 of 40 frames (15 %) are missing: 20 passes, 10 does not.
    got, out, err = run(capsys, "loss", str(lossy[0]), "--json", "--max-loss", limit)
    assert got == code
    assert json.loads(out)["passed"] is (code == 0)
    if code:
        assert err.count("\n") == 1 and err.startswith("slipless: 15.000 % of frames missing")
        assert "Traceback" not in err


def test_any_loss_passes_by_default(lossy: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    assert run(capsys, "loss", str(lossy[0]), "--json")[0] == 0


@pytest.mark.parametrize("bad", [
    ["missing.slcap"], ["{empty}"], ["{dir}"], ["{junk}"],
    ["{cap}", "--max-loss", "150"], ["{cap}", "--max-loss", "x"], ["{cap}", "--plot", "{dir}/f.txt"],
    ["{cap}", "--plot", "{dir}/no/such/f.png"], ["{cap}", "--angle-bins", "0"], ["{cap}", "--gmin", "0"],
    ["{cap}", "--mirror", "{dir}/nothing.bin"], ["{cap}", "--no-such-option"],
])
def test_bad_input_is_one_line_and_exit_2(tmp_path: Path, lossy: tuple[Path, Path],
                                          capsys: pytest.CaptureFixture[str], bad: list[str]) -> None:
    (tmp_path / "empty.bin").write_bytes(b"")
    (tmp_path / "junk.bin").write_bytes(bytes(range(1, 200)) * 3)
    names = {"empty": tmp_path / "empty.bin", "junk": tmp_path / "junk.bin", "dir": tmp_path,
             "cap": lossy[0]}
    argv = ["loss"] + [a.format(**names) if a != "missing.slcap" else str(tmp_path / a) for a in bad]
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse's own errors (one line, see cli._Parser)
        code = int(exc.code or 0)
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("slipless: error:")
    assert "Traceback" not in err


def test_plot_with_angle(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    cfg = rig.RigConfig(blocks_rad_s=(2 * math.pi,), block_s=12.0, seed=5)
    frames = list(rig.frames(cfg))
    kept, _ = shadow(frames[:-1], lambda t: np.degrees(2 * math.pi * t), 90.0, 150.0, seed=1)
    (tmp_path / "link.bin").write_bytes(b"".join(kept + frames[-1:]))
    png = tmp_path / "loss.png"
    code, out, _ = run(capsys, "loss", str(tmp_path / "link.bin"), "--plot", str(png),
                       "--angle-bins", "12")
    assert code == 0 and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "by rotor angle (rate stream gyro_z (rad/s))" in out
    code, out, _ = run(capsys, "loss", str(tmp_path / "link.bin"), "--json", "--angle-stream", "gyro_z")
    assert json.loads(out)["runs"][0]["angle"]["worst_deg"] == 105.0


def test_demo_link_matches_the_simulation(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # The demo's own pipeline (simulated board, damaging link): every frame the link
    # lost is reported lost (the END frame survives with this seed), nothing else.
    frames = [f for _, f in simulate(SimConfig(seconds=20, seed=1))]
    log = ChannelLog()
    (tmp_path / "link.bin").write_bytes(b"".join(transmit(frames, ChannelConfig(seed=2), log)))
    code, out, _ = run(capsys, "loss", str(tmp_path / "link.bin"), "--json")
    doc = json.loads(out)
    assert code == 0 and doc["closes"] and doc["end_seen"]
    assert doc["frames_expected"] == len(frames)
    assert doc["frames_lost"] == len(frames) - doc["frames_received"] > 0
    assert doc["frames_corrupt"] <= log.flipped
