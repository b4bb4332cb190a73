"""Output folders: made when missing, refused in one line when they cannot be."""

from __future__ import annotations

from pathlib import Path

from slipless.errors import InputError


def out_folder(path: Path) -> Path:
    """The folder `path`, created with its parents if need be; an existing file
    there, or a place where no folder can be made, is a one-line InputError."""
    if path.exists() and not path.is_dir():
        raise InputError(f"{path}: exists and is not a folder: choose another --out")
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{path}: cannot make this folder ({exc.strerror})") from None
    return path
