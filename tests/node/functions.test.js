// The add-in's custom functions, as served by a real `sheetnet serve` on loopback, run in the stand-in
// of Excel's custom-functions runtime (custom_functions_runtime.js, written from Microsoft's pages) and
// compared with the same cell functions called in Python (python_call.py). No Excel runs here: what
// this proves holds against the documented contract as the stand-in models it.
//
// Run: node --test tests/node/   (SHEETNET_PYTHON names the Python with sheetnet installed; default:
// the repository's .venv). tests/test_addin_node.py runs this from pytest.
"use strict";

const { test, before, after } = require("node:test");
const assert = require("node:assert/strict");
const { spawn, execFile } = require("node:child_process");
const fs = require("node:fs");
const net = require("node:net");
const os = require("node:os");
const path = require("node:path");
const { Runtime, ContractBroken, errorCell, memoryStorage } = require("./custom_functions_runtime.js");

const HERE = __dirname;
const REPO = path.resolve(HERE, "..", "..");
const PYTHON = process.env.SHEETNET_PYTHON || path.join(REPO, ".venv", "bin", "python");
const TOKEN = "node-test-token-0123456789abcdef";
const MARKER = "#SHEETNET!";

let server = null;
let base = null;
let home = null;
let script = null;
let metadata = null;

// asynchronous on purpose: a blocked event loop would miss the server closing idle connections
function python(args, input = "") {
  return new Promise((resolve, reject) => {
    const child = execFile(PYTHON, [path.join(HERE, "python_call.py"), ...args], { maxBuffer: 64 * 1024 * 1024, cwd: REPO }, (error, out, err) => {
      if (error) reject(new Error(`python_call.py ${args[0]} failed: ${err || error.message}`));
      else resolve(JSON.parse(out));
    });
    child.stdin.end(input);
  });
}

function pythonCalls(calls) {
  return python(["call"], JSON.stringify(calls));
}

function freePort() {
  return new Promise((resolve, reject) => {
    const probe = net.createServer();
    probe.once("error", reject);
    probe.listen(0, "127.0.0.1", () => {
      const { port } = probe.address();
      probe.close(() => resolve(port));
    });
  });
}

async function waitForServer(url, deadline) {
  for (;;) {
    if (server.exitCode !== null) throw new Error(`sheetnet serve stopped (exit code ${server.exitCode})`);
    try {
      const response = await fetch(`${url}/addin/functions.json`);
      if (response.ok) return;
    } catch (error) {
      // not listening yet
    }
    if (Date.now() > deadline) throw new Error(`sheetnet serve did not answer at ${url} within the time allowed`);
    await new Promise((resolve) => setTimeout(resolve, 100));
  }
}

before(async () => {
  const port = await freePort();
  home = fs.mkdtempSync(path.join(os.tmpdir(), "sheetnet-node-"));  // the server file goes here, not in the user's home
  const command = "import sys; from sheetnet.cli import main; sys.exit(main(sys.argv[1:]))";
  server = spawn(PYTHON, ["-c", command, "serve", "--port", String(port)], {
    cwd: REPO,
    env: { ...process.env, HOME: home, SHEETNET_TOKEN: TOKEN },
    stdio: ["ignore", "pipe", "pipe"],
  });
  let printed = "";
  server.stdout.on("data", (chunk) => { printed += chunk; });
  server.stderr.on("data", (chunk) => { printed += chunk; });
  base = `http://127.0.0.1:${port}`;
  try {
    await waitForServer(base, Date.now() + 60000);
  } catch (error) {
    throw new Error(`${error.message}\n${printed}`);
  }
  script = await (await fetch(`${base}/addin/functions.js`)).text();
  metadata = await (await fetch(`${base}/addin/functions.json`)).json();
});

after(() => {
  if (server) server.kill("SIGTERM");
  if (home) fs.rmSync(home, { recursive: true, force: true });
});

