"""`slipless flash`: refuses bad input before touching a board, and flashes a
real MicroPython (the WebAssembly port behind a pseudo-terminal, driven by the
real mpremote) end to end. No mocks."""

from __future__ import annotations

import json
import os
import select
import shutil
import subprocess
import sys
import tempfile
import tty
from pathlib import Path

import pytest
from rich.console import Console

from slipless.board import flash
from slipless.cli import main

REPO = Path(__file__).resolve().parents[2]
FIRMWARE = REPO / "firmware"
BRIDGE = REPO / "tests" / "mpy" / "repl_bridge.mjs"
EXAMPLE = FIRMWARE / "config.example.json"


def config_for(tmp_path: Path, profile: str, **changes) -> Path:
    cfg = json.loads(EXAMPLE.read_text())
    cfg["profile"] = profile
    cfg.update(changes)
    path = tmp_path / f"{profile}.json"
    path.write_text(json.dumps(cfg))
    return path


def one_line_error(capsys) -> str:
    err = capsys.readouterr().err
    assert err.startswith("slipless: error: ") and err.count("\n") == 1, err
    return err


@pytest.fixture(autouse=True)
def slipless_home(tmp_path, monkeypatch) -> Path:
    home = tmp_path / "home"
    monkeypatch.setenv("SLIPLESS_HOME", str(home))
    return home


# ---- refused before the board is touched --------------------------------------


