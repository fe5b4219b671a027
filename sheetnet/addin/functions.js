// sheetnet custom functions: each forwards its arguments to the local sheetnet server.
// The token is the one the task pane stored (the server prints it at start).
//
// The contract, from Microsoft's custom-functions documentation (custom-functions-parameter-options,
// custom-functions-errors, custom-functions-web-reqs, custom-functions-formula-value-preview and the
// custom-functions-runtime typings):
// - Excel passes every declared parameter (null for an omitted optional one), then an invocation
//   object, always last; it is never sent to the server.
// - A failure is thrown as CustomFunctions.Error: #VALUE! (invalidValue) with sheetnet's message when
//   sheetnet refuses the input, #N/A (notAvailable) when the server cannot answer. Both codes carry a
//   message, shown in the cell's error indicator; IFERROR and ISERROR see a real error.
// - With allowErrorForDataTypeAny, an error cell reaches the function as an error object; it is sent
//   as its code ("#N/A"), which sheetnet names in its messages.
// - TRAIN is cancelable: Excel calls invocation.onCanceled when the cell is edited, its inputs change
//   or the user recalculates; the request is aborted and the server's training job cancelled.
//   In formula value preview (invocation.isInValuePreview) no training starts (TRAIN, SEARCH).
const SHEETNET_BASE = "%SHEETNET_BASE%";
const SHEETNET_FUNCTIONS = %SHEETNET_FUNCTIONS%;
const SHEETNET_MARKER = "#SHEETNET!";
const SHEETNET_POLL_MS = 250;
// the data-type spelling of error cells (Excel.ErrorCellValue's errorType) and the codes a cell shows
const SHEETNET_ERROR_TYPES = {
  Blocked: "#BLOCKED!", Busy: "#BUSY!", Calc: "#CALC!", Connect: "#CONNECT!", Div0: "#DIV/0!", Field: "#FIELD!",
  GettingData: "#GETTING_DATA", NotAvailable: "#N/A", Name: "#NAME?", Null: "#NULL!", Num: "#NUM!", Ref: "#REF!",
  Spill: "#SPILL!", Value: "#VALUE!",
};

class SheetnetRefusal extends Error {}  // a value sheetnet cannot send; becomes #VALUE! with this message

function sheetnetToken() {
  try {
    return globalThis.localStorage.getItem("sheetnet-token") || "";
  } catch (error) {
    return "";
  }
}

function sheetnetCellError(code, message) {
  const codes = CustomFunctions.ErrorCode;
  return new CustomFunctions.Error(code === "value" ? codes.invalidValue : codes.notAvailable, message);
}

function sheetnetErrorCode(value) {
  if (typeof CustomFunctions !== "undefined" && value instanceof CustomFunctions.Error) return String(value.code);
  if (typeof value.code === "string" && value.code.startsWith("#")) return value.code;
  if (value.type === "Error" && value.errorType) return SHEETNET_ERROR_TYPES[value.errorType] || "#VALUE!";
  return null;
}

// A cell value as JSON: numbers, texts, TRUE/FALSE and blanks as they are; an error as its code
function sheetnetCell(value) {
  if (value === undefined || value === null) return null;
  if (typeof value === "number") return Number.isFinite(value) ? value : null;
  if (typeof value === "string" || typeof value === "boolean") return value;
  if (Array.isArray(value)) return value.map(sheetnetCell);
  if (typeof value === "object") {
    const code = sheetnetErrorCode(value);
    if (code !== null) return code;
  }
  throw new SheetnetRefusal("a cell holds a value sheetnet cannot read (a picture or a linked data type, say); give numbers, text or TRUE/FALSE");
}

function sheetnetArguments(name, args) {
  const values = args.slice(0, -1).slice(0, SHEETNET_FUNCTIONS[name].arguments);  // the invocation is last
  while (values.length && (values[values.length - 1] === null || values[values.length - 1] === undefined)) values.pop();
  const tables = SHEETNET_FUNCTIONS[name].tables || [];
  return values.map((value, i) => (tables.includes(i) ? sheetnetByColumns(sheetnetCell(value)) : sheetnetCell(value)));
}

// A table range as the server's column form (sheetnet.cells.COLUMN_FORM): {"header": [...], "columns": [...]}.
// A column whose cells are all numbers or empty (null) goes as its numbers, IEEE 754 doubles in little-endian
// order written as base64 text, an empty cell as NaN: the server reads it with no work per cell. Any other
// column (a text, TRUE/FALSE, an error code, an empty text "") goes as its list of cells, exactly as in the row
// form, so the server reads every cell as it would in a range of rows. A range of one row, or rows of unequal
// length, goes as rows.
function sheetnetByColumns(rows) {
  if (!Array.isArray(rows) || rows.length < 2 || !rows.every((row) => Array.isArray(row) && row.length === rows[0].length)) return rows;
  const height = rows.length - 1;
  const columns = rows[0].map((_, j) => {
    const cells = new Array(height);
    let numbers = true;
    for (let i = 0; i < height; i++) {
      const cell = rows[i + 1][j];
      cells[i] = cell;
      if (cell !== null && typeof cell !== "number") numbers = false;
    }
    return numbers ? { numbers: sheetnetDoubles(cells) } : cells;
  });
  return { header: rows[0], columns };
}

const SHEETNET_BASE64 = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";

