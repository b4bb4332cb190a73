"""`slipless board find | status | stop | ping` end to end over a real BLE stack:
the board's own firmware (board.py, link.py, commands.py on the simulated
hardware layer, MicroPython's `bluetooth` API on a bumble Device) and the
command line on the bumble back end, over bumble's virtual link, in simulated
time (sim.virtual_time). The only stand-in is where the command line opens its
bumble transport: it gets the laptop Device of the virtual pair instead of a
USB dongle (none can exist here). The virtual pair's laptop controller reports
scan responses as a real controller does (sim/ble_board._LaptopController)."""

from __future__ import annotations

import asyncio
import json
from pathlib import Path
from typing import Any

import pytest

from slipless import cli
from slipless.cli import board as control_cli
from slipless.protocol import wire
from slipless.record import keys
from slipless.sim import ble_board, virtual_time

KEY_HEX = bytes(range(32)).hex()  # test key (common practice: any 32 bytes)
BOARD_ID = 21
CONFIG: dict[str, Any] = {
    "board_id": BOARD_ID, "name": "rotor-ctl",
    "streams": [{"id": 0, "name": "cap_amp", "unit": "V", "source": "adc0", "rate_hz": 200,
                 "type": "h", "scale": 0.001, "offset": 0.0}],
    "coil": {"program": [[1, 5000], [0, 1000]], "repeat": 100, "max_on_ms": 5000,
             "max_duty": 0.5, "duty_window_ms": 60000, "link_timeout_ms": 3000},
    "link": {"status_every_ms": 500, "descriptor_every_ms": 2000, "ring_frames": 64,
             "queue_frames": 16},
}
POLL_S = 0.001  # the board's main loop turns once per simulated millisecond
START_S = 1000.0  # the laptop's monotonic clock when the simulation starts


def keyed(key_hex: str = KEY_HEX) -> dict[str, Any]:
    cfg = json.loads(json.dumps(CONFIG))
    cfg["link"]["key_hex"] = key_hex
    return cfg


class Bench:
    """What the fake transport opener built: the board, for the test to inspect."""

    def __init__(self, config: dict[str, Any] | None, config_file: Path | None = None,
                 running: bool = False, deaf: bool = False) -> None:
        self.config = config
        self.config_file = config_file
        self.running = running
        self.deaf = deaf
        self.vb: Any = None
        self.hw_started_s = 0.0  # loop time when the board's clock started (its time 0)

    async def open(self, spec: str) -> tuple[Any, Any]:
        laptop, board_dev = ble_board.virtual_pair()
        await laptop.power_on()
        if self.config is None:  # nobody in range
            async def close_empty() -> None:
                return None
            return laptop, close_empty
        await board_dev.power_on()
        ble_board.firmware_on_path()
        from simhw import SimHW

        loop = asyncio.get_running_loop()
        self.hw_started_s = loop.time()
        hw = SimHW(now_us=lambda: round(loop.time() * 1e6))  # board time follows the loop's
        hw.config_path = str(self.config_file) if self.config_file else None
        vb = self.vb = ble_board.VirtualBoard(board_dev, self.config, hw=hw)
        if self.deaf:
            vb.board.link.on_command_bytes = lambda data: None  # a board that never answers
        if self.running:
            assert vb.board.start(0, "bench") == 0 and vb.board.coil.state == 1
        stop = asyncio.Event()
        task = loop.create_task(vb.run_paced(stop, POLL_S))

        async def close() -> None:
            stop.set()
            await task
            vb.close()

        return laptop, close