// A runtime on the served script; `spy` records every request the functions make.
function runtime({ token = TOKEN, fetcher = fetch } = {}) {
  const requests = [];
  const spying = async (url, options = {}) => {
    requests.push({ url: String(url), method: options.method || "GET", body: options.body ? JSON.parse(options.body) : undefined });
    return fetcher(url, options);
  };
  const made = new Runtime(script, metadata, { fetch: spying, localStorage: memoryStorage(token ? { "sheetnet-token": token } : {}) });
  made.requests = requests;
  return made;
}

async function serverJob(id) {
  const response = await fetch(`${base}/v1/jobs/${id}`, { headers: { Authorization: `Bearer ${TOKEN}` } });
  return response.json();
}

function withoutTimeAndSeal(block) {
  // trained_at differs between two trainings of the same model, and the checksum covers it
  return block.filter((row) => row[0] !== "trained_at" && row[0] !== "checksum");
}

function messageOf(answer) {
  const first = answer[0][0];
  assert.ok(typeof first === "string" && first.startsWith(MARKER), `expected a message cell, got ${JSON.stringify(first)}`);
  return first.slice(MARKER.length).trim();
}

test("the served metadata and script hold to the documented contract", () => {
  const made = runtime();
  const ids = metadata.functions.map((f) => f.id);
  assert.deepEqual([...made.associations.keys()].sort(), [...ids].sort());  // every function associated, none extra
  assert.equal(metadata.allowErrorForDataTypeAny, true);
  for (const job of ["TRAIN", "SEARCH"]) {  // server jobs, cancelled with the cell
    assert.deepEqual(metadata.functions.find((f) => f.id === job).options, { cancelable: true, requiresAddress: true });
  }
  const choices = Object.fromEntries(metadata.enums.map((e) => [e.id, e.values.map((v) => v.stringValue)]));
  const enumOf = (fn, parameter) => metadata.functions.find((f) => f.id === fn).parameters.find((p) => p.name === parameter).customEnumId;
  assert.deepEqual(choices[enumOf("SPLIT", "mode")], ["random", "ordered", "stratified"]);
  assert.ok(choices[enumOf("PREDICT", "output")].includes("probabilities"));
  assert.ok(script.includes(`const SHEETNET_BASE = "${base}";`));
});

test("every registry function gives in the runtime what the Python call gives", async () => {
  const table = await python(["table", "120", "4"]);
  const trainArgs = [table, "grade", "5", "ignore=lot; epochs=150", null];
  const [split] = await pythonCalls([["SHEETNET.SPLIT", [table, 0.25, 1, "stratified grade"]]]);
  trainArgs[4] = split;
  const [model] = await pythonCalls([["SHEETNET.TRAIN", trainArgs]]);
  const calls = {
    SPLIT: [table, 0.25, 1, "stratified grade"],
    TRAIN: trainArgs,
    PREDICT: [model, table, "value, probabilities"],
    SCORE: [model, table, split],
    EXPLAIN: [model, table],
    ABOUT: [model, table],
    LAGS: [table.map((row) => [row[2]]), "1,3"],
    GROUPS: [model, table, "process", split],
    SEARCH: [table, "grade", [["hidden"], [2], [4]], "ignore=lot; epochs=40", 2],
  };
  const ids = metadata.functions.map((f) => f.id);
  assert.deepEqual(Object.keys(calls).filter((id) => ids.includes(id)).sort(), [...ids].sort(), "a registry function has no case here");
  const made = runtime();
  const expected = await pythonCalls(ids.map((id) => [`SHEETNET.${id}`, calls[id]]));
  for (const [k, id] of ids.entries()) {
    const cell = await made.calculate(id, calls[id], { address: "Sheet1!K2" }).done;
    assert.ok(cell.values, `${id} failed: ${JSON.stringify(cell)}`);
    if (id === "TRAIN") assert.deepEqual(withoutTimeAndSeal(cell.values), withoutTimeAndSeal(expected[k]));
    else assert.deepEqual(cell.values, expected[k], id);
  }
  // no invocation object ever went to the server (a table goes by columns), and trailing blank optionals were left out
  for (const request of made.requests.filter((r) => r.body)) {
    for (const value of request.body.args) {
      const byColumns = value !== null && typeof value === "object" && !Array.isArray(value) && Object.keys(value).sort().join() === "columns,header";
      assert.ok(value === null || typeof value !== "object" || Array.isArray(value) || byColumns, JSON.stringify(value).slice(0, 200));
    }
  }
  const predicted = made.requests.find((r) => r.url.endsWith("/v1/functions/SHEETNET.PREDICT")).body.args[1];
  assert.deepEqual(predicted.header, table[0]);
  assert.deepEqual(predicted.columns.map((c) => (Array.isArray(c) ? "cells" : "numbers")), table[0].map((name) => (["lot", "process", "grade"].includes(name) ? "cells" : "numbers")));
  // TRAIN and SEARCH went as server jobs, each listed under its cell and naming the function it runs
  const jobs = made.requests.filter((r) => r.url.endsWith("/v1/jobs") && r.method === "POST");
  assert.deepEqual(jobs.map((r) => r.body.function).sort(), ["SHEETNET.SEARCH", "SHEETNET.TRAIN"]);
  assert.ok(jobs.every((r) => r.body.name === "cell_Sheet1_K2"));
  assert.equal(jobs.find((r) => r.body.function === "SHEETNET.TRAIN").body.args.length, 5);
  assert.ok(!made.requests.some((r) => /\/v1\/functions\/SHEETNET\.(TRAIN|SEARCH)$/.test(r.url)), "no job went as one request");
});

