// Runs Python source on the MicroPython WebAssembly port, with files placed in
// its in-memory filesystem first, so tests exercise real board semantics.
//
// stdin:  {"files": {"/lib/x.py": "<text>"}, "code": "<python>", "heapsize": <bytes>}
// stdout: whatever the Python code printed, byte for byte.
// exit:   0 on success (including sys.exit() / sys.exit(0)); 1 on any other
//         uncaught Python exception (traceback on stderr); 2 if the runner
//         itself fails.
import { readFileSync } from "node:fs";
import { dirname } from "node:path";
import { portModule, writeAll } from "./port.mjs";



// The port hands output over one byte at a time; collect and flush in blocks.
function byteSink(fd) {
  let buf = Buffer.alloc(1 << 16);
  let len = 0;
  const flush = () => {
    if (len) writeAll(fd, buf.subarray(0, len));
    len = 0;
  };
  const put = (bytes) => {
    for (const b of bytes) {
      if (len === buf.length) flush();
      buf[len++] = b;
    }
  };
  return { put, flush };
}

function mkdirs(FS, path) {
  let cur = "";
  for (const part of path.split("/").filter(Boolean)) {
    cur += "/" + part;
    try {
      FS.mkdir(cur);
    } catch (err) {
      // EEXIST is fine; anything else surfaces when the file write fails.
    }
  }
}

async function main() {
  const job = JSON.parse(readFileSync(0, "utf8"));
  const out = byteSink(1);
  const err = byteSink(2);
  const { loadMicroPython } = await import(portModule);
  const mp = await loadMicroPython({
    heapsize: job.heapsize ?? 1 << 20,
    stdout: out.put,
    stderr: err.put,
    linebuffer: false,
  });
  for (const [path, text] of Object.entries(job.files ?? {})) {
    mkdirs(mp.FS, dirname(path));
    mp.FS.writeFile(path, text);
  }
  let code = 0;
  try {
    mp.runPython(job.code ?? "");
  } catch (e) {
    if (e.name !== "PythonError") throw e;
    // sys.exit() / sys.exit(0) end the program normally, as on a board.
    const clean = e.type === "SystemExit" && /SystemExit: (0)?\n?$/.test(e.message);
    if (clean) {
      out.flush();
      err.flush();
      process.exit(0);
    }
    out.flush();
    err.flush();
    writeAll(2, Buffer.from(e.message.endsWith("\n") ? e.message : e.message + "\n"));
    code = 1;
  }
  out.flush();
  err.flush();
  // Exit explicitly: nothing else is pending, and the port must not keep us alive.
  process.exit(code);
}

main().catch((e) => {
  writeAll(2, Buffer.from(`run.mjs: ${e && e.stack ? e.stack : e}\n`));
  process.exit(2);
});