def test_dry_run_prints_plan_and_touches_nothing(tmp_path, capsys, monkeypatch, slipless_home):
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path / "t"))  # to see what is left behind
    (tmp_path / "t").mkdir()
    cfg = config_for(tmp_path, "pico-w")
    rc = main(["flash", "--port", "/dev/no-such-port", "--config", str(cfg), "--dry-run"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "dry run: nothing copied" in out
    for dest in ("/lib/wire.mpy", "/lib/config.mpy", "/config.json", "/profile.json"):
        assert dest in out
    assert "firmware/config.py" in out and "protocol/wire.py" in out
    assert not any((tmp_path / "t").iterdir())  # compiled files were cleaned up
    assert not slipless_home.exists()  # no first-flash marker
    assert not list(FIRMWARE.glob("*.mpy")) and not list((REPO / "protocol").glob("*.mpy"))


def test_dry_run_needs_no_port(tmp_path, capsys):
    rc = main(["flash", "--config", str(config_for(tmp_path, "esp32-devkitc")), "--dry-run"])
    assert rc == 0
    assert "flash plan for esp32-devkitc (dry run: nothing copied)" in capsys.readouterr().out


def test_flash_without_port_is_one_line(tmp_path, capsys):
    assert main(["flash", "--config", str(config_for(tmp_path, "pico-w"))]) == 2
    assert "--port" in one_line_error(capsys)


def test_failed_flash_keeps_the_key_the_board_holds(tmp_path, capsys, slipless_home):
    """No board answered: the laptop's key for that board must be the one it had."""
    from slipless.record import keys

    held = keys.save_key(1, "ab" * 32, slipless_home / "keys")
    rc = main(["flash", "--port", str(tmp_path / "no-such-port"), "--config",
               str(config_for(tmp_path, "pico-w"))])
    assert rc == 2
    one_line_error(capsys)
    assert held.read_text() == "ab" * 32 + "\n"
    assert sorted(p.name for p in held.parent.iterdir()) == ["board-1.key"]


def test_plan_contents(tmp_path):
    config, profile = flash.resolve_config(FIRMWARE, config_for(tmp_path, "pico-w"), None)
    plan = flash.build_plan(FIRMWARE, config, profile, tmp_path)
    dests = [it.dest for it in plan]
    modules = [p.stem for p in FIRMWARE.glob("*.py")
               if p.name not in ("main.py", "boot.py") + flash.TEST_ONLY]
    assert sorted(d for d in dests if d.startswith("/lib/")) == sorted(
        f"/lib/{m}.mpy" for m in modules + ["wire"])
    assert json.loads(next(it.data for it in plan if it.dest == "/config.json")) == config
    assert json.loads(next(it.data for it in plan if it.dest == "/profile.json"))["name"] == "pico-w"
    if (FIRMWARE / "main.py").is_file():
        assert dests[-1] == "/main.py"  # written last
    # .mpy header: "M", version, then flags (common practice: mpy-cross output starts with b"M")
    assert all(it.data[:1] == b"M" for it in plan if it.dest.endswith(".mpy"))


def test_profile_defaults(tmp_path):
    config, profile = flash.resolve_config(FIRMWARE, None, None)
    assert profile["name"] == config["profile"] == "esp32-devkitc"
    config, profile = flash.resolve_config(FIRMWARE, None, "pico2-w")
    assert profile["name"] == config["profile"] == "pico2-w"
    # A config without "profile" goes to the board it is flashed to.
    cfg = json.loads(EXAMPLE.read_text())
    del cfg["profile"]
    (tmp_path / "c.json").write_text(json.dumps(cfg))
    config, profile = flash.resolve_config(FIRMWARE, tmp_path / "c.json", "pico-w")
    assert profile["name"] == config["profile"] == "pico-w"


@pytest.mark.parametrize("make_args, words", [
    (lambda t: ["--config", str(t / "missing.json")], "missing.json: config file not found"),
    (lambda t: ["--board", "nope"], "unknown board profile 'nope' (known: esp32-devkitc, pico-w, pico2-w)"),
    (lambda t: ["--config", str(config_for(t, "nope"))], "config.profile: unknown board profile 'nope'"),
    (lambda t: ["--config", str(config_for(t, "pico-w", board_id=0))], "config.board_id: must be between"),
    (lambda t: ["--config", str(config_for(t, "pico-w", streams=[
        {"id": 0, "name": "x", "unit": "", "source": "adc9", "rate_hz": 10, "type": "h",
         "scale": 1.0, "offset": 0.0}]))], "config.streams[0].source: 'adc9' is not a channel"),
    (lambda t: ["--config", str(config_for(t, "pico-w")), "--board", "esp32-devkitc"],
     "config.profile is 'pico-w' but --board is 'esp32-devkitc'"),
    (lambda t: ["--board", "pico-w", "--port", str(t / "no-such-port")],
     "not found: is the board plugged in?"),
], ids=["missing-config", "unknown-board", "unknown-config-profile", "bad-field", "bad-source",
        "board-disagrees", "missing-port"])
def test_bad_input_is_one_line_exit_2(tmp_path, capsys, make_args, words):
    args = make_args(tmp_path)
    if "--port" not in args:
        args += ["--port", "/dev/no-such-port"]
    assert main(["flash", *args]) == 2
    assert words in one_line_error(capsys)


def test_bad_config_json_from_the_real_entry_point(tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    proc = subprocess.run([sys.executable, "-m", "slipless", "flash", "--port", "/dev/x", "--config",
                           str(bad)], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert proc.stderr == (f"slipless: error: {bad}: not valid JSON: line 1 column 2: Expecting "
                           "property name enclosed in double quotes\n")


def test_compile_failure_is_a_clear_error(tmp_path):
    src = tmp_path / "broken.py"
    src.write_text("x = 1\ndef f(:\n    pass\n")
    with pytest.raises(flash.InputError) as exc:
        flash.compile_module(src, "armv6m", tmp_path)
    msg = str(exc.value)
    assert "mpy-cross could not compile" in msg and "broken.py" in msg and "SyntaxError" in msg
    assert "\n" not in msg


def test_unopenable_port_is_one_line(tmp_path, capsys):
    not_a_tty = tmp_path / "regular-file"
    not_a_tty.write_bytes(b"")
    assert main(["flash", "--port", str(not_a_tty), "--board", "pico-w"]) == 2
    assert "failed to access" in one_line_error(capsys)


def test_cautions_shown_once_per_laptop(slipless_home):
    first, second = Console(record=True, width=200), Console(record=True, width=200)
    from slipless.cli.flash import show_cautions_once

    show_cautions_once(first)
    show_cautions_once(second)
    text = first.export_text()
    for words in ("balance", "guard", "limit its speed", "stop it fully", "fuse", "contain",
                  "flyback diode or a TVS", "H-bridge", "heating", "coil off at boot",
                  "Local codes", "licensed professional practice"):
        assert words in text
    again = second.export_text()
    assert "flyback" not in again and "still apply" in again
    assert (slipless_home / "flashed-before").is_file()


# ---- end to end: real mpremote, real MicroPython behind a pseudo-terminal -------


class PtyBoard:
    """The WebAssembly MicroPython REPL on the master side of a pty; `path` is
    the slave, which mpremote opens as it would a board's USB serial port."""

    def __init__(self, tmp: Path):
        node = shutil.which("node")
        if node is None or not BRIDGE.is_file():
            pytest.fail("node or tests/mpy/repl_bridge.mjs missing: run `make setup`", pytrace=False)
        master, self._slave = os.openpty()
        tty.setraw(self._slave)  # no echo or line editing between mpremote and the "board"
        self.path = os.ttyname(self._slave)
        self._log = open(tmp / "bridge-stderr.txt", "w+b")  # noqa: SIM115 - closed in close()
        self.proc = subprocess.Popen([node, str(BRIDGE)], stdin=master, stdout=master,
                                     stderr=self._log, cwd=REPO)
        os.close(master)
        # Wait for the banner; the slave stays open here so the master never
        # sees a hang-up between mpremote runs.
        seen = b""
        while b">>> " not in seen:
            ready, _, _ = select.select([self._slave], [], [], 15)
            if not ready:
                self.close()
                pytest.fail(f"REPL bridge did not start: {seen!r} {self.stderr()}", pytrace=False)
            seen += os.read(self._slave, 4096)

    def stderr(self) -> str:
        self._log.seek(0)
        return self._log.read().decode("utf-8", "replace")

    def exec(self, code: str) -> str:
        proc = subprocess.run([sys.executable, "-m", "mpremote", "connect", self.path, "exec", code],
                              capture_output=True, text=True, timeout=30, stdin=subprocess.DEVNULL)
        assert proc.returncode == 0, proc.stdout + proc.stderr + self.stderr()
        return proc.stdout

    def close(self) -> None:
        self.proc.kill()
        self.proc.wait(timeout=10)
        os.close(self._slave)
        self._log.close()


@pytest.fixture(scope="module")
def flashed(tmp_path_factory):
    """One flash of pico-w onto a fresh board; tests then inspect that board."""
    tmp = tmp_path_factory.mktemp("flash")
    board = PtyBoard(tmp)
    try:
        cfg = config_for(tmp, "pico-w")
        from slipless.record import keys

        keys.save_key(1, "cd" * 32, tmp / "home" / "keys")  # a key from an earlier flash
        env = dict(os.environ, SLIPLESS_HOME=str(tmp / "home"))
        proc = subprocess.run([sys.executable, "-m", "slipless", "flash", "--port", board.path,
                               "--board", "pico-w", "--config", str(cfg)],
                              capture_output=True, text=True, timeout=90, env=env)
        yield board, proc, cfg, tmp
    finally:
        board.close()


def test_flash_end_to_end(flashed):
    board, proc, cfg, tmp = flashed
    assert proc.returncode == 0, proc.stdout + proc.stderr + board.stderr()
    assert proc.stderr == ""
    assert "all sha256 verified" in proc.stdout
    assert "Safety cautions" in proc.stdout and "flyback" in proc.stdout  # first flash here
    assert (tmp / "home" / "flashed-before").is_file()

    config, profile = flash.resolve_config(FIRMWARE, cfg, "pico-w")
    key_file = tmp / "home" / "keys" / f"board-{config['board_id']}.key"
    assert key_file.stat().st_mode & 0o777 == 0o600  # the laptop's copy: only the user reads it
    assert key_file.parent.stat().st_mode & 0o777 == 0o700
    config["link"]["key_hex"] = key_file.read_text().strip()  # flash gave the board a new key
    assert len(config["link"]["key_hex"]) == 64
    old = list(key_file.parent.glob("board-1.old-*.key.old"))  # the earlier key is kept aside
    assert len(old) == 1 and old[0].read_text() == "cd" * 32 + "\n", proc.stdout
    assert old[0].stat().st_mode & 0o777 == 0o600
    assert "is kept as" in proc.stdout and "bluetoothctl remove" in proc.stdout
    plan = flash.build_plan(FIRMWARE, config, profile, tmp)  # same bytes: compiling is deterministic
    code = f"import os\nfor p in {[it.dest for it in plan]!r}:\n    print(p, os.stat(p)[6])"
    sizes = dict(line.split() for line in board.exec(code).splitlines())
    assert {d: int(n) for d, n in sizes.items()} == {it.dest: len(it.data) for it in plan}

    out = board.exec("import wire, json\nprint(wire.__file__)\n"
                     "print(json.load(open('/config.json'))['profile'])").split()
    assert out == ["/lib/wire.mpy", "pico-w"]


def test_verify_names_a_changed_file(flashed, tmp_path):
    board, proc, cfg, tmp = flashed
    assert proc.returncode == 0
    config, profile = flash.resolve_config(FIRMWARE, cfg, "pico-w")
    config["link"]["key_hex"] = (tmp / "home" / "keys" / "board-1.key").read_text().strip()
    plan = flash.build_plan(FIRMWARE, config, profile, tmp_path)
    flash.verify(flash.Board(board.path), plan)  # as flashed: passes
    board.exec("f = open('/profile.json', 'ab')\nf.write(b' ')\nf.close()")
    with pytest.raises(flash.FlashError, match=r"verify: /profile.json on the board differs"):
        flash.verify(flash.Board(board.path), plan)


def test_silent_board_times_out_with_one_line(tmp_path, capsys, monkeypatch):
    # A port that opens but never answers (a pty with nothing behind it).
    master, slave = os.openpty()
    try:
        tty.setraw(slave)
        monkeypatch.setattr(flash, "TIMEOUT_S", 2.0)  # not a mock: the real timeout, shortened
        assert main(["flash", "--port", os.ttyname(slave), "--board", "pico-w"]) == 2
        assert "board did not answer within 2 s" in one_line_error(capsys)
    finally:
        os.close(master)
        os.close(slave)