test("the invocation Excel passes last is dropped, and omitted optionals are not sent", async () => {
  const made = runtime();
  const cell = await made.calculate("LAGS", [[["sales"], [1], [2], [3]]]).done;  // lags omitted: Excel passes null
  assert.deepEqual(cell.values, (await pythonCalls([["SHEETNET.LAGS", [[["sales"], [1], [2], [3]]]]]))[0]);
  assert.equal(made.requests.length, 1);
  assert.deepEqual(made.requests[0].body, { args: [[["sales"], [1], [2], [3]]] });
});

test("a refusal is a #VALUE! error carrying sheetnet's message", async () => {
  const table = await python(["table", "40", "2"]);
  const made = runtime();
  const cell = await made.calculate("TRAIN", [table, "flavour"]).done;
  const [answer] = await pythonCalls([["SHEETNET.TRAIN", [table, "flavour"]]]);
  assert.deepEqual(cell, { error: "#VALUE!", message: messageOf(answer) });
  assert.ok(cell.message.includes("flavour"));
  const predicted = await made.calculate("PREDICT", [[["not a model"]], table]).done;
  const [direct] = await pythonCalls([["SHEETNET.PREDICT", [[["not a model"]], table]]]);
  assert.deepEqual(predicted, { error: "#VALUE!", message: messageOf(direct) });
});

test("an error cell in a range reaches sheetnet as its code and is named in the message", async () => {
  const table = await python(["table", "40", "2"]);
  const holey = table.map((row) => [...row]);
  holey[6][1] = errorCell("#N/A");  // moisture on the sixth data row
  const made = runtime();
  const cell = await made.calculate("TRAIN", [holey, "grade", "3", "ignore=lot; blank_rows=skip"]).done;
  const asCode = table.map((row) => [...row]);
  asCode[6][1] = "#N/A";
  const [answer] = await pythonCalls([["SHEETNET.TRAIN", [asCode, "grade", "3", "ignore=lot; blank_rows=skip"]]]);
  assert.equal(cell.error, "#VALUE!");
  assert.equal(cell.message, messageOf(answer));
  assert.ok(cell.message.includes("#N/A"), cell.message);  // named as the error it is, not as a blank
  const sent = made.requests.find((r) => r.method === "POST").body.args[0];  // the table by columns: this one as its cells
  assert.equal(sent.columns[1][5], "#N/A");
});

test("a value that is not a cell value is refused before anything is sent", async () => {
  const made = runtime();
  const cell = await made.calculate("LAGS", [[["x"], [{ type: "Entity", text: "a linked record" }]], 1]).done;
  assert.equal(cell.error, "#VALUE!");
  assert.match(cell.message, /cannot read/);
  assert.equal(made.requests.length, 0);
});

