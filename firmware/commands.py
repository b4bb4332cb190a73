"""Laptop commands: parse, validate, act, and answer every one.

Each COMMAND frame gets exactly one ACK or ERROR (a PING gets a SYNC, an INFO
one INFO frame, a FIRMWARE one FIRMWARE frame; a RESEND gets its frames plus an
ACK, or an ERROR naming what the ring no longer holds).
A bad command changes nothing. Commands are rare, so this module may allocate.

A board with a key (config link.key_hex) runs the state-changing opcodes
(wire.GUARDED: start, stop, set_config, pull) only when authenticated
(opcode | AUTH_FLAG, trailer checked by auth.py); ping, status, resend, info
and firmware may come either way (sealed, they are a key check: SPEC 3.9.1).
Anything refused gets ERROR auth and changes nothing.
"""

import hashlib
import struct

import auth
from compat import ON_BOARD

import wire

# struct errors are ValueError on MicroPython, struct.error on CPython.
_BAD_ARGS = (ValueError, IndexError) + ((struct.error,) if hasattr(struct, "error") else ())
# The file main.py boots from; hw.config_path overrides it (simulations on CPython
# have none unless a test gives one: the laptop's own /config.json is not the board's).
_CONFIG_PATH = "/config.json" if ON_BOARD else None
_READ_CHUNK = 256  # bytes of the config file hashed per read (RAM per INFO stays small)
# What the board's "/" is here, for the firmware hash; hw.code_root overrides it
# (simulations on CPython hash nothing unless a test gives a folder).
_CODE_ROOT = "" if ON_BOARD else None


def handle(board, body):
    """Act on one CRC-checked frame body from the laptop."""
    if len(body) < wire.HEADER_SIZE + wire.COMMAND_FIXED_SIZE:
        return
    version, kind, target, run, _ = wire.parse_header(body)
    if version != wire.VERSION or kind != wire.COMMAND:
        return  # not for us (or an echo): nothing to answer
    if target != 0xFFFF and target != board.board_id:
        return  # addressed to another board on the same link
    opcode, request = struct.unpack_from(wire.COMMAND_FIXED, body, wire.HEADER_SIZE)
    fr = board.framer
    end = len(body)
    guard = board.auth
    if opcode & wire.AUTH_FLAG:
        opcode &= ~wire.AUTH_FLAG
        if guard is None:
            fr.error_now(request, opcode, wire.ERR_AUTH, 0, auth.WHY_NO_KEY)
            return
        end -= wire.AUTH_TRAILER_SIZE
        why = guard.check(body) if end >= wire.HEADER_SIZE + wire.COMMAND_FIXED_SIZE else auth.WHY_MISSING
        if why:
            fr.error_now(request, opcode, wire.ERR_AUTH, guard.last, why)
            return
    elif guard is not None and opcode in wire.GUARDED:
        fr.error_now(request, opcode, wire.ERR_AUTH, guard.last, auth.WHY_MISSING)
        return
    args = body[wire.HEADER_SIZE + wire.COMMAND_FIXED_SIZE : end]
    try:
        if opcode == wire.CMD_START:
            duration_s = struct.unpack_from(wire.START_ARGS, args, 0)[0]
            label, end = wire.get_text(args, 4)
            _no_more(args, end)
            _answer(fr, request, opcode, board.start(duration_s, label))
        elif opcode == wire.CMD_STOP:
            _no_more(args, 0)
            fr.ack_now(request, opcode)  # before END: END is the run's last frame (SPEC)
            board.stop(1)
        elif opcode == wire.CMD_SET_CONFIG:
            key, end = wire.get_text(args, 0)
            value, end = wire.get_text(args, end)
            _no_more(args, end)
            _answer(fr, request, opcode, board.set_config(key, value))
        elif opcode == wire.CMD_PING:
            _no_more(args, 8)
            host_ns = struct.unpack_from(wire.PING_ARGS, args, 0)[0]
            rx_hi, rx_lo = board.rx_hi, board.rx_lo
            c = board.clock
            c.update()
            fr.sync_now(request, host_ns, rx_hi, rx_lo, c.hi, c.lo)
        elif opcode == wire.CMD_RESEND:
            _no_more(args, 8)
            first, last = struct.unpack_from(wire.RESEND_ARGS, args, 0)
            if last < first:
                raise ValueError
            if run and run != board.run_id:  # an earlier run: its frames left the ring at START
                gone = (first, last)
            else:
                gone = board.ring.request_resend(first, last)
            if gone:
                fr.error_now(request, opcode, wire.ERR_NOT_HELD, gone[0], gone[1])
            else:
                fr.ack_now(request, opcode)
        elif opcode == wire.CMD_STATUS:
            _no_more(args, 0)
            board.status()
            fr.ack_now(request, opcode)
        elif opcode == wire.CMD_INFO:
            _no_more(args, 0)
            info(board, request)
        elif opcode == wire.CMD_FIRMWARE:
            _no_more(args, 0)
            firmware(board, request)
        elif opcode == wire.CMD_PULL:
            _no_more(args, 0)
            code = board.pull(request)
            if code:  # otherwise the ACK follows the last mirror byte (board.py)
                fr.error_now(request, opcode, code)
        else:
            fr.error_now(request, opcode, wire.ERR_BAD_COMMAND)
    except _BAD_ARGS:
        fr.error_now(request, opcode, wire.ERR_BAD_ARGUMENT)


