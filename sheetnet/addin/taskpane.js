// sheetnet task pane: trains through the local server, shows progress, the loss curve and holdout
// metrics, and (inside Excel) stores the model by applying the placements the server computes
// (POST /v1/placements): the block and its native-formula constants, their sheet and defined names.
// In a plain browser it is a dashboard of the server's models, training from a pasted table.
// Everything shown that comes from data (model, target and column names, messages) is set as text
// (textContent, text nodes): the pane never parses data as markup, so a name like <img onerror=...>
// shows as those characters and runs nothing. The page's content policy (sheetnet/addin) backs this.
"use strict";

const inExcel = () => typeof Office !== "undefined" && Office.context && Office.context.host;
const $ = (id) => document.getElementById(id);
const SVG = "http://www.w3.org/2000/svg";
let currentJob = null;

function storedToken() {
  const fromAddress = new URLSearchParams(window.location.hash.slice(1)).get("token");
  if (fromAddress) {
    localStorage.setItem("sheetnet-token", fromAddress);
    history.replaceState(null, "", window.location.pathname);
  }
  return localStorage.getItem("sheetnet-token") || "";
}

async function api(path, options = {}) {
  const response = await fetch(`${SHEETNET_BASE}${path}`, {
    ...options,
    headers: { "Authorization": `Bearer ${storedToken()}`, "Content-Type": "application/json", ...(options.headers || {}) },
  });
  const body = await response.json();
  if (!response.ok) throw new Error(body.detail || `the server answered ${response.status}`);
  return body;
}

function say(text, isError = false) {
  $("message").textContent = text;
  $("message").className = isError ? "error" : "";
}

function parseTable(text) {
  const lines = text.split(/\r?\n/).filter((line) => line.trim() !== "");
  const separator = lines.length && lines[0].includes("\t") ? "\t" : ",";
  return lines.map((line, index) => line.split(separator).map((cell) => {
    const value = cell.trim();
    if (index > 0 && value !== "" && !Number.isNaN(Number(value))) return Number(value);
    return value === "" ? null : value;
  }));
}

let selectedAddress = null; // where the last table came from, recorded in the block so the model can be refreshed

async function selectedTable() {
  if (!inExcel()) {
    selectedAddress = null;
    return parseTable($("table-text").value);
  }
  return Excel.run(async (context) => {
    const range = context.workbook.getSelectedRange();
    range.load("values, address");
    await context.sync();
    selectedAddress = range.address;
    return range.values;
  });
}

// Office.js's names for the visibilities a placement gives a sheet
const SHEET_VISIBILITY = { visible: "Visible", hidden: "Hidden", veryHidden: "VeryHidden" };

async function workbookNames() {
  return Excel.run(async (context) => {
    const names = context.workbook.names;
    names.load("items/name");
    await context.sync();
    return names.items.map((item) => item.name);
  });
}

function rectangle(rows, fill) {
  const width = Math.max(0, ...rows.map((row) => row.length));
  return rows.map((row) => [...row, ...Array(width - row.length).fill(fill)]);
}

