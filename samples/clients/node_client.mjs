// Post a request body to nearwise and print the predictions, or the error it explains.
//
//   node samples/clients/node_client.mjs                           # the turbine spline sample
//   node samples/clients/node_client.mjs samples/predict_warehouse.json
//   node samples/clients/node_client.mjs samples/compare_warehouse.json compare
//   NEARWISE_URL=http://host:9000 node samples/clients/node_client.mjs
//   NEARWISE_API_KEY=your-key node samples/clients/node_client.mjs        # sent as a bearer token
//
// Node 18 or newer (built-in fetch); no packages. Exits with 1 when the service answers with an error.
import { readFile } from "node:fs/promises";

const base = (process.env.NEARWISE_URL ?? "http://127.0.0.1:8080").replace(/\/+$/, "");
const bodyPath = process.argv[2] ?? new URL("../predict_spline.json", import.meta.url);
const endpoint = process.argv[3] ?? "predict";
const key = process.env.NEARWISE_API_KEY ?? "";
const headers = { "Content-Type": "application/json" };
if (key) headers.Authorization = `Bearer ${key}`;

const fmt = (x) => (x === null ? "-" : String(Number(x.toPrecision(6))));

function showProblem(problem) {
  console.log(`error ${problem.status}: ${problem.title}`);
  console.log(problem.detail);
  for (const err of problem.errors ?? []) {
    const where = err.pointer ?? `${err.part} line ${err.line}, column ${err.column}`;
    console.log(`  ${where}: ${err.message}`);
  }
}

function showAnswer(answer) {
  const doc = answer.prediction ?? answer; // compare nests the recommended method's answer
  if (answer.recommended) console.log(`recommended: ${answer.recommended} (${answer.reason})`);
  console.log(`method ${doc.method}, cross-validated error ${fmt(doc.fit.cv_error)}`);
  console.log("row\tvalue\tlower\tupper\tflags");
  doc.predictions.forEach((p, i) => {
    console.log([i, fmt(p.value), fmt(p.lower), fmt(p.upper), p.flags.join(" ")].join("\t"));
  });
  for (const w of doc.warnings) console.log(`warning ${w.code}: ${w.message}`);
}

try {
  const resp = await fetch(`${base}/v1/${endpoint}`, {
    method: "POST",
    headers,
    body: await readFile(bodyPath),
    signal: AbortSignal.timeout(120_000),
  });
  if ((resp.headers.get("content-type") ?? "").startsWith("application/problem+json")) {
    showProblem(await resp.json());
    process.exitCode = 1;
  } else if (!resp.ok) {
    throw new Error(`HTTP ${resp.status} ${resp.statusText}`); // e.g. from a proxy in front
  } else {
    showAnswer(await resp.json());
  }
} catch (err) {
  console.error(`request failed: ${err.message}`);
  process.exitCode = 2;
}
