"""A capture of the simulated rig played back into the live view, and the
view riding along a recording over bumble's virtual link.

The replay runs in simulated time (sim.virtual_time) so its pacing is checked
exactly, whatever the machine's load. What the view counts is held against
the offline decode of the same capture (slipless.open), and its alarms
against what the scenario provokes (a stalled link that overflows the board's
send queue, a link that goes silent and drops).
"""

from __future__ import annotations

import asyncio
from pathlib import Path

import pytest

from slipless.cli import main
from slipless.live.replay import Replay
from slipless.live.state import LiveState
from slipless.run import open_run
from slipless.sim import virtual_time
from slipless.sim.scenario import ScenarioConfig, build


@pytest.fixture(scope="module")
def scenario(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    return build(tmp_path_factory.mktemp("live"), ScenarioConfig(seed=3, seconds=60))


def _replay(capture: Path, speed: float, every_s: float = 0.25) -> tuple[LiveState, Replay, list]:
    """Play in simulated time, taking a snapshot every `every_s` (as the page would)."""
    state = LiveState()
    replay = Replay(capture, state, speed=speed, clock=lambda: asyncio.get_running_loop().time())
    seen: list[tuple[float, int, dict]] = []

    async def go() -> None:
        job = asyncio.ensure_future(replay.run())
        while not job.done():
            await asyncio.sleep(every_s)
            seen.append((asyncio.get_running_loop().time(), replay.now_ns(),
                         state.snapshot(replay.now_ns())))
        await job

    virtual_time.run(go())
    return state, replay, seen


def test_replay_counts_what_the_offline_decode_counts(scenario) -> None:  # type: ignore[no-untyped-def]
    state, replay, _ = _replay(scenario.capture, speed=20.0)
    run = open_run([scenario.capture])
    decoded = run.runs  # (board, run) -> RunState
    for key, r in state.runs.items():
        assert r.received == decoded[key].received and r.samples == decoded[key].samples
    snap = state.snapshot(replay.now_ns())
    assert snap["totals"]["frames"] == sum(r.received for r in decoded.values())
    assert snap["link"]["state"] == "ended"  # END came, then the recorder hung up


def test_replay_keeps_the_capture_pace(scenario) -> None:  # type: ignore[no-untyped-def]
    """At speed 20 the capture's time runs 20 times the (simulated) wall clock."""
    _, replay, seen = _replay(scenario.capture, speed=20.0)
    (t0, n0, _), (t1, n1, _) = seen[2], seen[-3]
    assert (n1 - n0) / 1e9 / (t1 - t0) == pytest.approx(20.0, rel=1e-6)
    span_s = (replay.last_ns - replay.first_ns) / 1e9
    assert seen[-1][0] == pytest.approx(span_s / 20.0, abs=0.5)


def test_replay_raises_the_alarms_the_scenario_provokes(scenario) -> None:  # type: ignore[no-untyped-def]
    state, _, seen = _replay(scenario.capture, speed=20.0)
    raised = {a["id"]: a for _, _, snap in seen for a in snap["alarms"]}
    assert any(k.startswith("dropped.") for k in raised), raised.keys()  # the stall's overflow
    assert "link_down" in raised or "link_quiet" in raised  # the silent, dropped link
    drops = [b["dropped"] for b in seen[-1][2]["boards"]]
    assert max(drops) == scenario.board_dropped > 0
    assert not any(a["active"] for a in seen[-1][2]["alarms"] if a["id"] == "link_down")


def test_watch_command_in_the_terminal(scenario, capsys: pytest.CaptureFixture[str]) -> None:  # type: ignore[no-untyped-def]
    assert main(["watch", str(scenario.capture), "--speed", "0", "--exit-at-end",
                 "--terminal"]) == 0
    out = capsys.readouterr().out
    assert "played" in out and "cap_amp" in out and "boards" in out and "loss by rotor angle" in out


@pytest.mark.parametrize("args, says", [
    (["watch", "/nonexistent.slcap"], "nonexistent"),
    (["watch", "{raw}"], "capture"),
    (["watch", "{cap}", "--speed", "-1"], "--speed"),
    (["watch", "{cap}", "--window", "0"], "--window"),
    (["watch", "{cap}", "--port", "70000"], "--port"),
])
def test_watch_refuses_bad_input_in_one_line(scenario, tmp_path: Path, args: list[str], says: str,  # type: ignore[no-untyped-def]
                                             capsys: pytest.CaptureFixture[str]) -> None:
    raw = tmp_path / "raw.bin"
    raw.write_bytes(b"\x01\x02\x00" * 100)
    argv = [a.format(raw=raw, cap=scenario.capture) for a in args]
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("slipless: error:") and says in err and "\n" not in err


def test_record_watch_bad_option_writes_no_capture(tmp_path: Path,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "run.slcap"
    assert main(["record", "--out", str(out), "--insecure", "--watch",
                 "--watch-battery-low", "-3"]) == 2
    assert "--watch-battery-low" in capsys.readouterr().err and not out.exists()