// Applies the server's placements in the order sheetnet/placements.py documents; the pane holds no
// rule of its own about sheets, names or cells.
async function applyPlacements(placements) {
  await Excel.run(async (context) => {
    const workbook = context.workbook;
    // 1. the model's old names and sheets (looked up case-insensitively by Excel itself)
    const oldNames = placements.drop_names.map((name) => workbook.names.getItemOrNullObject(name));
    const oldSheets = placements.drop_sheets.map((title) => workbook.worksheets.getItemOrNullObject(title));
    await context.sync();
    // 0. nothing is dropped unless sheetnet wrote every sheet that would go (its A1 holds one of our marks)
    const present = oldSheets.filter((sheet) => !sheet.isNullObject);
    const firstCells = present.map((sheet) => sheet.load("name").getRange("A1").load("values"));
    await context.sync();
    present.forEach((sheet, i) => {
      if (!placements.owned_marks.includes(firstCells[i].values[0][0])) throw new Error(placements.not_ours.replace("{title}", sheet.name));
    });
    oldNames.forEach((item) => { if (!item.isNullObject) item.delete(); });
    oldSheets.forEach((sheet) => {
      if (sheet.isNullObject) return;
      sheet.visibility = SHEET_VISIBILITY.hidden;  // Excel refuses to delete a very hidden sheet
      sheet.delete();
    });
    await context.sync();
    // 2. our sheets, after the user's, each with its visibility
    const sheets = new Map();
    for (const plan of placements.sheets) {
      const sheet = workbook.worksheets.add(plan.title);
      sheet.visibility = SHEET_VISIBILITY[plan.visibility];
      sheets.set(plan.title, sheet);
    }
    const sheetNamed = (title) => sheets.get(title) || workbook.worksheets.getItem(title);
    const area = (sheet, top, left, height, width) => sheetNamed(sheet).getRangeByIndexes(top - 1, left - 1, height, width);
    // 3. values: text cells get the Text number format first, so a string starting with =, + or - stays text
    for (const block of placements.cells) {
      const values = rectangle(block.values, null).map((row) => row.map((value) => (value === null ? "" : value)));
      if (!values.length || !values[0].length) continue;
      const range = area(block.sheet, block.top, block.left, values.length, values[0].length);
      range.numberFormat = values.map((row) => row.map((value) => (typeof value === "string" && value !== "" ? "@" : "General")));
      range.values = values;
    }
    // then formulas, the only way a formula is written. Office.js has no setter for a legacy
    // (Ctrl+Shift+Enter) array formula; Excel with dynamic arrays evaluates a formula set through
    // range.formulas as an array formula, which for a one-cell answer is the same thing.
    for (const block of placements.formulas) {
      const formulas = rectangle(block.formulas, "");
      if (!formulas.length || !formulas[0].length) continue;
      const range = area(block.sheet, block.top, block.left, formulas.length, formulas[0].length);
      range.numberFormat = formulas.map((row) => row.map(() => "General"));  // a Text cell would keep the formula as text
      range.formulas = formulas;
    }
    // then our number formats (Excel's code for each) and column widths (in points), on our own sheets only
    for (const style of placements.formats || []) {
      const height = style.bottom - style.top + 1, width = style.right - style.left + 1;
      area(style.sheet, style.top, style.left, height, width).numberFormat = Array.from({ length: height }, () => Array(width).fill(style.excel));
    }
    for (const width of placements.widths || []) {
      area(width.sheet, 1, width.column, 1, 1).format.columnWidth = width.points;
    }
    // 4. workbook-level defined names
    for (const name of placements.names) {
      workbook.names.add(name.name, area(name.sheet, name.top, name.left, name.bottom - name.top + 1, name.right - name.left + 1));
    }
    await context.sync();
  });
}

async function storeInWorkbook(name, block) {
  if (!inExcel()) return null;
  const existing_names = await workbookNames();
  const placements = await api("/v1/placements", { method: "POST", body: JSON.stringify({ name, block, existing_names }) });
  await applyPlacements(placements);
  return placements;
}

function element(tag, attributes = {}, text = null, namespace = null) {
  const made = namespace ? document.createElementNS(namespace, tag) : document.createElement(tag);
  for (const [name, value] of Object.entries(attributes)) made.setAttribute(name, String(value));
  if (text !== null) made.textContent = String(text);
  return made;
}

function drawCurve(curve) {
  const svg = $("curve");
  svg.replaceChildren();
  if (!curve.length) { svg.hidden = true; return; }
  svg.hidden = false;
  const values = curve.flatMap((point) => [point[1], point[2]]).filter((v) => v !== null && v > 0);
  const low = Math.log(Math.min(...values)), high = Math.log(Math.max(...values)) || low + 1;
  const last = curve[curve.length - 1][0] || 1;
  const x = (epoch) => 30 + (280 * (epoch - 1)) / Math.max(last - 1, 1);
  const y = (loss) => 10 + 130 * (1 - (Math.log(loss) - low) / Math.max(high - low, 1e-9));
  const shapes = [
    element("line", { x1: 30, y1: 140, x2: 310, y2: 140, stroke: "#90a4ae" }, null, SVG),
    element("line", { x1: 30, y1: 10, x2: 30, y2: 140, stroke: "#90a4ae" }, null, SVG),
  ];
  for (const [column, colour] of [[1, "#1565c0"], [2, "#ef6c00"]]) {
    const points = curve.filter((p) => p[column] !== null && p[column] > 0).map((p) => `${x(p[0]).toFixed(1)},${y(p[column]).toFixed(1)}`);
    if (points.length) shapes.push(element("polyline", { fill: "none", stroke: colour, "stroke-width": 1.6, points: points.join(" ") }, null, SVG));
  }
  shapes.push(
    element("text", { x: 34, y: 155, "font-size": 9 }, "epoch 1", SVG),
    element("text", { x: 270, y: 155, "font-size": 9 }, `epoch ${last}`, SVG),
    element("text", { x: 200, y: 20, "font-size": 9, fill: "#1565c0" }, "training", SVG),
    element("text", { x: 250, y: 20, "font-size": 9, fill: "#ef6c00" }, "validation", SVG),
  );
  svg.append(...shapes);
}

