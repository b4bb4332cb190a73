// Shared by the MicroPython runners: where the WebAssembly port lives, and a
// write that never drops bytes.
import { writeSync } from "node:fs";
import { dirname, join } from "node:path";
import { fileURLToPath } from "node:url";

export const repoRoot = join(dirname(fileURLToPath(import.meta.url)), "..", "..");
export const portModule = join(
  repoRoot, "node_modules", "@micropython", "micropython-webassembly-pyscript", "micropython.mjs",
);

// Blocking writes (the process may exit right after) that retry on EAGAIN:
// pipes and ptys can be non-blocking and refuse a write for a moment.
export function writeAll(fd, bytes) {
  let off = 0;
  while (off < bytes.length) {
    try {
      off += writeSync(fd, bytes, off, bytes.length - off);
    } catch (err) {
      if (err.code !== "EAGAIN") throw err;
    }
  }
}