def info(board, request):
    """One INFO frame: what a laptop needs to know the board outside a run."""
    from board import FW  # the firmware version (board.py imports this module)

    fr = board.framer
    c = board.clock
    c.update()
    sha = config_sha(getattr(board.hw, "config_path", _CONFIG_PATH))
    flags = 0
    if board.auth is not None:
        flags |= wire.INFO_KEYED
    if board.running:
        flags |= wire.INFO_RUNNING
    if board.coil.state:
        flags |= wire.INFO_COIL_ON
    if board.config_error:
        flags |= wire.INFO_CONFIG_FALLBACK
    if board.config_saved:
        flags |= wire.INFO_CONFIG_SAVED
    if sha is None:
        flags |= wire.INFO_NO_CONFIG_FILE
        sha = bytes(wire.CONFIG_SHA_SIZE)
    m = board.mirror
    held = 0
    if m is not None:
        flags |= wire.INFO_MIRROR
        held = m.size + m.n
    floor = board.auth.last if board.auth is not None else 0
    cfg = board.cfg
    n = fr.info_body(request, c.now(), FW, flags, floor, min(held, 0xFFFFFFFF), sha, cfg["name"],
                     cfg["profile"])
    fr.emit(n, fr.body)


def firmware(board, request):
    """One FIRMWARE frame (SPEC 3.11). The code files are read at the first ask after
    boot, never during a run (the reading would hold up sampling): ERROR busy then."""
    got = board.fw_hash
    if got is None:
        if board.running:
            board.framer.error_now(request, wire.CMD_FIRMWARE, wire.ERR_BUSY)
            return
        import codehash

        got = board.fw_hash = codehash.code_hash(getattr(board.hw, "code_root", _CODE_ROOT))
    fr = board.framer
    n = fr.firmware_body(request, min(got[0], 0xFFFF), min(got[1], 0xFFFFFFFF), got[2])
    fr.emit(n, fr.body)


def config_sha(path):
    """First CONFIG_SHA_SIZE bytes of SHA-256 over the file's bytes as stored
    (the laptop hashes the text `slipless flash` wrote); None without a file."""
    if path is None:
        return None
    try:
        f = open(path, "rb")
    except OSError:
        return None
    h = hashlib.sha256()
    try:
        while True:
            chunk = f.read(_READ_CHUNK)
            if not chunk:
                break
            h.update(chunk)
    finally:
        f.close()
    return h.digest()[: wire.CONFIG_SHA_SIZE]


def _answer(fr, request, opcode, code):
    """ACK for 0, else an ERROR carrying the code."""
    if code:
        fr.error_now(request, opcode, code)
    else:
        fr.ack_now(request, opcode)


def _no_more(args, end):
    if len(args) != end:
        raise ValueError("trailing bytes")
