"""`slipless record` and `slipless pull` never destroy a recording: an existing
--out is refused before any radio or key is touched, with one line naming a
free name, and the file stays as it was."""

from __future__ import annotations

from pathlib import Path

import pytest

from slipless.cli import main
from slipless.cli.record import host_info


def one_line_error(capsys) -> str:
    err = capsys.readouterr().err
    assert err.startswith("slipless: error: ") and err.count("\n") == 1, err
    return err


@pytest.mark.parametrize("argv", [["record", "--insecure"], ["pull", "--link", "--insecure"],
                                  ["pull", "--port", "/dev/no-such-port"]])
def test_existing_out_is_refused_and_kept(tmp_path: Path, capsys, argv) -> None:
    old = tmp_path / "run1.slcap"
    old.write_bytes(b"an earlier run's bytes")
    (tmp_path / "run1-2.slcap").write_bytes(b"")
    assert main([*argv, "--out", str(old)]) == 2
    err = one_line_error(capsys)
    assert "never overwrites" in err and "run1-3.slcap" in err
    assert old.read_bytes() == b"an earlier run's bytes"


def test_out_in_a_missing_folder_is_one_line(tmp_path: Path, capsys) -> None:
    assert main(["record", "--insecure", "--out", str(tmp_path / "nope" / "run.slcap")]) == 2
    assert "does not exist" in one_line_error(capsys)


def test_capture_header_says_what_recorded_it() -> None:
    info = host_info()
    assert {"os", "os_release", "python", "packages"} <= set(info)
    assert "bleak" in info["packages"] and "bumble" in info["packages"]  # default dependencies


def test_no_bluetooth_leaves_no_capture_behind(tmp_path: Path, capsys, monkeypatch) -> None:
    """bleak finds no system bus (no BlueZ here: the bus address is a path that does
    not exist): one line, and no empty capture left to block the next try."""
    monkeypatch.setenv("DBUS_SYSTEM_BUS_ADDRESS", f"unix:path={tmp_path / 'no-bus'}")
    out = tmp_path / "run.slcap"
    assert main(["record", "--insecure", "--duration", "1", "--out", str(out)]) == 2
    err = one_line_error(capsys)
    assert "Bluetooth is not available" in err and "no capture kept" in err
    assert not out.exists()
