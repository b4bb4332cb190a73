"""Where the board's files are: the same code finds them in a source checkout
(firmware/, protocol/) and in an installed wheel (slipless/firmware/,
slipless/protocol/), because both are resolved through the package itself.
"""

from __future__ import annotations

from pathlib import Path

from slipless.errors import InputError

PACKAGE = Path(__file__).resolve().parents[1]  # slipless/board/files.py -> slipless/
CHECKOUT = PACKAGE.parents[1]  # host/slipless -> the repository


def _folder(name: str) -> Path:
    """slipless/<name> in a wheel, else <checkout>/<name> (source or editable)."""
    inside = PACKAGE / name
    return inside if inside.is_dir() else CHECKOUT / name


def firmware_dir() -> Path:
    """The board's MicroPython files and profiles."""
    fw = _folder("firmware")
    if not ((fw / "profiles").is_dir() and (fw / "config.py").is_file()):
        raise InputError(f"{fw}: the board's firmware files are missing from this install "
                         "(reinstall slipless)")
    return fw


def protocol_dir() -> Path:
    """protocol/: wire.py, which also runs on the board."""
    return _folder("protocol")


def wire_path() -> Path:
    path = protocol_dir() / "wire.py"
    if not path.is_file():
        raise InputError(f"{path}: missing from this install (reinstall slipless)")
    return path