test("no token, a wrong token and no server are #N/A errors that say what to do", async () => {
  const table = [["x"], [1], [2]];
  const none = await runtime({ token: "" }).calculate("LAGS", [table, 1]).done;
  assert.equal(none.error, "#N/A");
  assert.match(none.message, /task pane/);
  const wrong = await runtime({ token: "wrong-token-0123456789" }).calculate("LAGS", [table, 1]).done;
  assert.equal(wrong.error, "#N/A");
  assert.match(wrong.message, /access token/);
  const gone = await runtime({ fetcher: async () => { throw new TypeError("fetch failed"); } }).calculate("LAGS", [table, 1]).done;
  assert.deepEqual(gone, { error: "#N/A", message: `the sheetnet server at ${base} did not answer; start it with sheetnet serve` });
});

test("a TRAIN or SEARCH formula in value preview starts no training", async () => {
  const table = await python(["table", "40", "2"]);
  const made = runtime();
  const cell = await made.calculate("TRAIN", [table, "grade"], { preview: true }).done;
  assert.equal(cell.error, "#N/A");
  assert.match(cell.message, /preview/);
  const search = await made.calculate("SEARCH", [table, "grade"], { preview: true }).done;
  assert.equal(search.error, "#N/A");
  assert.equal(made.requests.length, 0);
  const quick = await made.calculate("LAGS", [[["x"], [1], [2]], 1], { preview: true }).done;
  assert.ok(quick.values, "a quick function still previews");
});

async function cancelledCell(id, args, message) {
  // start a long job from a cell, cancel it as Excel does, and see the cell and the server's job end
  const made = runtime();
  const running = made.calculate(id, args);
  let jobId = null;
  for (let i = 0; i < 200 && jobId === null; i++) {
    await new Promise((resolve) => setTimeout(resolve, 50));
    const polled = made.requests.find((r) => /\/v1\/jobs\/[0-9a-f]+$/.test(r.url));
    if (polled) jobId = polled.url.split("/").pop();
  }
  assert.ok(jobId, `the ${id} job never started`);
  assert.equal((await serverJob(jobId)).state, "running");
  running.cancel();  // what Excel does when the cell is edited or recalculated
  const cell = await running.done;
  assert.deepEqual(cell, { error: "#N/A", message });
  assert.ok(made.requests.some((r) => r.method === "DELETE" && r.url.endsWith(`/v1/jobs/${jobId}`)));
  let job = null;
  for (let i = 0; i < 200; i++) {
    job = await serverJob(jobId);
    if (job.state !== "running") break;
    await new Promise((resolve) => setTimeout(resolve, 50));
  }
  assert.equal(job.state, "cancelled");
  assert.equal(job.message, message);  // the server's words and the cell's agree
}

// tiny steps and no early end: jobs that run until cancelled (both stop within an epoch of the fit under way)
const SLOW = "ignore=lot; algorithm=gd; rate=0.0001; gradient_threshold=0; decay=0; patience=100000; epochs=1000000";

test("cancelling a TRAIN cell aborts the request and stops the server's job", async () => {
  const table = await python(["table", "400", "3"]);
  await cancelledCell("TRAIN", [table, "grade", "16,16", SLOW], "the training was cancelled");
});

test("cancelling a SEARCH cell stops the server's search job inside the fit under way", async () => {
  const table = await python(["table", "400", "3"]);  // its first fit alone would run for hours
  await cancelledCell("SEARCH", [table, "grade", null, SLOW, 5], "the search was cancelled");
});

test("the stand-in itself refuses what the documented contract rules out", async () => {
  const made = runtime();
  assert.throws(() => made.calculate("LAGS", []), ContractBroken);  // a required argument missing
  assert.throws(() => made.calculate("LAGS", [[["x"]], 1, 2]), ContractBroken);  // one argument too many
  assert.throws(() => new Runtime("CustomFunctions.associate('NOPE', () => 1);", metadata, {}), ContractBroken);
  const blanks = new Runtime("CustomFunctions.associate('LAGS', () => [[null]]);", metadata, {});
  await assert.rejects(blanks.calculate("LAGS", [[["x"]]]).done, ContractBroken);  // a result cell left null
  const ragged = new Runtime("CustomFunctions.associate('LAGS', () => [[1, 2], [3]]);", metadata, {});
  await assert.rejects(ragged.calculate("LAGS", [[["x"]]]).done, ContractBroken);
  const thrown = new Runtime("CustomFunctions.associate('LAGS', () => { throw new Error('boom'); });", metadata, {});
  assert.equal((await thrown.calculate("LAGS", [[["x"]]]).done).error, "#VALUE!");  // Excel's answer to an unhandled exception
});

