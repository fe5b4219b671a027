// sheetnet task pane: trains through the local server, shows progress, the loss curve and holdout
// metrics, and (inside Excel) stores the model block on a very hidden sheet under a defined name.
// In a plain browser it is a dashboard of the server's models, training from a pasted table.
"use strict";

const inExcel = () => typeof Office !== "undefined" && !window.sheetnetNoOffice && Office.context && Office.context.host;
const $ = (id) => document.getElementById(id);
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

async function selectedTable() {
  if (!inExcel()) return parseTable($("table-text").value);
  return Excel.run(async (context) => {
    const range = context.workbook.getSelectedRange();
    range.load("values");
    await context.sync();
    return range.values;
  });
}

async function storeInWorkbook(name, block) {
  if (!inExcel()) return false;
  await Excel.run(async (context) => {
    const sheets = context.workbook.worksheets;
    const sheetName = `sheetnet_${name}`.slice(0, 31);
    const old = sheets.getItemOrNullObject(sheetName);
    const oldName = context.workbook.names.getItemOrNullObject(name);
    await context.sync();
    if (!oldName.isNullObject) oldName.delete();
    if (!old.isNullObject) old.delete();
    const sheet = sheets.add(sheetName);
    const range = sheet.getRangeByIndexes(0, 0, block.length, block[0].length);
    range.values = block.map((row) => row.map((value) => (value === null ? "" : value)));
    sheet.visibility = Excel.SheetVisibility.veryHidden;
    context.workbook.names.add(name, range);
    await context.sync();
  });
  return true;
}

function drawCurve(curve) {
  const svg = $("curve");
  if (!curve.length) { svg.hidden = true; return; }
  svg.hidden = false;
  const values = curve.flatMap((point) => [point[1], point[2]]).filter((v) => v !== null && v > 0);
  const low = Math.log(Math.min(...values)), high = Math.log(Math.max(...values)) || low + 1;
  const last = curve[curve.length - 1][0] || 1;
  const x = (epoch) => 30 + (280 * (epoch - 1)) / Math.max(last - 1, 1);
  const y = (loss) => 10 + 130 * (1 - (Math.log(loss) - low) / Math.max(high - low, 1e-9));
  const line = (column, colour) => {
    const points = curve.filter((p) => p[column] !== null && p[column] > 0).map((p) => `${x(p[0]).toFixed(1)},${y(p[column]).toFixed(1)}`);
    return points.length ? `<polyline fill="none" stroke="${colour}" stroke-width="1.6" points="${points.join(" ")}"/>` : "";
  };
  svg.innerHTML = `<line x1="30" y1="140" x2="310" y2="140" stroke="#90a4ae"/><line x1="30" y1="10" x2="30" y2="140" stroke="#90a4ae"/>`
    + line(1, "#1565c0") + line(2, "#ef6c00")
    + `<text x="34" y="155" font-size="9">epoch 1</text><text x="270" y="155" font-size="9">epoch ${last}</text>`
    + `<text x="200" y="20" font-size="9" fill="#1565c0">training</text><text x="250" y="20" font-size="9" fill="#ef6c00">validation</text>`;
}

function showMetrics(about) {
  const rows = about.slice(1).filter((row) => String(row[0]).startsWith("holdout ") || ["stopped by", "epochs", "layers"].includes(row[0]));
  $("metrics").querySelector("tbody").innerHTML = rows.map((row) => {
    const value = typeof row[1] === "number" && !Number.isInteger(row[1]) ? row[1].toFixed(4) : row[1];
    return `<tr><td>${String(row[0]).replace("holdout ", "")}</td><td>${value}</td></tr>`;
  }).join("");
  $("metrics").hidden = rows.length === 0;
}

async function refreshModels() {
  try {
    const { models } = await api("/v1/models");
    $("connection").textContent = "connected";
    $("token-section").hidden = true;
    $("models").innerHTML = models.length
      ? models.map((m) => {
          const about = Object.fromEntries(m.about.slice(1));
          const metric = Object.keys(about).find((k) => k.startsWith("holdout ") && typeof about[k] === "number" && k !== "holdout rows");
          return `<li><strong>${m.name}</strong>: ${about.target}, ${about.layers}${metric ? `, ${metric.replace("holdout ", "")} ${about[metric].toFixed(3)}` : ""}</li>`;
        }).join("")
      : `<li class="muted">none yet</li>`;
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
    const name = $("model-name").value.trim();
    let split = null;
    if (holdout > 0) {
      const target = $("target").value.trim();
      const textTarget = table.slice(1).some((row) => typeof row[table[0].indexOf(target)] === "string");
      const answer = await api("/v1/functions/SHEETNET.SPLIT", { method: "POST", body: JSON.stringify({ args: [table, holdout, 0, textTarget ? `stratified ${target}` : "random"] }) });
      if (answer.message) throw new Error(answer.message);
      split = answer.result;
    }
    const args = [table, $("target").value.trim(), $("hidden").value.trim(), $("settings").value.trim() || null, split];
    const job = await api("/v1/jobs", { method: "POST", body: JSON.stringify({ name, args }) });
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
        say(stored ? `model ${name} stored on a very hidden sheet under the name ${name}` : `model ${name} trained`);
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

if (typeof Office !== "undefined" && !window.sheetnetNoOffice && Office.onReady) {
  Office.onReady(start);
} else {
  start();
}
