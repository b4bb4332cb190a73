"""`slipless align --asymmetry`: the level's assumption, given and stated.

Simulated scenario of our own: one board, two minutes, every notification
1.4 ms longer on the air than a PING write (sim.clocks' air_s), written into
a capture as `slipless record` would.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from slipless.align.clockmodel import LEVEL_ASSUMPTION
from slipless.align.period import parse_signed_time
from slipless.cli import main
from slipless.sim.clock_capture import SimBoard, SimCapture, write_clock_capture
from slipless.sim.clocks import ClockSim


@pytest.fixture(scope="module")
def long_air(tmp_path_factory: pytest.TempPathFactory) -> SimCapture:
    path = tmp_path_factory.mktemp("air") / "air.slcap"
    return write_clock_capture(path, [SimBoard(1, ClockSim(seconds=120, skew_ppm=15.0, air_s=0.0014,
                                                           offset_s=800.0, seed=5))])


def _json(cap: SimCapture, out: Path, *extra: str, capsys: pytest.CaptureFixture[str]) -> dict:
    assert main(["align", str(cap.path), "--grid", "100ms", "--out", str(out), "--json", *extra]) == 0
    return json.loads(capsys.readouterr().out)["runs"][0]


def _offset_error_ms(cap: SimCapture, run: dict) -> float:
    """Mapped minus true laptop time at the first knot, ms."""
    tick, mono = run["knots_tick"][0], run["knots_mono_ns"][0]
    return float((mono - cap.boards[0].clock.laptop_ns(np.array([tick]))[0]) * 1e-6)


def test_the_asymmetry_moves_the_level_by_half(long_air: SimCapture, tmp_path: Path,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    plain = _json(long_air, tmp_path / "a", capsys=capsys)
    given = _json(long_air, tmp_path / "b", "--asymmetry", "1.4ms", capsys=capsys)
    assert plain["level"]["assumption"] == LEVEL_ASSUMPTION
    assert plain["level"]["asymmetry_ms"] == 0.0 and given["level"]["asymmetry_ms"] == 1.4
    late, fixed = _offset_error_ms(long_air, plain), _offset_error_ms(long_air, given)
    assert fixed - late == pytest.approx(-0.7, abs=1e-3)  # half the asymmetry, earlier
    assert late > 0.3 and abs(fixed) < late  # the 1.4 ms made the laptop times late


def test_the_table_notes_the_assumption(long_air: SimCapture, tmp_path: Path,
                                        capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["align", str(long_air.path), "--grid", "100ms", "--out", str(tmp_path / "t")]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "least latency, not its split; it is taken equal both ways" in text


@pytest.mark.parametrize("text,ns", [("1.4ms", 1_400_000), ("-0.3ms", -300_000), ("0ms", 0),
                                     ("+250us", 250_000)])
def test_signed_times_parse(text: str, ns: int) -> None:
    assert parse_signed_time(text) == ns


def test_a_bad_asymmetry_is_one_line_and_exit_2(long_air: SimCapture, tmp_path: Path) -> None:
    r = subprocess.run([sys.executable, "-m", "slipless", "align", str(long_air.path), "--grid", "1ms",
                        "--out", str(tmp_path / "o"), "--asymmetry", "1.4 parsecs"],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 2
    assert "is not a time like" in r.stderr and "Traceback" not in r.stderr
