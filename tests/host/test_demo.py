"""`slipless demo`: deterministic with its seed; its printed numbers are checked
against the simulation's own truth (sim/scenario.py): the firmware's frames
and queue drops, what the radio model lost, the rig's coil plan and physics."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from rich.console import Console

from slipless.cli import build_parser
from slipless.cli.demo import run_demo


def test_demo_numbers(tmp_path: Path) -> None:
    console = Console(record=True, width=400)
    args = build_parser().parse_args(["demo", "--out", str(tmp_path), "--seconds", "60",
                                      "--seed", "1"])
    from slipless.io.inputs import decode_passes

    before = decode_passes()
    assert run_demo(args, console) == 0
    assert decode_passes() - before == 1  # the whole analysis reads capture and mirror once
    text = console.export_text()
    # the board's firmware ran the run: its frames, its queue's drops, the radio's doings
    assert ("board firmware: run 2, 1,327 frames built; its send queue dropped 66 (counted in "
            "STATUS) while the link stalled 17.9-19.5 s and was down 37.1-40.1 s") in text
    assert ("radio: 78 notifications lost at the dead angle (200-236 deg), 1 elsewhere; "
            "1 reconnection; recorder: 58 pings, 157 frames asked for again") in text
    assert "coil: the board switched 25 times; its program matches the rig's plan within" in text
    assert ("loss (radio only): 1,325 expected = 1,168 received + 129 recovered by resend + 0 "
            "from the mirror + 8 lost + 20 dropped on the board: closes") in text
    assert ("against the simulation: received 1,168, recovered by resend 129, lost 8, dropped 20: "
            "every term matches") in text
    # gaps at the dead angle are named by it (loss/sector.py); the one loss elsewhere stays unknown
    assert "gap causes found: board_overflow, disconnection, rotor_angle, unknown" in text
    assert ("loss (with the mirror): 1,325 expected = 1,168 received + 129 recovered by resend + "
            "28 from the mirror + 0 lost + 0 dropped on the board: closes") in text
    m = re.search(r"worst angle \(integrated gyro\) (\d+) deg \(dead sector 200-236\)", text)
    assert m and 200 <= int(m.group(1)) <= 236  # the loss lands in the dead sector
    assert re.search(r"clock: skew \+\d+\.\d\d ppm \(simulated \+23\.00\); .* inside the bound", text)
    assert "pulses: 12 found, 12 used" in text
    # the induction term and the artifact each land inside their interval
    assert re.search(r"d \(field x rotation \(induction\)\): .* inside the 95% interval", text)
    assert re.search(r"b \(field only \(artifact\)\): .* inside the 95% interval", text)
    # the capture is the recorder's own, over bumble at the negotiated MTU, from the firmware
    from slipless.io import capture
    from slipless.sim.ble_board import FIRMWARE

    with (tmp_path / "run.slcap").open("rb") as f:
        reader = capture.CaptureReader(f)
        links = [json.loads(r.payload) for r in reader if r.type == capture.EVENT]
    assert reader.meta["backend"] == "bumble"
    assert [e["mtu"] for e in links if e["event"] == "connected"] == [247, 247]
    fw = re.search(r"^FW = \((\d+), (\d+), (\d+)\)", (FIRMWARE / "board.py").read_text(), re.M)
    assert fw and f",{'.'.join(fw.groups())}," in (tmp_path / "tables" / "runs.csv").read_text()
    for name in ("samples", "events", "status", "frames", "streams", "runs", "replies"):
        assert (tmp_path / "tables" / f"{name}.csv").stat().st_size > 0
    for name in ("fit.csv", "conditions.csv", "conditions.png", "summary.json"):
        assert (tmp_path / "pulses" / name).stat().st_size > 0
    for name in ("loss.json", "loss.png", "loss-radio.json", "aligned/clock.json", "report.html"):
        assert (tmp_path / name).stat().st_size > 0


def test_demo_is_deterministic_and_its_account_is_the_radios_truth(tmp_path: Path) -> None:
    from slipless.loss.account import analyse
    from slipless.loss.collect import collect
    from slipless.run import open_run
    from slipless.sim.scenario import ScenarioConfig, build

    sc = build(tmp_path, ScenarioConfig(seed=3, seconds=60))
    (tmp_path / "b").mkdir()
    again = build(tmp_path / "b", ScenarioConfig(seed=3, seconds=60))
    assert sc.capture.read_bytes() == again.capture.read_bytes()
    assert sc.mirror.read_bytes() == again.mirror.read_bytes()
    # another seed: the loss account of the capture against what crossed the radio model
    account = next(a for a in analyse(collect([sc.capture], [], None)) if a.run == sc.run)
    end = open_run([sc.capture]).runs[(sc.rig.board, sc.run)].end
    assert end is not None
    # frames the board built after END are replies, not frames of the run (SPEC 3.8)
    assert account.expected == end["frames"] <= sc.frames
    truth = sc.truth_terms(end["frames"])
    assert (account.terms["received"], account.terms["recovered_resend"], account.terms["lost"],
            account.terms["dropped_board"]) == (truth["received"], truth["resent"], truth["lost"],
                                                truth["dropped"])
    assert sc.board_dropped == len(sc.queue_dropped) > 0 and sc.truth.notes_dead > 0


@pytest.mark.parametrize("argv, expect", [
    (["--seconds", "5"], "--seconds: between 60 and 3600"),
    (["--seconds", "nan"], "--seconds: between 60 and 3600"),
    (["--seconds", "1e9"], "--seconds: between 60 and 3600"),
    (["--out", "FILE"], "cannot make the folder"),
])
def test_bad_demo_arguments_are_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                         argv: list[str], expect: str) -> None:
    from slipless.cli import main

    (tmp_path / "f").write_text("not a folder")
    argv = [str(tmp_path / "f") if a == "FILE" else a for a in argv]
    if "--out" not in argv:
        argv += ["--out", str(tmp_path / "out")]
    assert main(["demo", *argv]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and expect in err


# `--link slow-50ms`: a 50 ms connection interval without Data Length Extension
# (27-octet link-layer payloads; 251 with it: Bluetooth Core Specification v4.2)
# and six packets per event (common practice). The rig's data rate stays, so the
# board's queue drops frames all through the run and the mirror brings them back.
# Hand arithmetic for the capacity line: a 244-byte notification is 244 + 3 (ATT)
# + 4 (L2CAP) = 251 octets = 10 packets; 6 packets per 50 ms -> 12 notifications
# a second -> 12 x 244 = 2,928 B/s.
@pytest.fixture(scope="module")
def slow_demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, Path]:
    out = tmp_path_factory.mktemp("slow")
    console = Console(record=True, width=400)
    args = build_parser().parse_args(["demo", "--out", str(out), "--seconds", "60", "--seed", "2",
                                      "--link", "slow-50ms"])
    assert run_demo(args, console) == 0
    return console.export_text(), out


def test_slow_link_demo_numbers(slow_demo: tuple[str, Path]) -> None:
    text, out = slow_demo
    for line in [
        "board firmware: run 2, 1,740 frames built; its send queue dropped 1,129 (counted in "
        "STATUS) all through the run, the link being slower than the board, and more while the "
        "link stalled 17.9-19.5 s and was down 37.1-40.1 s",
        "link slow-50ms: 50 ms connection interval, no Data Length Extension (27-octet link-layer "
        "payloads), 6 packets per event; ATT MTU 247, so a 244-byte notification takes 10 packets",
        "      it carries at most 2,928 B/s of notifications; the board makes 5,053 B/s of frames",
        "      frames that got across waited a median 0.85 s in the board's full queues, so "
        "receive times and pings pin the board's clock only loosely",
        # MicroPython's _IRQ_CONNECTION_UPDATE units: 40 x 1.25 ms, 42 x 10 ms
        "      the board's stack told the firmware (_IRQ_CONNECTION_UPDATE, 2 times in 2 "
        "connections): interval 50 ms, latency 0, supervision timeout 420 ms",
        "radio: 53 notifications lost at the dead angle (200-236 deg), 1 elsewhere; 1 reconnection; "
        "recorder: 59 pings, 1,177 frames asked for again",
        "loss (radio only): 1,703 expected = 526 received + 421 recovered by resend + 0 from the "
        "mirror + 29 lost + 727 dropped on the board: closes",
        "      against the simulation: received 526, recovered by resend 421, lost 40, dropped 716: "
        "received and recovered by resend match, lost + dropped match (756) but not their split: "
        "radio losses inside the "
        "queue's drop windows look like drops",
        "      the board built 37 more after END: replies to the recorder's last commands, not "
        "frames of the run (SPEC 3.8)",
        "loss (with the mirror): 1,703 expected = 526 received + 421 recovered by resend + 756 from "
        "the mirror + 0 lost + 0 dropped on the board: closes",
        "      of the 1,129 frames the board's queue dropped, 393 came across when the recorder "
        "asked again; the mirror holds the other 736",
        "pulses: 12 found, 12 used",
    ]:
        assert line in text, line
    assert re.search(r"d \(field x rotation \(induction\)\): .* inside the 95% interval", text)
    from slipless.io import capture

    with (out / "run.slcap").open("rb") as f:
        links = [json.loads(r.payload) for r in capture.CaptureReader(f) if r.type == capture.EVENT]
    assert [e["mtu"] for e in links if e["event"] == "connected"] == [247, 247]  # MTU kept


def test_slow_link_clock_stays_inside_its_bound(slow_demo: tuple[str, Path]) -> None:
    # Every frame (SYNC replies too) waits in the full queue; the PING writes do not,
    # so the forward legs hold the clock: the wait does not become clock error, and
    # the bound is as wide as the receive times leave it (the truth is the scenario's).
    m = re.search(r"clock: skew ([-+]\d+\.\d\d) ppm \(simulated \+23\.00\); mapped time off by at "
                  r"most (\d+\.\d\d) ms over the run, inside the bound\s+\+-(\d+\.\d\d) ms", slow_demo[0])
    assert m, slow_demo[0]
    err_ms, bound_ms = float(m.group(2)), float(m.group(3))
    assert err_ms <= bound_ms
    assert err_ms < 100.0  # frames waited a median 0.85 s (the scenario line above)
    assert abs(float(m.group(1)) - 23.0) < 2000.0  # the receive times' envelope alone says -7,100


def test_bad_link_name_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from slipless.cli import main

    with pytest.raises(SystemExit) as exit_:  # argparse's choices: its own exit, status 2
        main(["demo", "--link", "dial-up", "--out", str(tmp_path)])
    assert exit_.value.code == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--link: invalid choice: 'dial-up'" in err
