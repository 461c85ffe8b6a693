// Runs Python files under MicroPython's WebAssembly port (from the npm registry) in node.
// usage: node run.mjs FILE... -- CODE
// Each FILE is copied into MicroPython's root folder (by its base name), then CODE runs.
// Its printed lines go to stdout; a Python exception prints on stderr and exits 1.
import { readFileSync } from "node:fs";
import { basename } from "node:path";
import { loadMicroPython } from "@micropython/micropython-webassembly-pyscript/micropython.mjs";

const args = process.argv.slice(2);
const cut = args.indexOf("--");
const files = args.slice(0, cut);
const code = args.slice(cut + 1).join(" ");
const out = [];
const mp = await loadMicroPython({ stdout: (line) => out.push(line), linebuffer: true });
for (const f of files) {
  mp.FS.writeFile("/" + basename(f), readFileSync(f));
}
try {
  mp.runPython("import sys\nsys.path.insert(0, '/')\n" + code);
} catch (err) {
  process.stdout.write(out.join("\n") + "\n");
  process.stderr.write(String(err && err.message ? err.message : err) + "\n");
  process.exit(1);
}
process.stdout.write(out.join("\n") + (out.length ? "\n" : ""));
