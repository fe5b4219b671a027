// A stand-in for Office.js (Excel), for the task-pane browser test only. Written from Microsoft's
// Excel JavaScript API reference (OfficeDev/office-js-docs-reference, excel.*.yml), modelling only
// what the pane uses, with the rules those pages state:
// - proxies: setting a property or calling a method queues a command; context.sync() runs the queue
//   in order (a failing command stops the batch and rejects sync with an error carrying `code`);
//   a property can be read only after load() and a sync (else PropertyNotLoaded);
// - *OrNullObject lookups give an object whose isNullObject is known after sync;
// - Excel.run(batch) syncs what the batch left queued;
// - worksheets.add(name) adds at the end; Worksheet.delete() fails with InvalidOperation on a
//   "VeryHidden" sheet (the reference says to make it hidden or visible first);
// - Range.values: a string starting with "=", "+" or "-" is taken as a formula; null leaves a cell
//   unchanged (the reference's numberFormat example writes nulls); "" empties it;
// - Range.numberFormat: a grid of Excel format codes, one per cell, kept with the cell (a code is
//   recorded, never applied to what a cell shows);
// - Range.format (a RangeFormat): columnWidth, in points, sets the width of every column of the range;
//   it reads back as that width when the range's columns agree, else null (RangeFormat.columnWidth);
// Beyond the API reference (Excel's own behaviour, from memory of Microsoft Support's pages on
// formatting numbers as text and on keeping leading zeros):
// - a cell whose number format is Text ("@") keeps what is written as text, even "=..." or "007";
// - number-like text written to a General cell becomes a number;
// - the last visible sheet cannot be hidden or deleted; a second name spelt the same is refused.
// Sheet and defined names compare ignoring case, as Excel compares them.
(function () {
  "use strict";

  const state = { sheets: [], names: [], selection: null };
  const same = (a, b) => String(a).toLowerCase() === String(b).toLowerCase();

  class OfficeError extends Error {
    constructor(code, message) {
      super(`${code}: ${message}`);
      this.name = "RichApi.Error";
      this.code = code;
    }
  }

  function columnLetters(number) {
    let letters = "";
    for (let n = number; n > 0; n = Math.floor((n - 1) / 26)) letters = String.fromCharCode(65 + ((n - 1) % 26)) + letters;
    return letters;
  }

  function parseAddress(address) {  // "B2" or "A1:C3" (no sheet part), to 0-based indexes
    const cell = (text) => {
      const match = /^\$?([A-Za-z]+)\$?(\d+)$/.exec(text);
      if (!match) throw new OfficeError("InvalidArgument", `the stand-in cannot read the address '${address}'`);
      const column = match[1].toUpperCase().split("").reduce((n, c) => 26 * n + c.charCodeAt(0) - 64, 0);
      return [Number(match[2]) - 1, column - 1];
    };
    const [first, last = first] = address.split(":");
    const [top, left] = cell(first), [bottom, right] = cell(last);
    return { top, left, rows: bottom - top + 1, columns: right - left + 1 };
  }

  function sheetRecord(name) {
    return state.sheets.find((sheet) => same(sheet.name, name)) || null;
  }

  const NUMBER_LIKE = /^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$/;

  function enter(sheet, row, column, value, asFormula) {
    const key = `${row},${column}`;
    const old = sheet.cells.get(key) || { numberFormat: "General" };
    if (value === null || value === undefined) return;  // null leaves the cell as it is
    const format = old.numberFormat;
    let cell;
    if (value === "") cell = { kind: "empty" };
    else if (typeof value === "number") cell = { kind: "number", value };
    else if (typeof value === "boolean") cell = { kind: "boolean", value };
    else if (typeof value !== "string") throw new OfficeError("InvalidArgument", `a cell cannot hold ${typeof value}`);
    else if (format === "@") cell = { kind: "text", value };
    else if (/^[=+-]./.test(value) && !NUMBER_LIKE.test(value)) cell = { kind: "formula", formula: value };
    else if (!asFormula && NUMBER_LIKE.test(value.trim())) cell = { kind: "number", value: Number(value) };
    else cell = { kind: "text", value };
    cell.numberFormat = format;
    if (cell.kind === "empty" && format === "General") sheet.cells.delete(key);
    else sheet.cells.set(key, cell);
  }

  function cellValue(sheet, row, column) {
    const cell = sheet.cells.get(`${row},${column}`);
    if (!cell || cell.kind === "empty") return "";
    if (cell.kind === "formula") return cell.formula;  // the stand-in does not calculate
    return cell.value;
  }

  class RequestContext {
    constructor() {
      this.queue = [];
      this.workbook = new Workbook(this);
    }

    async sync() {
      const queue = this.queue;
      this.queue = [];
      for (const command of queue) command();  // a throw rejects sync; the rest of the batch is dropped
    }
  }

  class ClientObject {
    constructor(context) {
      this.context = context;
      this.loaded = {};
    }

    queue(command) {
      this.context.queue.push(command);
    }

    read(property) {
      if (!(property in this.loaded)) {
        throw new OfficeError("PropertyNotLoaded", `'${property}' is not available: call load("${property}") and then context.sync() first`);
      }
      return this.loaded[property];
    }

    load(properties) {
      const wanted = typeof properties === "string" ? properties.split(",").map((p) => p.trim()) : properties;
      this.queue(() => {
        for (const property of wanted) this.fill(property);
      });
      return this;
    }
  }

  class Range extends ClientObject {
    constructor(context, resolveSheet, area) {
      super(context);
      this.resolveSheet = resolveSheet;  // called when a command runs: the sheet may be created in the same batch
      this.area = area;
    }

    sheet() {
      const sheet = this.resolveSheet();
      if (!sheet) throw new OfficeError("ItemNotFound", "the range's worksheet does not exist");
      return sheet;
    }

    grid(value, property) {
      const { rows, columns } = this.area;
      if (!Array.isArray(value) || value.length !== rows || value.some((row) => !Array.isArray(row) || row.length !== columns)) {
        throw new OfficeError("InvalidArgument", `${property} must be ${rows} rows of ${columns} cells for this range`);
      }
      return value;
    }

    each(value, property, write) {
      this.queue(() => {
        const sheet = this.sheet();
        this.grid(value, property).forEach((row, i) => row.forEach((cell, j) => write(sheet, this.area.top + i, this.area.left + j, cell)));
      });
    }

    set values(value) {
      this.each(value, "values", (sheet, r, c, cell) => enter(sheet, r, c, cell, false));
    }

    get values() {
      return this.read("values");
    }

    set formulas(value) {
      this.each(value, "formulas", (sheet, r, c, cell) => enter(sheet, r, c, cell, true));
    }

    get formulas() {
      return this.read("formulas");
    }

    set numberFormat(value) {
      this.each(value, "numberFormat", (sheet, r, c, format) => {
        if (format === null || format === undefined) return;
        const key = `${r},${c}`;
        const cell = sheet.cells.get(key) || { kind: "empty" };
        sheet.cells.set(key, { ...cell, numberFormat: String(format) });
      });
    }

    get numberFormat() {
      return this.read("numberFormat");
    }

    get address() {
      return this.read("address");
    }

    get format() {
      return new RangeFormat(this);
    }

    fill(property) {
      const sheet = this.sheet();
      const { top, left, rows, columns } = this.area;
      const cells = (pick) => Array.from({ length: rows }, (_, i) => Array.from({ length: columns }, (_, j) => pick(top + i, left + j)));
      if (property === "values") this.loaded.values = cells((r, c) => cellValue(sheet, r, c));
      else if (property === "formulas") this.loaded.formulas = cells((r, c) => cellValue(sheet, r, c));
      else if (property === "numberFormat") this.loaded.numberFormat = cells((r, c) => (sheet.cells.get(`${r},${c}`) || { numberFormat: "General" }).numberFormat);
      else if (property === "address") {
        const first = `${columnLetters(left + 1)}${top + 1}`, last = `${columnLetters(left + columns)}${top + rows}`;
        this.loaded.address = `${sheet.name}!${first}${rows * columns > 1 ? `:${last}` : ""}`;
      } else throw new OfficeError("InvalidArgument", `the stand-in does not model Range.${property}`);
    }
  }

  class RangeFormat extends ClientObject {
    constructor(range) {
      super(range.context);
      this.range = range;
    }

    set columnWidth(points) {
      this.queue(() => {
        if (typeof points !== "number" || !(points >= 0)) throw new OfficeError("InvalidArgument", "columnWidth is a number of points");
        const sheet = this.range.sheet();
        sheet.columnWidths = sheet.columnWidths || new Map();
        for (let c = this.range.area.left; c < this.range.area.left + this.range.area.columns; c++) sheet.columnWidths.set(c, points);
      });
    }

    get columnWidth() {
      return this.read("columnWidth");
    }

    fill(property) {
      if (property !== "columnWidth") throw new OfficeError("InvalidArgument", `the stand-in does not model RangeFormat.${property}`);
      const sheet = this.range.sheet();
      const { left, columns } = this.range.area;
      const widths = Array.from({ length: columns }, (_, j) => (sheet.columnWidths && sheet.columnWidths.get(left + j)) || 48);  // 48 pt: Excel's default
      this.loaded.columnWidth = widths.every((w) => w === widths[0]) ? widths[0] : null;
    }
  }

  class Worksheet extends ClientObject {
    constructor(context, resolve, orNull = false) {
      super(context);
      this.resolve = resolve;
      this.orNull = orNull;
    }

    record() {
      const sheet = this.resolve();
      if (!sheet) throw new OfficeError("ItemNotFound", "the worksheet does not exist");
      return sheet;
    }

    get isNullObject() {
      return this.read("isNullObject");
    }

    get name() {
      return this.read("name");
    }

    get visibility() {
      return this.read("visibility");
    }

    set visibility(value) {
      this.queue(() => {
        if (!["Visible", "Hidden", "VeryHidden"].includes(value)) throw new OfficeError("InvalidArgument", `'${value}' is not a sheet visibility`);
        const sheet = this.record();
        const othersVisible = state.sheets.some((s) => s !== sheet && s.visibility === "Visible");
        if (value !== "Visible" && !othersVisible) throw new OfficeError("InvalidOperation", "a workbook keeps at least one visible sheet");
        sheet.visibility = value;
      });
    }

    delete() {
      this.queue(() => {
        const sheet = this.record();
        if (sheet.visibility === "VeryHidden") {
          throw new OfficeError("InvalidOperation", "a very hidden worksheet cannot be deleted; make it hidden or visible first");
        }
        if (sheet.visibility === "Visible" && !state.sheets.some((s) => s !== sheet && s.visibility === "Visible")) {
          throw new OfficeError("InvalidOperation", "the last visible worksheet cannot be deleted");
        }
        state.sheets.splice(state.sheets.indexOf(sheet), 1);
      });
    }

    getRangeByIndexes(startRow, startColumn, rowCount, columnCount) {
      if (![startRow, startColumn, rowCount, columnCount].every(Number.isInteger) || startRow < 0 || startColumn < 0 || rowCount < 1 || columnCount < 1) {
        throw new OfficeError("InvalidArgument", "getRangeByIndexes takes a 0-based start and counts of at least 1");
      }
      return new Range(this.context, () => this.resolve(), { top: startRow, left: startColumn, rows: rowCount, columns: columnCount });
    }

    getRange(address) {
      return new Range(this.context, () => this.resolve(), parseAddress(address));
    }

    fill(property) {
      const sheet = this.resolve();
      if (property === "isNullObject") {
        this.loaded.isNullObject = !sheet;
        return;
      }
      if (!sheet) throw new OfficeError("ItemNotFound", "the worksheet does not exist");
      if (property === "name" || property === "visibility") this.loaded[property] = sheet[property];
      else throw new OfficeError("InvalidArgument", `the stand-in does not model Worksheet.${property}`);
    }
  }

  class WorksheetCollection extends ClientObject {
    add(name) {
      let created = null;
      const sheet = new Worksheet(this.context, () => created);
      this.queue(() => {
        const title = String(name);
        if (!title || title.length > 31 || /[[\]:*?/\\]/.test(title)) throw new OfficeError("InvalidArgument", `'${title}' cannot be a sheet name`);
        if (sheetRecord(title)) throw new OfficeError("ItemAlreadyExists", `a sheet named '${title}' exists already`);
        created = { name: title, visibility: "Visible", cells: new Map() };
        state.sheets.push(created);  // at the end of the existing sheets
      });
      return sheet;
    }

    getItem(name) {
      return new Worksheet(this.context, () => sheetRecord(name));
    }

    getItemOrNullObject(name) {
      const sheet = new Worksheet(this.context, () => sheetRecord(name), true);
      sheet.queue(() => sheet.fill("isNullObject"));  // a null object's isNullObject is known after sync
      return sheet;
    }

    get items() {
      return this.read("items");
    }

    fill(property) {
      const [head, tail] = property.split("/");
      if (head !== "items") throw new OfficeError("InvalidArgument", `the stand-in does not model WorksheetCollection.${property}`);
      this.loaded.items = state.sheets.map((record) => {
        const sheet = new Worksheet(this.context, () => (state.sheets.includes(record) ? record : null));
        if (tail) sheet.fill(tail);
        return sheet;
      });
    }
  }

  class NamedItem extends ClientObject {
    constructor(context, resolve) {
      super(context);
      this.resolve = resolve;
    }

    get isNullObject() {
      return this.read("isNullObject");
    }

    get name() {
      return this.read("name");
    }

    get formula() {
      return this.read("formula");
    }

    delete() {
      this.queue(() => {
        const item = this.resolve();
        if (!item) throw new OfficeError("ItemNotFound", "the name does not exist");
        state.names.splice(state.names.indexOf(item), 1);
      });
    }

    fill(property) {
      const item = this.resolve();
      if (property === "isNullObject") this.loaded.isNullObject = !item;
      else if (!item) throw new OfficeError("ItemNotFound", "the name does not exist");
      else if (property === "name") this.loaded.name = item.name;
      else if (property === "formula") this.loaded.formula = `='${item.sheet.replace(/'/g, "''")}'!${item.address}`;
      else throw new OfficeError("InvalidArgument", `the stand-in does not model NamedItem.${property}`);
    }
  }

  const nameRecord = (name) => state.names.find((item) => same(item.name, name)) || null;

  class NamedItemCollection extends ClientObject {
    add(name, reference, comment) {
      const item = new NamedItem(this.context, () => nameRecord(name));
      this.queue(() => {
        if (!(reference instanceof Range)) throw new OfficeError("InvalidArgument", "the stand-in models names.add with a Range reference only");
        if (!/^[A-Za-z_\\][A-Za-z0-9_.]*$/.test(name)) throw new OfficeError("InvalidArgument", `'${name}' cannot be a defined name`);
        if (nameRecord(name)) throw new OfficeError("ItemAlreadyExists", `the name '${name}' exists already`);
        const sheet = reference.sheet();
        const { top, left, rows, columns } = reference.area;
        const address = `$${columnLetters(left + 1)}$${top + 1}:$${columnLetters(left + columns)}$${top + rows}`;
        state.names.push({ name, sheet: sheet.name, address, comment: comment || "" });
      });
      return item;
    }

    getItem(name) {
      return new NamedItem(this.context, () => nameRecord(name));
    }

    getItemOrNullObject(name) {
      const item = new NamedItem(this.context, () => nameRecord(name));
      item.queue(() => item.fill("isNullObject"));
      return item;
    }

    get items() {
      return this.read("items");
    }

    fill(property) {
      const [head, tail] = property.split("/");
      if (head !== "items") throw new OfficeError("InvalidArgument", `the stand-in does not model NamedItemCollection.${property}`);
      this.loaded.items = state.names.map((record) => {
        const item = new NamedItem(this.context, () => (state.names.includes(record) ? record : null));
        if (tail) item.fill(tail);
        return item;
      });
    }
  }

  class Workbook {
    constructor(context) {
      this.context = context;
      this.worksheets = new WorksheetCollection(context);
      this.names = new NamedItemCollection(context);
    }

    getSelectedRange() {
      if (!state.selection) throw new OfficeError("InvalidSelection", "nothing is selected");
      const { sheet, address } = state.selection;
      return new Range(this.context, () => sheetRecord(sheet), parseAddress(address));
    }
  }

  window.Excel = {
    SheetVisibility: { visible: "Visible", hidden: "Hidden", veryHidden: "VeryHidden" },
    async run(batch) {
      const context = new RequestContext();
      const answer = await batch(context);
      await context.sync();
      return answer;
    },
  };

  const associations = {};
  window.CustomFunctions = { associate: (id, fn) => { associations[id] = fn; } };

  window.Office = {
    HostType: { Excel: "Excel" },
    context: { host: "Excel" },
    onReady(callback) {
      const info = { host: "Excel", platform: "OfficeOnline" };
      return Promise.resolve().then(() => (callback ? callback(info) : undefined)).then(() => info);
    },
  };

  // the test's handle: lay out a workbook, select a range, read back everything that was written
  window.sheetnetStandIn = {
    associations,
    seed({ sheets, names = [], selection = null }) {
      state.sheets = sheets.map(({ name, visibility = "Visible", rows = [], textFormat = false }) => {
        const record = { name, visibility, cells: new Map() };
        rows.forEach((row, i) => row.forEach((value, j) => {
          if (value === null || value === "") return;
          const text = typeof value === "string";
          record.cells.set(`${i},${j}`, text ? { kind: "text", value, numberFormat: textFormat ? "@" : "General" }
            : { kind: typeof value === "number" ? "number" : "boolean", value, numberFormat: "General" });
        }));
        return record;
      });
      state.names = names.map((item) => ({ comment: "", ...item }));
      state.selection = selection;
    },
    snapshot() {
      return {
        sheets: state.sheets.map((sheet) => ({
          name: sheet.name,
          visibility: sheet.visibility,
          cells: Object.fromEntries([...sheet.cells.entries()].map(([key, cell]) => {
            const [r, c] = key.split(",").map(Number);
            return [`${columnLetters(c + 1)}${r + 1}`, cell];
          })),
          columnWidths: Object.fromEntries([...(sheet.columnWidths || new Map()).entries()].map(([c, points]) => [columnLetters(c + 1), points])),
        })),
        names: state.names.map(({ name, sheet, address }) => ({ name, sheet, address })),
      };
    },
  };
})();
