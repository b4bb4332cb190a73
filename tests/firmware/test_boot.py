"""main.py boots on stand-ins for `machine` and `bluetooth` (mocks: the
WebAssembly port has neither): coil off before anything, bad config refused
with the last good one kept, watchdog armed, the loop running."""

from __future__ import annotations

import json
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]


def boot(micropython, config_text: str, good: dict | None = None) -> list[str]:
    files = {
        "/lib/machine.py": (HERE / "sim_machine.py").read_text(),
        "/lib/bluetooth.py": (HERE / "sim_bluetooth.py").read_text(),
        "/profile.json": (REPO / "firmware" / "profiles" / "pico-w.json").read_text(),
        "/config.json": config_text,
        "/main.py": (REPO / "firmware" / "main.py").read_text(),
    }
    if good is not None:
        files["/config.good.json"] = json.dumps(good)
    code = """
import sys, machine
sys.path.append('/')
try:
    exec(open('/main.py').read())
except KeyboardInterrupt:
    pass
for entry in machine.LOG[:4]:
    print('LOG', entry)
print('WDT', [e for e in machine.LOG if e[0] == 'wdt'])
print('LAST', [e for e in machine.LOG if e[0] == 'pin'][-3:])
"""
    return micropython(code, files=files).strip().split("\n")


def test_boot_drives_coil_off_first(micropython) -> None:
    out = boot(micropython, json.dumps({"board_id": 4, "profile": "pico-w"}))
    # pico-w profile: in1 = 13, in2 = 14, enable = 15 (firmware/profiles/pico-w.json)
    first = [line for line in out if line.startswith("LOG")]
    assert first[:3] == ["LOG ('pin', 13, 0)", "LOG ('pin', 14, 0)", "LOG ('pin', 15, 0)"]
    assert any(line.startswith("WDT [('wdt', 8000)]") for line in out)
    assert not any("bad config" in line for line in out)


def test_bad_config_keeps_last_good(micropython) -> None:
    out = boot(micropython, '{"board_id": "seven"}', good={"board_id": 9})
    assert any("bad config, using the last good one: config.board_id: must be a whole number"
               in line for line in out)
    last = [line for line in out if line.startswith("LAST")][0]
    assert "15, 1" not in last  # the coil was never enabled