@pytest.fixture
def home(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("SLIPLESS_HOME", str(tmp_path / "home"))
    return tmp_path


def run_cli(monkeypatch: pytest.MonkeyPatch, bench: Bench, argv: list[str]) -> int:
    monkeypatch.setattr(control_cli, "open_bumble", bench.open)
    monkeypatch.setattr(control_cli, "run_async",
                        lambda coro: virtual_time.run(coro, start_s=START_S))
    return cli.main(["board", *argv, "--backend", "bumble"])


def one_line(text: str) -> str:
    lines = text.strip().splitlines()
    assert len(lines) == 1, lines
    return lines[0]


# ---- find -------------------------------------------------------------------------------
def test_find_lists_the_board(monkeypatch, capsys) -> None:
    assert run_cli(monkeypatch, Bench(CONFIG), ["find", "--seconds", "2"]) == 0
    line = one_line(capsys.readouterr().out)
    # bumble's virtual controller reports every advertisement at -50 dBm (its own value)
    assert line.split() == ["rotor-ctl", "F1:F1:F1:F1:F1:F1", "-50", "dBm"]
    assert run_cli(monkeypatch, Bench(CONFIG), ["find", "--seconds", "2", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["boards"] == [{"name": "rotor-ctl", "address": "F1:F1:F1:F1:F1:F1",
                              "rssi_dbm": -50}]


def test_find_nothing_in_range(monkeypatch, capsys) -> None:
    assert run_cli(monkeypatch, Bench(None), ["find", "--seconds", "1"]) == 2
    err = one_line(capsys.readouterr().err)
    assert err.startswith("slipless: error: no board advertising the slipless service heard")


# ---- status -------------------------------------------------------------------------------
def flashed(tmp: Path, given: dict[str, Any], monkeypatch: pytest.MonkeyPatch) -> tuple[Path, dict]:
    """The user's config file, and the /config.json `slipless flash` makes of it (its own
    build_plan, mpy-cross left out: only the config item is used)."""
    from slipless.board import flash
    from slipless.board.files import firmware_dir

    user = tmp / "rotor.json"
    user.write_text(json.dumps(given, indent=2))
    config, profile = flash.resolve_config(firmware_dir(), user, None)
    flash.ensure_key(config)
    monkeypatch.setattr(flash, "compile_module", lambda src, arch, out: b"")
    plan = flash.build_plan(firmware_dir(), config, profile, tmp)
    board_file = tmp / "board-config.json"
    board_file.write_bytes(next(i.data for i in plan if i.dest == "/config.json"))
    return user, config


def test_status_with_the_right_key(home, monkeypatch, capsys) -> None:
    user, config = flashed(home, CONFIG, monkeypatch)  # flash gives the board a new key
    keys.save_key(BOARD_ID, config["link"]["key_hex"])
    bench = Bench(config, home / "board-config.json")
    assert run_cli(monkeypatch, bench, ["status", "--config", str(user)]) == 0
    line = one_line(capsys.readouterr().out)
    # simhw.py's housekeeping: 3900 mV, 25.00 degC, 100000 B free
    assert line.startswith("rotor-ctl (board 21, fw 0.3.0, F1:F1:F1:F1:F1:F1): ")
    for part in ("battery 3.90 V", "25.0 °C", "100,000 B free RAM", f"(same as {user})",
                 "key ok", "idle (run id 1)"):
        assert part in line, (part, line)
    # the board hashed its file; the laptop the same text flash wrote
    import hashlib
    sha = hashlib.sha256((home / "board-config.json").read_bytes()).hexdigest()[:16]
    assert f"config {sha} " in line
    # the user's file changed since: it no longer matches
    changed = dict(CONFIG, name="rotor-other")
    user.write_text(json.dumps(changed))
    assert run_cli(monkeypatch, Bench(config, home / "board-config.json"),
                   ["status", "--config", str(user), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["config_match"] is False and doc["config_sha"] == sha
    assert doc["key_check"] == "ok" and doc["battery_v"] == 3.9 and doc["board"] == BOARD_ID
    assert doc["flags"] == ["keyed"] and doc["running"] is False


def test_status_with_a_wrong_key(home, monkeypatch, capsys) -> None:
    wrong = keys.save_key(99, "ab" * 32)  # another board's key
    assert run_cli(monkeypatch, Bench(keyed()), ["status", "--key", str(wrong)]) == 0
    line = one_line(capsys.readouterr().out)
    assert "key refused: bad_tag" in line and "battery 3.90 V" in line  # still read, unsealed


def test_status_board_without_key_and_insecure(home, monkeypatch, capsys) -> None:
    keys.save_key(BOARD_ID, KEY_HEX)  # the laptop holds a key, the board has none
    assert run_cli(monkeypatch, Bench(CONFIG), ["status"]) == 0
    assert "key board has no key" in one_line(capsys.readouterr().out)
    assert run_cli(monkeypatch, Bench(keyed()), ["status", "--insecure"]) == 0
    line = one_line(capsys.readouterr().out)
    assert "key not checked (--insecure)" in line and "config none" in line


def test_status_of_a_board_that_does_not_answer(home, monkeypatch, capsys) -> None:
    rc = run_cli(monkeypatch, Bench(CONFIG, deaf=True), ["status", "--timeout", "1"])
    assert rc == 2
    assert one_line(capsys.readouterr().err) == (
        "slipless: error: the board did not answer info within 1 s")


def test_status_no_board(home, monkeypatch, capsys) -> None:
    assert run_cli(monkeypatch, Bench(None), ["status", "--timeout", "2"]) == 2
    err = one_line(capsys.readouterr().err)
    assert "no board advertising the slipless service found in 2 s" in err


# ---- stop ---------------------------------------------------------------------------------
def test_stop_turns_the_coil_off(home, monkeypatch, capsys) -> None:
    keys.save_key(BOARD_ID, KEY_HEX)
    bench = Bench(keyed(), running=True)
    assert run_cli(monkeypatch, bench, ["stop"]) == 0
    out = capsys.readouterr().out
    assert out.splitlines()[0] == ("board 21 (rotor-ctl): stop acknowledged (sealed); run 2 "
                                   "ended; the board says its coil is off")
    assert "rotor may still be turning" in out
    board, hw = bench.vb.board, bench.vb.hw
    assert not board.running and board.coil.state == 0
    assert (hw.in1.v, hw.in2.v, hw.enable.v) == (0, 0, 0)  # the H-bridge pins are low
    assert board.auth.last == 1  # one sealed command, accepted


def test_stop_refused_without_the_key(home, monkeypatch, capsys) -> None:
    bench = Bench(keyed(), running=True)
    assert run_cli(monkeypatch, bench, ["stop"]) == 2
    err = one_line(capsys.readouterr().err)
    assert "board 21 has a key and no key for board 21 on this laptop" in err
    assert "coil is ON" in err
    assert bench.vb.board.running  # nothing was sent that could stop it
    wrong = keys.save_key(99, "cd" * 32)
    assert run_cli(monkeypatch, Bench(keyed(), running=True), ["stop", "--key", str(wrong)]) == 2
    assert "refused stop (auth bad_tag)" in one_line(capsys.readouterr().err)


def test_stop_an_open_board_insecure(home, monkeypatch, capsys) -> None:
    bench = Bench(CONFIG, running=True)
    assert run_cli(monkeypatch, bench, ["stop", "--insecure"]) == 0
    assert "stop acknowledged (unsealed)" in capsys.readouterr().out
    assert bench.vb.board.coil.state == 0


# ---- ping ---------------------------------------------------------------------------------
def test_ping_measures_the_offset(home, monkeypatch, capsys) -> None:
    bench = Bench(CONFIG)
    assert run_cli(monkeypatch, bench, ["ping", "--count", "6", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert len(doc["pings"]) == 6
    truth = -bench.hw_started_s  # board time 0 when its clock started: board - laptop clock
    for p in doc["pings"]:
        # RFC 5905 section 8: the true offset lies within offset +- delay / 2 (plus the
        # board's 1 us tick and the loop's float seconds)
        assert abs(p["offset_s"] - truth) <= p["round_trip_s"] / 2 + 2e-6, p
        assert 0 <= p["round_trip_s"] < 0.1
    assert abs(doc["offset_s"] - truth) <= doc["offset_bound_s"] + 2e-6
    assert run_cli(monkeypatch, Bench(CONFIG), ["ping", "--count", "2"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0] == "rotor-ctl (board 21, F1:F1:F1:F1:F1:F1): 2 pings"
    assert "round trip" in lines[1] and lines[-1].startswith("offset ")


# ---- bad options --------------------------------------------------------------------------
@pytest.mark.parametrize("argv", [
    ["board", "ping", "--count", "0"],
    ["board", "find", "--seconds", "-1"],
    ["board", "find", "--seconds", "soon"],
    ["board", "status", "--key", "k", "--insecure"],
    ["board", "stop", "--backend", "serial"],
    ["board"],
])
def test_bad_options(argv, capsys) -> None:
    with pytest.raises(SystemExit) as exc:
        cli.main(argv)
    assert exc.value.code == 2
    assert one_line(capsys.readouterr().err).startswith("slipless: error: ")


def test_bad_key_and_config_files(home, capsys) -> None:
    assert cli.main(["board", "status", "--key", str(home / "missing.key")]) == 2
    assert one_line(capsys.readouterr().err).endswith("missing.key: key file not found")
    bad = home / "bad.json"
    bad.write_text('{"board_id": 0}')
    assert cli.main(["board", "status", "--config", str(bad), "--insecure"]) == 2
    assert "board_id: must be between 1 and 65534" in one_line(capsys.readouterr().err)


def test_info_vector_fields() -> None:
    """The decoder reads vector 27's INFO frames back into the fields it was built from."""
    from collect_sink import CollectSink

    from slipless.decode.decoder import Decoder

    vectors = Path(__file__).resolve().parents[2] / "protocol" / "vectors"
    case = json.loads((vectors / "27-info.json").read_text())
    got: list[dict[str, Any]] = []

    class Sink(CollectSink):
        def reply(self, run: Any, seq: int, kind: int, fields: dict[str, Any]) -> None:
            if kind == wire.INFO:
                got.append(fields)

    dec = Decoder(Sink())
    dec.feed((vectors / "27-info.bin").read_bytes())
    dec.finish()
    want = [o["args"] for o in case["ops"] if o["op"] == "info"]
    for g, w in zip(got, want, strict=True):
        assert (g["fw_major"], g["fw_minor"], g["fw_patch"]) == tuple(w["fw"])
        assert {k: g[k] for k in w if k != "fw"} == {k: v for k, v in w.items() if k != "fw"}
