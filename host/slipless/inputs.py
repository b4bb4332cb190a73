"""Opening what the user names on the command line, with clear errors."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path

from slipless.errors import InputError

CHUNK = 1 << 20
PROGRESS_OVER = 4 << 20  # show a progress bar for inputs larger than this


def check_input(path: Path) -> int:
    """Return the file size, or raise InputError saying what is wrong."""
    if not path.exists():
        raise InputError(f"{path}: no such file")
    if path.is_dir():
        raise InputError(f"{path}: is a directory, expected a capture file")
    size = path.stat().st_size
    if size == 0:
        raise InputError(f"{path}: file is empty")
    return size


def read_chunks(path: Path, on_progress: Callable[[int], None] | None = None) -> Iterator[bytes]:
    try:
        with path.open("rb") as f:
            while chunk := f.read(CHUNK):
                if on_progress is not None:
                    on_progress(len(chunk))
                yield chunk
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from exc
