"""The laptop's copies of board keys, and authenticated commands.

One key per board id, as 64 hex digits in `<config home>/keys/board-<id>.key`,
readable only by the user (file 0600, folder 0700); `slipless flash` writes it
and the board's copy (config link.key_hex) at the same time. Beside it,
`board-<id>.counter` holds the last command counter used, so counters keep
growing across laptop sessions. The board tells its floor in ERROR auth
(detail_a) after it rebooted past a reserve; `Signer.skip_to` jumps past it.
"""

from __future__ import annotations

import os
import secrets
import stat
import struct
from pathlib import Path

from slipless.errors import InputError
from slipless.protocol import wire

KEY_BYTES = 32  # one SHA-256 block's worth is more than enough; RFC 2104 asks >= L (32)


def config_home() -> Path:
    """The laptop's slipless folder: $SLIPLESS_HOME, else $XDG_CONFIG_HOME/slipless."""
    if os.environ.get("SLIPLESS_HOME"):
        return Path(os.environ["SLIPLESS_HOME"])
    base = os.environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    return Path(base) / "slipless"


def keys_dir() -> Path:
    return config_home() / "keys"


def key_path(board_id: int, folder: Path | None = None) -> Path:
    return (folder or keys_dir()) / f"board-{int(board_id)}.key"


def new_key_hex() -> str:
    return secrets.token_hex(KEY_BYTES)


def _private_write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    os.chmod(path.parent, 0o700)
    tmp = path.with_name(path.name + ".new")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    with os.fdopen(fd, "w") as f:
        f.write(text)
    os.chmod(tmp, 0o600)
    os.replace(tmp, path)


def save_key(board_id: int, key_hex: str, folder: Path | None = None) -> Path:
    path = key_path(board_id, folder)
    _private_write(path, key_hex + "\n")
    return path


def retire_key(path: Path) -> Path:
    """Move a key file aside (board-<id>.key -> board-<id>.old-<UTC time>.key.old)
    so a new key never destroys the one a board may still hold."""
    import time

    stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
    dest = path.with_name(f"{path.stem}.old-{stamp}.key.old")
    n = 1
    while dest.exists():
        dest = path.with_name(f"{path.stem}.old-{stamp}-{n}.key.old")
        n += 1
    os.replace(path, dest)
    return dest


def load_key(path: Path) -> bytes:
    """-> key bytes, or InputError: missing, readable by others, or not hex."""
    try:
        mode = path.stat().st_mode
        text = path.read_text(encoding="ascii").strip()
    except FileNotFoundError:
        raise InputError(f"{path}: key file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read key file ({exc})") from None
    if os.name == "posix" and mode & (stat.S_IRWXG | stat.S_IRWXO):
        raise InputError(f"{path}: key file is readable by others; run: chmod 600 {path}")
    if not text or len(text) % 2 or any(c not in "0123456789abcdef" for c in text):
        raise InputError(f"{path}: key file must hold lower-case hex digits")
    return bytes.fromhex(text)


def find_key(given: Path | None) -> Path | None:
    """--key FILE, else the only key this laptop holds, else None."""
    if given is not None:
        return given
    found = sorted(keys_dir().glob("board-*.key")) if keys_dir().is_dir() else []
    if len(found) > 1:
        names = ", ".join(p.name for p in found)
        raise InputError(f"{keys_dir()}: several board keys ({names}); pick one with --key FILE")
    return found[0] if found else None


def hmac_sha256(key: bytes, msg: bytes) -> bytes:
    import hmac

    return hmac.new(key, msg, "sha256").digest()


class Signer:
    """Seals commands for one board key; the counter file sits beside the key."""

    def __init__(self, key: bytes, counter_path: Path | None = None) -> None:
        self.key = key
        self.counter_path = counter_path
        self.counter = self._load()

    def _load(self) -> int:
        if self.counter_path is None:
            return 0
        try:
            return int(self.counter_path.read_text().strip())
        except FileNotFoundError:
            return 0
        except (OSError, ValueError) as exc:
            raise InputError(f"{self.counter_path}: damaged command counter ({exc}); delete it "
                             "and the board will tell the counter to use") from None

    def _save(self) -> None:
        if self.counter_path is not None:
            _private_write(self.counter_path, f"{self.counter}\n")

    def skip_to(self, floor: int) -> None:
        """The board accepts only counters above floor (ERROR auth old_counter)."""
        if floor >= self.counter:
            self.counter = floor
            self._save()

    def next_counter(self) -> int:
        if self.counter >= 0xFFFFFFFF:
            raise InputError("command counter exhausted: flash the board with a new key")
        self.counter += 1
        self._save()
        return self.counter

    def command(self, enc: wire.Encoder, opcode: int, request: int, args: bytes = b"") -> int:
        """Build an authenticated COMMAND in enc (as enc.command does); -> wire length."""
        op = opcode | wire.AUTH_FLAG
        head = struct.pack(wire.HEADER, (wire.VERSION << 4) | wire.COMMAND, enc.board, enc.run,
                           enc.seq)
        msg = head + struct.pack(wire.COMMAND_FIXED, op, request) + bytes(args)
        msg += struct.pack("<I", self.next_counter())
        return enc.command(op, request, msg[wire.HEADER_SIZE + wire.COMMAND_FIXED_SIZE :]
                           + hmac_sha256(self.key, msg))


def counter_path_for(key_file: Path) -> Path:
    return key_file.with_suffix(".counter")