// numbers (null for an empty cell) as little-endian doubles in base64 (RFC 4648, with padding); written here,
// not with btoa, which the custom-functions runtime need not offer
function sheetnetDoubles(cells) {
  const bytes = new Uint8Array(cells.length * 8);
  const view = new DataView(bytes.buffer);
  cells.forEach((cell, i) => view.setFloat64(i * 8, cell === null ? NaN : cell, true));
  const parts = [];
  const chunk = [];
  let k = 0;
  for (; k + 2 < bytes.length; k += 3) {
    const n = (bytes[k] << 16) | (bytes[k + 1] << 8) | bytes[k + 2];
    chunk.push(SHEETNET_BASE64[n >> 18], SHEETNET_BASE64[(n >> 12) & 63], SHEETNET_BASE64[(n >> 6) & 63], SHEETNET_BASE64[n & 63]);
    if (chunk.length >= 8192) parts.push(chunk.splice(0).join(""));
  }
  if (k < bytes.length) {
    const n = (bytes[k] << 16) | ((k + 1 < bytes.length ? bytes[k + 1] : 0) << 8);
    chunk.push(SHEETNET_BASE64[n >> 18], SHEETNET_BASE64[(n >> 12) & 63], k + 1 < bytes.length ? SHEETNET_BASE64[(n >> 6) & 63] : "=", "=");
  }
  parts.push(chunk.join(""));
  return parts.join("");
}

async function sheetnetRequest(path, options, token) {
  let response;
  try {
    response = await fetch(`${SHEETNET_BASE}${path}`, {
      ...options,
      headers: { "Authorization": `Bearer ${token}`, "Content-Type": "application/json" },
    });
  } catch (error) {
    if (error && error.name === "AbortError") throw sheetnetCellError("n/a", "the calculation was cancelled");
    throw sheetnetCellError("n/a", `the sheetnet server at ${SHEETNET_BASE} did not answer; start it with sheetnet serve`);
  }
  let body = null;
  try {
    body = await response.json();
  } catch (error) {
    body = null;
  }
  if (!response.ok) {
    const detail = body && typeof body.detail === "string" ? body.detail : `the sheetnet server answered ${response.status}`;
    // the caller's own arguments are wrong: #VALUE!; the server cannot serve now (token, busy, bug): #N/A
    throw sheetnetCellError(response.status === 400 || response.status === 422 ? "value" : "n/a", detail);
  }
  return body;
}

function sheetnetMessage(text) {
  return String(text).startsWith(SHEETNET_MARKER) ? String(text).slice(SHEETNET_MARKER.length).trim() : String(text);
}

function sheetnetResult(rows) {
  const first = rows.length && rows[0].length ? rows[0][0] : null;
  if (typeof first === "string" && first.startsWith(SHEETNET_MARKER)) throw sheetnetCellError("value", sheetnetMessage(first));
  return rows.map((row) => row.map((value) => (value === null ? "" : value)));
}

function sheetnetPause(ms, signal) {
  return new Promise((resolve) => {
    const timer = setTimeout(resolve, ms);
    signal.addEventListener("abort", () => { clearTimeout(timer); resolve(); }, { once: true });
  });
}

function sheetnetJobName(invocation) {
  // a cell's training is listed by the server (and the task pane) under its cell, like cell_Sheet1_B2
  const where = invocation && typeof invocation.address === "string" ? invocation.address.replace(/[^A-Za-z0-9_.]/g, "_") : "training";
  return `cell_${where}`.slice(0, 200);
}

async function sheetnetJob(name, values, invocation, token) {
  // TRAIN and SEARCH run as server jobs: polled for their end, cancelled with the cell
  const cancelled = name === "SHEETNET.SEARCH" ? "the search was cancelled" : "the training was cancelled";
  const stop = new AbortController();
  let jobId = null;
  const cancelJob = () => {
    stop.abort();
    if (jobId !== null) {
      fetch(`${SHEETNET_BASE}/v1/jobs/${jobId}`, { method: "DELETE", headers: { "Authorization": `Bearer ${token}` }, keepalive: true })
        .catch(() => undefined);  // the server may be gone already; nothing is left to stop then
    }
  };
  if (invocation) invocation.onCanceled = cancelJob;
  const job = await sheetnetRequest("/v1/jobs", { method: "POST", body: JSON.stringify({ name: sheetnetJobName(invocation), function: name, args: values }), signal: stop.signal }, token);
  jobId = job.id;
  if (stop.signal.aborted) cancelJob();  // cancelled while the job was being created
  for (;;) {
    if (stop.signal.aborted) throw sheetnetCellError("n/a", cancelled);
    const status = await sheetnetRequest(`/v1/jobs/${jobId}`, { signal: stop.signal }, token);
    if (status.state === "done") return sheetnetResult(status.result);
    if (status.state === "failed") throw sheetnetCellError("value", sheetnetMessage(status.message));
    if (status.state === "cancelled") throw sheetnetCellError("n/a", cancelled);
    await sheetnetPause(SHEETNET_POLL_MS, stop.signal);
  }
}

async function callSheetnet(name, args) {
  const invocation = args.length ? args[args.length - 1] : undefined;
  let values;
  try {
    values = sheetnetArguments(name, args);
  } catch (error) {
    if (error instanceof SheetnetRefusal) throw sheetnetCellError("value", error.message);
    throw error;
  }
  if (!SHEETNET_FUNCTIONS[name].preview && invocation && invocation.isInValuePreview) {
    throw sheetnetCellError("n/a", "a training starts when the formula is entered, not in the formula preview");
  }
  const token = sheetnetToken();
  if (!token) {
    throw sheetnetCellError("n/a", "no access token yet: open the sheetnet task pane and paste the token sheetnet serve printed");
  }
  if (SHEETNET_FUNCTIONS[name].job) return sheetnetJob(name, values, invocation, token);
  const body = await sheetnetRequest(`/v1/functions/${encodeURIComponent(name)}`, { method: "POST", body: JSON.stringify({ args: values }) }, token);
  return sheetnetResult(body.result);
}
