"""The board test runtime is real MicroPython, and the port facts the
protocol depends on hold there."""
import json
import struct
import zlib

import pytest


def test_runs_real_micropython(micropython):
    out = micropython("import sys\nprint(sys.implementation.name)", board_files=False)
    assert out == "micropython\n"


def test_stdout_is_passed_through_unchanged(micropython):
    out = micropython("print('a\\u00e9', end='')\nprint()\nprint('b')", board_files=False)
    assert out == "a\u00e9\nb\n"


def test_exception_surfaces_with_traceback(micropython):
    code = "print('before')\ndef f():\n    raise ValueError('boom 42')\nf()\n"
    with pytest.raises(micropython.Error) as info:
        micropython(code, board_files=False)
    err = info.value
    assert isinstance(err, AssertionError)  # a board failure is a test failure
    assert "Traceback (most recent call last)" in err.traceback
    assert "ValueError: boom 42" in err.traceback
    assert 'line 3, in f' in err.traceback
    assert err.stdout == "before\n"


def test_sys_exit_zero_is_success_other_is_error(micropython):
    assert micropython("import sys\nprint('x')\nsys.exit(0)", board_files=False) == "x\n"
    with pytest.raises(micropython.Error, match="SystemExit: 3"):
        micropython("import sys\nsys.exit(3)", board_files=False)


def test_files_under_lib_import(micropython):
    files = {
        "/lib/probe_mod.py": "VALUE = 7\n",
        "/lib/probe_pkg/__init__.py": "",
        "/lib/probe_pkg/inner.py": "from probe_mod import VALUE\nDOUBLE = 2 * VALUE\n",
    }
    out = micropython("from probe_pkg.inner import DOUBLE\nprint(DOUBLE)", files=files, board_files=False)
    assert out == "14\n"


def test_board_files_are_installed_verbatim(micropython):
    # Walk /lib on the board and compare every file with its source.
    code = """
import os, json, binascii
def walk(d, out):
    for name in os.listdir(d):
        p = d + "/" + name
        if os.stat(p)[0] & 0x4000:
            walk(p, out)
        else:
            with open(p, "rb") as f:
                out[p] = binascii.crc32(f.read())
    return out
print(json.dumps(walk("/lib", {}) if "lib" in os.listdir("/") else {}))
"""
    on_board = json.loads(micropython(code))
    expected = {dst: zlib.crc32(src.read_bytes()) for dst, src in micropython.BOARD_FILES.items()}
    assert on_board == expected


def test_ticks_period_and_wrap(micropython):
    # MicroPython docs, `time` module: TICKS_PERIOD = TICKS_MAX + 1 is a
    # port-dependent power of two; ticks_add(0, -1) gives TICKS_MAX; ticks_diff
    # returns a signed value in [-TICKS_PERIOD/2, TICKS_PERIOD/2 - 1]; values
    # apart by TICKS_PERIOD/2 - 1 give that value, apart by TICKS_PERIOD/2 give
    # -TICKS_PERIOD/2. ticks_diff(ticks_add(x, d), x) == d therefore holds for
    # |d| < TICKS_PERIOD/2. The 2**30 period is what this port uses.
    code = """
import time, json
P = time.ticks_add(0, -1) + 1
H = P // 2
r = {"period": P}
r["wrap_up"] = time.ticks_add(P - 1, 1)
r["wrap_down"] = time.ticks_add(0, -1)
r["diff_across_wrap"] = time.ticks_diff(0, P - 1)
r["diff_back_across_wrap"] = time.ticks_diff(P - 1, 0)
r["max_positive"] = time.ticks_diff(H - 1, 0)
r["half_is_negative"] = time.ticks_diff(H, 0)
bad = []
for x in (0, 1, 12345, H - 1, H, P - 2, P - 1):
    for d in (0, 1, -1, 1000, -1000, H - 1, -(H - 1)):
        if time.ticks_diff(time.ticks_add(x, d), x) != d:
            bad.append((x, d))
        y = time.ticks_add(x, d)
        if not 0 <= y < P:
            bad.append(("range", x, d, y))
r["bad"] = bad
rejected = []
for d in (H, -H, P):
    try:
        time.ticks_add(0, d)
    except OverflowError:
        rejected.append(d)
r["rejected"] = rejected
print(json.dumps(r))
"""
    r = json.loads(micropython(code, board_files=False))
    assert r["period"] == 2**30
    assert r["wrap_up"] == 0
    assert r["wrap_down"] == 2**30 - 1
    assert r["diff_across_wrap"] == 1
    assert r["diff_back_across_wrap"] == -1
    assert r["max_positive"] == 2**29 - 1
    assert r["half_is_negative"] == -(2**29)
    assert r["bad"] == []
    # Observed on this port, not stated in the docs: ticks_add refuses a delta
    # of TICKS_PERIOD/2 or more in size, so board code must keep deltas below.
    assert r["rejected"] == [2**29, -(2**29), 2**30]


def test_ticks_us_is_in_range_and_advances(micropython):
    # MicroPython docs, `time` module: ticks_us() returns values in
    # [0, TICKS_MAX] and increases (modulo the period).
    code = """
import time
a = time.ticks_us()
t = time.ticks_add(a, 2000)
while time.ticks_diff(t, time.ticks_us()) > 0:
    pass
b = time.ticks_us()
print(a, b, time.ticks_diff(b, a))
"""
    a, b, d = map(int, micropython(code, board_files=False).split())
    assert 0 <= a < 2**30 and 0 <= b < 2**30
    assert 2000 <= d < 10_000_000


def test_crc32_check_value(micropython):
    # CRC catalogue, CRC-32/ISO-HDLC: check = 0xCBF43926 over b"123456789".
    code = """
import binascii
print(binascii.crc32(b"123456789"))
print(binascii.crc32(b"6789", binascii.crc32(b"12345")))
"""
    whole, chained = map(int, micropython(code, board_files=False).split())
    assert whole == 0xCBF43926
    assert chained == 0xCBF43926  # running CRC, as the host's zlib.crc32 allows
    assert zlib.crc32(b"123456789") == whole  # host and board agree


def test_struct_little_endian_has_no_padding(micropython):
    # Python docs, `struct`: no padding is added with '<', '>', '!' or '='
    # (MicroPython docs, `struct`: supports the same byte-order prefixes).
    fmt = "<BHIQbhiqd"
    values = (0xA5, 0xBEEF, 0xDEADBEEF, 0x0123456789ABCDEF, -2, -300, -70000, -(2**40), 1.5)
    code = f"""
import struct
fmt = {fmt!r}
buf = bytearray(3 + struct.calcsize(fmt))
struct.pack_into(fmt, buf, 3, *{values!r})
print(struct.calcsize(fmt))
print(bytes(buf).hex())
print(struct.unpack_from(fmt, buf, 3) == {values!r})
"""
    size, hexbytes, roundtrip = micropython(code, board_files=False).split()
    assert int(size) == 1 + 2 + 4 + 8 + 1 + 2 + 4 + 8 + 8
    assert bytes.fromhex(hexbytes) == b"\0\0\0" + struct.pack(fmt, *values)  # same bytes as the host
    assert roundtrip == "True"
