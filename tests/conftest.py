# ==== MicroPython board runtime (tests/mpy/run.mjs) ==========================
# Board code is tested on real MicroPython (the WebAssembly port from
# node_modules), not on CPython, so integer, struct and ticks semantics are the
# board's own. Everything in this section belongs together; add other shared
# fixtures below the END marker.
import json
import shutil
import subprocess
from pathlib import Path

import pytest

REPO_ROOT = Path(__file__).resolve().parent.parent
_RUNNER = REPO_ROOT / "tests" / "mpy" / "run.mjs"
_PORT = REPO_ROOT / "node_modules" / "@micropython" / "micropython-webassembly-pyscript" / "micropython.mjs"


def _board_files() -> dict[str, Path]:
    """Board install path -> source file, for everything the board runs."""
    files: dict[str, Path] = {}
    firmware = REPO_ROOT / "firmware"
    if firmware.is_dir():
        for src in sorted(firmware.rglob("*.py")):
            files["/lib/" + src.relative_to(firmware).as_posix()] = src
    wire = REPO_ROOT / "protocol" / "wire.py"
    if wire.is_file():
        # The board and the host share one wire-format module.
        files["/lib/wire.py"] = wire
    return files


BOARD_FILES: dict[str, Path] = _board_files()


class MicroPythonError(AssertionError):
    """Uncaught exception (or runner failure) inside MicroPython.

    str() is the traceback, followed by whatever the code printed first.
    """

    def __init__(self, traceback: str, stdout: str = ""):
        super().__init__(traceback)
        self.traceback = traceback
        self.stdout = stdout

    def __str__(self) -> str:
        if not self.stdout:
            return self.traceback
        return f"{self.traceback}\n--- stdout before the error ---\n{self.stdout}"


class MicroPythonRunner:
    """Callable returned by the `micropython` fixture; one node process per call."""

    # Exposed here so tests need not import conftest.
    Error = MicroPythonError
    BOARD_FILES = BOARD_FILES

    def __init__(self, node: str):
        self._node = node

    def __call__(
        self,
        code: str,
        files: dict[str, str] | None = None,
        board_files: bool = True,
        heapsize: int = 1 << 20,
        timeout: float = 120,
    ) -> str:
        """Run `code` and return its stdout.

        files: absolute board path -> text, written after (so overriding) the
        board files. heapsize is the port's initial heap; this port grows its
        heap on demand, so it is not a memory cap (use gc.mem_alloc to measure).
        """
        payload: dict[str, str] = {}
        if board_files:
            payload.update({dst: src.read_text(encoding="utf-8") for dst, src in BOARD_FILES.items()})
        payload.update(files or {})
        job = json.dumps({"files": payload, "code": code, "heapsize": heapsize})
        try:
            proc = subprocess.run(
                [self._node, str(_RUNNER)],
                input=job.encode("utf-8"),
                capture_output=True,
                timeout=timeout,
                cwd=REPO_ROOT,
            )
        except subprocess.TimeoutExpired as exc:
            out = (exc.stdout or b"").decode("utf-8", "replace")
            raise MicroPythonError(f"MicroPython run timed out after {timeout} s", out) from None
        out = proc.stdout.decode("utf-8", "replace")
        if proc.returncode != 0:
            err = proc.stderr.decode("utf-8", "replace").rstrip("\n")
            raise MicroPythonError(err or f"run.mjs exited with {proc.returncode}", out)
        return out


@pytest.fixture(scope="session")
def micropython() -> MicroPythonRunner:
    node = shutil.which("node")
    if node is None or not _PORT.is_file():
        missing = "node" if node is None else f"{_PORT.relative_to(REPO_ROOT)}"
        pytest.fail(f"MicroPython runtime unavailable ({missing} missing): run `make setup`", pytrace=False)
    return MicroPythonRunner(node)


@pytest.fixture(params=sorted(BOARD_FILES.items()), ids=lambda item: item[0])
def board_file(request) -> tuple[str, Path]:
    """(install path on the board, source path) for each board file in turn."""
    return request.param


# ==== END MicroPython board runtime ===========================================
