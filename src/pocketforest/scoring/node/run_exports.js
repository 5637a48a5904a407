// Runs one pocketforest JavaScript export on rows given as JSON on stdin and prints the
// predictions as JSON on stdout. The export runs in a fresh V8 context (node:vm) that has no
// require, no process and no file system: only predict(row) and plain JavaScript.
"use strict";
const fs = require("fs");
const vm = require("vm");

function main() {
  const file = process.argv[2];
  const source = fs.readFileSync(file, "utf8");
  const rows = JSON.parse(fs.readFileSync(0, "utf8"));
  const sandbox = { module: { exports: {} } };
  vm.createContext(sandbox);
  vm.runInContext(source, sandbox, { filename: file, timeout: 10000 });
  const predict = sandbox.module.exports.predict;
  if (typeof predict !== "function") throw new Error(file + " does not export predict");
  const out = rows.map((row) => predict(row));
  process.stdout.write(JSON.stringify(out, (k, v) => (typeof v === "number" && !Number.isFinite(v) ? null : v)));
}

try {
  main();
} catch (err) {
  process.stderr.write(String(err && err.stack ? err.stack : err) + "\n");
  process.exit(1);
}
