// Runs the MicroPython WebAssembly port's REPL on stdin/stdout the way a board
// runs it on its serial port: raw bytes in both directions, no line buffering.
// Tests point stdin/stdout at the master side of a pseudo-terminal and hand the
// slave path to the real mpremote, so `slipless flash` can be driven end to end.
//
// The port's event-driven REPL differs from a board's in places mpremote
// relies on, so this bridge fills them in:
//   - Soft reset: Ctrl-D on an empty raw-REPL line makes the port print "OK\r\n"
//     and stop. A board then prints "MPY: soft reboot\r\n", clears its Python
//     state and comes back in the same REPL mode (mpremote transport_serial.py,
//     enter_raw_repl: waits for "soft reboot\r\n", then the raw REPL banner).
//     We do the same, keeping the in-memory filesystem (a board keeps its
//     flash filesystem).
//   - Raw paste: the port accepts Ctrl-E 'A' Ctrl-A but then blocks waiting for
//     input it cannot get here. We answer as a board without raw paste does,
//     "R\x00", so mpremote falls back to the plain raw REPL (mpremote
//     transport_serial.py, exec_raw_no_follow).
//   - Errno numbers: the port's filesystem raises Emscripten's numbers
//     ("OSError: 44") while its own errno module, like a board, says ENOENT is
//     2. mpremote reads the number or name from the traceback to tell "no such
//     file" from a failure (mpremote transport.py, _convert_filesystem_error),
//     so tracebacks are rewritten to what a board prints, "OSError: [Errno 2]
//     ENOENT" (from memory). Both number tables come from the port itself.
// Not emulated: boot.py/main.py on soft reset (mpremote resets in raw mode,
// where a board skips main.py anyway).
//
// usage: node repl_bridge.mjs [heapsize-bytes]
import { readFileSync } from "node:fs";
import { constants } from "node:os";
import { portModule, writeAll } from "./port.mjs";


const CTRL_A = 0x01, CTRL_B = 0x02, CTRL_C = 0x03, CTRL_D = 0x04, CTRL_E = 0x05;


// The port emits one byte per call; collect and send in blocks.
let outBuf = [];
const put = (bytes) => { for (const b of bytes) outBuf.push(b); };
// Flushed once per input chunk, so an exec's whole traceback is in one block.
const flush = () => {
  if (outBuf.length) {
    let bytes = Buffer.from(outBuf);
    if (bytes.includes("OSError: ")) bytes = Buffer.from(boardErrno(bytes.toString("latin1")), "latin1");
    writeAll(1, bytes);
  }
  outBuf = [];
};
const say = (text) => put(Buffer.from(text, "latin1"));

const { loadMicroPython } = await import(portModule);
const mp = await loadMicroPython({
  heapsize: Number(process.argv[2] ?? 1 << 20),
  stdout: put,
  stderr: put,
  linebuffer: false,
});

// What a soft reset forgets: imported modules, globals, a changed sys.path.
mp.runPython("import sys\n_path = repr(sys.path)\ndel sys");
const INITIAL_PATH = mp.globals.get("_path");
const RESET_CODE = `
def _reset():
    import sys
    sys.modules.clear()
    sys.path[:] = ${INITIAL_PATH}
    g = globals()
    for k in list(g):
        if k != "__name__":
            del g[k]
_reset()
`;

// Emscripten errno number -> name, from the port's own JavaScript.
const EM_NAMES = new Map();
const table = /ERRNO_CODES=\{([^}]*)\}/.exec(readFileSync(portModule, "utf8"));
for (const [, name, num] of (table ? table[1] : "").matchAll(/(E[A-Z0-9]+):(\d+)/g)) {
  if (!EM_NAMES.has(Number(num))) EM_NAMES.set(Number(num), name);
}
// Name -> the number a board uses: the port's errno module, else the host's (Linux) value.
mp.runPython("import errno\n_e = ','.join('%s=%d' % (v, k) for k, v in errno.errorcode.items())\ndel errno");
const BOARD_NUM = new Map(
  mp.globals.get("_e").split(",").map((kv) => kv.split("=")).map(([k, v]) => [k, Number(v)]),
);
function boardErrno(text) {
  return text.replace(/OSError: (\d+)(?=\r?\n)/g, (whole, num) => {
    const name = EM_NAMES.get(Number(num));
    const board = name && (BOARD_NUM.get(name) ?? constants.errno[name]);
    return board ? `OSError: [Errno ${board}] ${name}` : whole;
  });
}

mp.runPython(RESET_CODE); // start as clean as after a reset

let raw = false; // which REPL the port is in (Ctrl-A enters raw, Ctrl-B leaves)
let rawLineEmpty = true; // raw-paste requests only count at the start of a command
let held = []; // a possible Ctrl-E <cmd> Ctrl-A raw-paste request

async function toPort(c) {
  if (raw) {
    if (c === CTRL_B) raw = false;
    rawLineEmpty = c === CTRL_A || c === CTRL_C || c === CTRL_D;
  } else if (c === CTRL_A) {
    raw = true;
    rawLineEmpty = true;
  }
  const ret = await mp.replProcessCharWithAsyncify(c);
  if (ret !== 0) softReboot();
}

function softReboot() {
  say("MPY: soft reboot\r\n");
  mp.runPython(RESET_CODE);
  rawLineEmpty = true;
  mp.replInit(); // prints the banner of the current mode: raw or friendly
}

async function handle(c) {
  if (held.length === 0) {
    if (raw && rawLineEmpty && c === CTRL_E) held.push(c);
    else await toPort(c);
    return;
  }
  held.push(c);
  if (held.length < 3) return;
  const request = held;
  held = [];
  if (request[2] === CTRL_A) {
    say("R\x00"); // understood, not supported: the caller uses the plain raw REPL
    return;
  }
  for (const b of request) await toPort(b);
}

// Input is handled strictly in order, one byte at a time, as a UART would.
const queue = [];
let busy = false;
async function pump() {
  if (busy) return;
  busy = true;
  try {
    while (queue.length) {
      for (const c of queue.shift()) await handle(c);
      flush();
    }
  } finally {
    busy = false;
  }
}

mp.replInit();
flush();
process.stdin.on("data", (chunk) => {
  queue.push(chunk);
  pump().catch((e) => {
    writeAll(2, Buffer.from(`repl_bridge: ${e && e.stack ? e.stack : e}\n`));
    process.exit(2);
  });
});
// The pty closing (EIO on the master) or stdin ending means the "board" is unplugged.
process.stdin.on("error", () => process.exit(0));
process.stdin.on("end", () => process.exit(0));
