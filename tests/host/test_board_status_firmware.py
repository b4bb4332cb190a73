"""`slipless board status` reports the board's firmware hash (SPEC 3.11) and, with
--firmware, compares it with the code files this laptop's `slipless flash` would
copy: the board's own firmware on the simulated hardware over bumble's virtual link
(test_board_control's bench), its code folder laid out from flash's real plan
(mpy-cross)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from test_board_control import CONFIG, Bench, home, one_line, run_cli  # noqa: F401

from slipless.board.files import firmware_dir
from slipless.board.flash import build_plan, firmware_hash, resolve_config


class CodeBench(Bench):
    """The bench's board, its code files in `root` (as flash lays them on a board)."""

    def __init__(self, root: Path | None) -> None:
        super().__init__(CONFIG)
        self.root = root

    async def open(self, spec: str) -> tuple[Any, Any]:
        out = await super().open(spec)
        self.vb.board.hw.code_root = None if self.root is None else str(self.root)
        return out


@pytest.fixture(scope="module")
def board_root(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, tuple[int, int, str]]:
    root = tmp_path_factory.mktemp("board")
    fw = firmware_dir()
    config, profile = resolve_config(fw, None, "esp32-devkitc")  # the bench board's profile
    plan = build_plan(fw, config, profile, tmp_path_factory.mktemp("build"))
    for it in plan:
        dest = root / it.dest.lstrip("/")
        dest.parent.mkdir(parents=True, exist_ok=True)
        dest.write_bytes(it.data)
    return root, firmware_hash(plan)


def test_status_compares_the_firmware(home, board_root, monkeypatch, capsys) -> None:  # noqa: F811
    root, (files, size, sha) = board_root
    assert run_cli(monkeypatch, CodeBench(root), ["status", "--firmware"]) == 0
    line = one_line(capsys.readouterr().out)
    assert f"firmware {sha} ({files} files) (same as this laptop's flash)" in line
    assert run_cli(monkeypatch, CodeBench(root), ["status", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert (doc["fw_sha"], doc["fw_files"], doc["fw_bytes"]) == (sha, files, size)
    assert doc["fw_match"] is None  # not asked to compare


def test_status_says_when_the_code_differs(home, board_root, monkeypatch, capsys,  # noqa: F811
                                           tmp_path: Path) -> None:
    root, _ = board_root
    other = tmp_path / "other"
    for p in root.rglob("*"):
        if p.is_file():
            dest = other / p.relative_to(root)
            dest.parent.mkdir(parents=True, exist_ok=True)
            dest.write_bytes(p.read_bytes())
    (other / "lib" / "extra.py").write_text("x = 1\n")  # a file flash did not write
    assert run_cli(monkeypatch, CodeBench(other), ["status", "--firmware"]) == 0
    assert "(differs from this laptop's flash)" in one_line(capsys.readouterr().out)


def test_status_of_a_board_without_code_files(home, monkeypatch, capsys) -> None:  # noqa: F811
    assert run_cli(monkeypatch, CodeBench(None), ["status"]) == 0
    assert "firmware: no code files" in one_line(capsys.readouterr().out)
