// Scores pocketforest ONNX models with onnxruntime's Node.js binding. Reads JSON on stdin:
// {"models": {"forest": "/path/forest.onnx", ...},
//  "inputs": [{"name": onnx input, "kind": "numeric"|"categorical", "values": [...]}]}
// and prints {"forest": {"<output name>": {"dims": [...], "data": [...]}}, ...}.
// A missing number is null in the JSON and NaN in the tensor; a missing category is "".
"use strict";
const fs = require("fs");
const ort = require("onnxruntime-node");

async function main() {
  const request = JSON.parse(fs.readFileSync(0, "utf8"));
  const feeds = {};
  for (const input of request.inputs) {
    const n = input.values.length;
    if (input.kind === "numeric") {
      const data = Float32Array.from(input.values, (v) => (v === null ? NaN : v));
      feeds[input.name] = new ort.Tensor("float32", data, [n, 1]);
    } else {
      feeds[input.name] = new ort.Tensor("string", input.values.map((v) => (v === null ? "" : String(v))), [n, 1]);
    }
  }
  const result = {};
  for (const [model, path] of Object.entries(request.models)) {
    const session = await ort.InferenceSession.create(path);
    const wanted = {};
    for (const name of session.inputNames) wanted[name] = feeds[name];
    const out = await session.run(wanted);
    result[model] = {};
    for (const [name, tensor] of Object.entries(out)) {
      result[model][name] = { dims: tensor.dims.map(Number), data: Array.from(tensor.data, (v) => (typeof v === "bigint" ? Number(v) : v)) };
    }
  }
  process.stdout.write(JSON.stringify(result, (k, v) => (typeof v === "number" && !Number.isFinite(v) ? null : v)));
}

main().catch((err) => {
  process.stderr.write(String(err && err.stack ? err.stack : err) + "\n");
  process.exit(1);
});