// the doubles of a base64 column, read back as the server reads them (little-endian IEEE 754)
function doublesOf(text) {
  const bytes = Buffer.from(text, "base64");
  return Array.from({ length: bytes.length / 8 }, (_, i) => bytes.readDoubleLE(i * 8));
}

test("a table goes to the server by columns: numbers as base64 doubles, every other column as its cells", async () => {
  const made = runtime();
  // every length's padding (0, 1 and 2 '=') and a column longer than one chunk of the encoder
  for (const length of [0, 1, 2, 3, 4, 5, 1001]) {
    const cells = Array.from({ length }, (_, i) => (i % 7 === 3 ? null : (i - 500) / 3 + (i % 2 ? -0 : 1e-300)));
    const text = made.context.sheetnetDoubles(cells);
    assert.equal(text, Buffer.from(new Float64Array(cells.map((c) => (c === null ? NaN : c))).buffer).toString("base64"), `length ${length}`);
    assert.deepEqual(doublesOf(text).map((v) => (Number.isNaN(v) ? null : v)), cells);
  }
  const table = await python(["table", "300", "6"]);
  const model = (await pythonCalls([["SHEETNET.TRAIN", [table, "grade", "4", "ignore=lot; epochs=60; blank_rows=skip"]]]))[0];
  const holey = table.map((row) => [...row]);
  holey[4][1] = null;  // an empty cell: the column still goes as numbers (NaN)
  holey[5][2] = "";  // an empty text: the column goes as its cells, as the server would read it by rows
  holey[6][3] = true;  // TRUE in a number column: its cells, so the server names it
  holey[7][4] = errorCell("#N/A");
  holey[8] = holey[8].map(() => null);  // a blank row: a blank answer
  const cell = await made.calculate("PREDICT", [model, holey, "value, probabilities"]).done;
  const asCodes = holey.map((row) => row.map((v) => (v && typeof v === "object" ? "#N/A" : v)));
  const [expected] = await pythonCalls([["SHEETNET.PREDICT", [model, asCodes, "value, probabilities"]]]);
  assert.deepEqual(cell, { error: "#VALUE!", message: messageOf(expected) });  // the message the row form gets, word for word
  const sent = made.requests.find((r) => r.url.endsWith("/v1/functions/SHEETNET.PREDICT")).body.args[1];
  assert.deepEqual(sent.header, table[0]);
  const [lot, moisture, density, defects, altitude, processing, grade] = sent.columns;
  assert.ok(Array.isArray(lot) && Array.isArray(processing) && Array.isArray(grade));
  assert.deepEqual(doublesOf(moisture.numbers).map((v) => (Number.isNaN(v) ? null : v)), holey.slice(1).map((row) => row[1]));
  assert.deepEqual(density, holey.slice(1).map((row) => row[2]));  // the empty text kept as it is
  assert.equal(defects[5], true);
  assert.equal(altitude[6], "#N/A");
  // without the bad cells: every row answered, and exactly the Python answer on the rows
  const clean = table.map((row) => [...row]);
  clean[4][1] = null;
  clean[8] = clean[8].map(() => null);
  const answered = await made.calculate("PREDICT", [model, clean, "value, probabilities"]).done;
  const [direct] = await pythonCalls([["SHEETNET.PREDICT", [model, clean, "value, probabilities"]]]);
  assert.ok(answered.values, JSON.stringify(answered));
  assert.deepEqual(answered.values, direct);
  assert.deepEqual(answered.values[8], direct[0].map(() => ""));
  const about = await made.calculate("ABOUT", [model, clean]).done;
  assert.deepEqual(about.values, (await pythonCalls([["SHEETNET.ABOUT", [model, clean]]]))[0]);
});