function showMetrics(about) {
  const rows = about.slice(1).filter((row) => String(row[0]).startsWith("holdout ") || ["stopped by", "epochs", "layers"].includes(row[0]));
  $("metrics").querySelector("tbody").replaceChildren(...rows.map((row) => {
    const value = typeof row[1] === "number" && !Number.isInteger(row[1]) ? row[1].toFixed(4) : row[1];
    const line = element("tr");
    line.append(element("td", {}, String(row[0]).replace("holdout ", "")), element("td", {}, value === null ? "" : value));
    return line;
  }));
  $("metrics").hidden = rows.length === 0;
}

function modelLine(model) {
  const about = Object.fromEntries(model.about.slice(1));
  const metric = Object.keys(about).find((k) => k.startsWith("holdout ") && typeof about[k] === "number" && k !== "holdout rows");
  const line = element("li");
  line.append(element("strong", {}, model.name));
  line.append(document.createTextNode(`: ${about.target}, ${about.layers}${metric ? `, ${metric.replace("holdout ", "")} ${about[metric].toFixed(3)}` : ""}`));
  return line;
}

async function refreshModels() {
  try {
    const { models } = await api("/v1/models");
    $("connection").textContent = "connected";
    $("token-section").hidden = true;
    $("models").replaceChildren(...(models.length ? models.map(modelLine) : [element("li", { class: "muted" }, "none yet")]));
  } catch (error) {
    $("connection").textContent = "not connected";
    $("token-section").hidden = false;
    say(error.message, true);
  }
}

async function train() {
  try {
    const table = await selectedTable();
    if (!table.length || table.length < 3) throw new Error("select (or paste) a table: a header row and at least two data rows");
    const holdout = Number($("holdout").value);
    const seed = Number($("seed").value);
    const name = $("model-name").value.trim();
    // the server splits and seeds as every door does (one meaning of the auto mode and of the seed)
    const args = [table, $("target").value.trim(), $("hidden").value.trim(), $("settings").value.trim() || null];
    const body = { name, args, holdout, mode: $("mode").value, seed: Number.isInteger(seed) ? seed : null, address: selectedAddress };
    const job = await api("/v1/jobs", { method: "POST", body: JSON.stringify(body) });
    currentJob = job.id;
    $("progress").hidden = false;
    $("cancel").hidden = false;
    say("training…");
    await follow(job.id, name);
  } catch (error) {
    say(error.message, true);
  }
}

async function follow(id, name) {
  for (;;) {
    const job = await api(`/v1/jobs/${id}`);
    $("progress-bar").value = job.epochs ? (100 * job.epoch) / job.epochs : 0;
    $("progress-text").textContent = job.epoch ? `epoch ${job.epoch}, loss ${job.training_loss.toPrecision(4)}` : "starting";
    drawCurve(job.curve);
    if (job.state !== "running") {
      $("cancel").hidden = true;
      currentJob = null;
      if (job.state === "done") {
        const about = (await api("/v1/models")).models.find((m) => m.name === name).about;
        showMetrics(about);
        const stored = await storeInWorkbook(name, job.result);
        say(stored
          ? `model ${name} stored in the workbook under the name ${name}, with ${stored.names.length - 1} named constants for native formulas`
          : `model ${name} trained`);
        $("progress-bar").value = 100;
      } else {
        say(job.message || job.state, true);
      }
      await refreshModels();
      return;
    }
    await new Promise((resolve) => setTimeout(resolve, 250));
  }
}

async function cancel() {
  if (currentJob) await api(`/v1/jobs/${currentJob}`, { method: "DELETE" });
}

function start() {
  storedToken();
  $("mode-note").textContent = inExcel()
    ? "Select the table (header row included) in the sheet, then press Train."
    : "Not inside Excel: paste a table below to train on it; this page lists the models the server knows.";
  $("table-from-text").hidden = !!inExcel();
  $("train").addEventListener("click", train);
  $("cancel").addEventListener("click", cancel);
  $("save-token").addEventListener("click", () => { localStorage.setItem("sheetnet-token", $("token").value.trim()); refreshModels(); });
  refreshModels();
}

if (typeof Office !== "undefined" && Office.onReady) {
  Office.onReady(start);
} else {
  start();
}
