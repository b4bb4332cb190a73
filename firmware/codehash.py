"""The hash of the code the board can import (SPEC 3.11), for the FIRMWARE reply.

SHA-256 over every *.py and *.mpy directly in / and /lib, in bytewise order of
their board paths, each as path, 0x00, u32 LE size, then its bytes. The
laptop (`slipless flash`, `slipless board info`) hashes the files it copies by
the same rule (wire.is_code_path, wire.firmware_file_prefix), so the two can be
compared. Read once per boot: commands.py keeps the result.
"""

import hashlib
import os

import wire

_CHUNK = 256  # bytes read per call: the RAM this costs stays small
_DIR = 0x4000  # S_IFDIR in os.stat()[0], on MicroPython and CPython alike


def code_files(root):
    """[(board path, local path)] of the code files under root, sorted by board
    path. root is what the board's "/" is on this machine ("" on the board)."""
    found = []
    for folder in wire.CODE_DIRS:
        local = root + folder
        try:
            names = os.listdir(local.rstrip("/") or "/")
        except OSError:
            continue  # no /lib: nothing there to import
        for name in names:
            path = folder + name
            if not wire.is_code_path(path):
                continue
            try:
                if os.stat(local + name)[0] & _DIR:
                    continue
            except OSError:
                continue
            found.append((path, local + name))
    found.sort()
    return found


def code_hash(root):
    """-> (files, total bytes, first FW_SHA_SIZE bytes of the digest); all zero
    without code files (or without a root: a simulation that gives none)."""
    files = code_files(root) if root is not None else []
    if not files:
        return 0, 0, bytes(wire.FW_SHA_SIZE)
    h = hashlib.sha256()
    buf = bytearray(_CHUNK)
    mv = memoryview(buf)
    total = 0
    for path, local in files:
        size = os.stat(local)[6]
        h.update(wire.firmware_file_prefix(path, size))
        with open(local, "rb") as f:
            while True:
                k = f.readinto(buf)
                if not k:
                    break
                h.update(mv[:k])
        total += size
    return len(files), total, h.digest()[: wire.FW_SHA_SIZE]
