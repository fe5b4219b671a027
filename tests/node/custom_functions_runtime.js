// A stand-in for Excel's custom-functions runtime, for the add-in's Node test only. Written from
// Microsoft's documentation (learn.microsoft.com/office/dev/add-ins/excel/: custom-functions-json,
// custom-functions-parameter-options, custom-functions-errors, custom-functions-web-reqs,
// custom-functions-formula-value-preview; and the custom-functions-runtime typings), modelling what
// those pages state:
// - the script registers functions with CustomFunctions.associate(id, fn) (or a mapping of them); an
//   id must be in the metadata, and only associated ids are callable;
// - Excel passes every declared parameter in order, null for an omitted optional one, a matrix
//   parameter as a 2-D array (a single value as [[value]]), then the invocation object, always last
//   (functionName; address when the options ask requiresAddress; isInValuePreview; a cancelable
//   function sets invocation.onCanceled, which Excel calls when it cancels the calculation);
// - with allowErrorForDataTypeAny an error cell reaches an `any` parameter as an error value; the
//   pages do not spell out its JavaScript shape, so the stand-in passes a CustomFunctions.Error with
//   the code (an assumption); without the flag the function is not called and the cell shows the error;
// - a thrown (or rejected) CustomFunctions.Error shows its code; only #VALUE! and #N/A carry the custom
//   message; #NAME? and #REF! are input errors only; any other exception shows #VALUE!;
// - a matrix result is a rectangular 2-D array of numbers, texts, booleans or CustomFunctions.Error.
// Beyond the pages (the stand-in's own strictness, from no source): a null, undefined or non-finite
// number in a result, or an object that is not an error, is reported as a broken contract, since the
// pages do not say how Excel shows them.
"use strict";

const vm = require("node:vm");

const ErrorCode = Object.freeze({
  invalidValue: "#VALUE!",
  notAvailable: "#N/A",
  divisionByZero: "#DIV/0!",
  invalidNumber: "#NUM!",
  nullReference: "#NULL!",
  invalidName: "#NAME?",
  invalidReference: "#REF!",
});
const WITH_MESSAGE = new Set([ErrorCode.invalidValue, ErrorCode.notAvailable]);
const INPUT_ONLY = new Set([ErrorCode.invalidName, ErrorCode.invalidReference]);

class ContractBroken extends Error {}

class CustomFunctionsError {
  constructor(code, message) {
    if (!Object.values(ErrorCode).includes(code)) throw new ContractBroken(`'${code}' is not a CustomFunctions.ErrorCode`);
    this.code = code;
    if (message !== undefined) this.message = message;
  }
}

// a cell holding an error, as a test writes it into an argument
const errorCell = (code) => ({ [ERROR_CELL]: code });
const ERROR_CELL = Symbol("error cell");

function checkMetadata(metadata) {
  const ids = new Set();
  const enums = new Set((metadata.enums || []).map((e) => e.id.toLowerCase()));
  for (const fn of metadata.functions) {
    if (!/^[A-Za-z0-9.]+$/.test(fn.id)) throw new ContractBroken(`function id '${fn.id}' may hold only letters, digits and periods`);
    if (ids.has(fn.id)) throw new ContractBroken(`function id '${fn.id}' appears twice`);
    ids.add(fn.id);
    const options = fn.options || {};
    if (options.stream && (options.cancelable || options.requiresAddress || options.volatile)) {
      throw new ContractBroken(`${fn.id}: a streaming function cannot also be cancelable, volatile or ask its address`);
    }
    for (const p of fn.parameters) {
      if (!p.name) throw new ContractBroken(`${fn.id}: a parameter without a name`);
      if (p.dimensionality && !["scalar", "matrix"].includes(p.dimensionality)) throw new ContractBroken(`${fn.id}.${p.name}: dimensionality ${p.dimensionality}`);
      if (p.type && !["boolean", "number", "string", "any"].includes(p.type)) throw new ContractBroken(`${fn.id}.${p.name}: type ${p.type}`);
      if (p.customEnumId && !enums.has(p.customEnumId.toLowerCase())) throw new ContractBroken(`${fn.id}.${p.name}: no enum '${p.customEnumId}'`);
    }
  }
  for (const e of metadata.enums || []) {
    if (!["string", "number"].includes(e.type)) throw new ContractBroken(`enum ${e.id}: type ${e.type}`);
    for (const v of e.values) {
      if (!v.name || (e.type === "string" ? typeof v.stringValue !== "string" : typeof v.numberValue !== "number")) {
        throw new ContractBroken(`enum ${e.id}: a value without its name or ${e.type} value`);
      }
    }
  }
}

function cellResult(value, metadata) {
  if (value instanceof CustomFunctionsError) {
    if (INPUT_ONLY.has(value.code)) throw new ContractBroken(`${value.code} can be an input error only, never a result`);
    return { error: value.code, message: WITH_MESSAGE.has(value.code) ? value.message : undefined };
  }
  const check = (cell) => {
    if (cell instanceof CustomFunctionsError) return cellResult(cell, metadata);
    if (typeof cell === "string" || typeof cell === "boolean") return cell;
    if (typeof cell === "number" && Number.isFinite(cell)) return cell;
    throw new ContractBroken(`a result cell holds ${cell === null ? "null" : typeof cell} ${String(cell)}`);
  };
  if (metadata.result && metadata.result.dimensionality === "matrix") {
    if (!Array.isArray(value) || !value.length || value.some((row) => !Array.isArray(row) || row.length !== value[0].length)) {
      throw new ContractBroken("a matrix result must be a rectangular 2-D array");
    }
    return { values: value.map((row) => row.map(check)) };
  }
  return { values: [[check(value)]] };
}

class Runtime {
  // script: functions.js as served; metadata: functions.json as served; globals: what the page offers
  // (fetch, localStorage, ...), a shared runtime being a browser page.
  constructor(script, metadata, globals = {}) {
    checkMetadata(metadata);
    this.metadata = metadata;
    this.associations = new Map();
    const associate = (id, fn) => {
      if (typeof id === "object") {
        for (const [key, value] of Object.entries(id)) associate(key, value);
        return;
      }
      if (!metadata.functions.some((f) => f.id.toUpperCase() === String(id).toUpperCase())) {
        throw new ContractBroken(`associate('${id}'): no function with this id in the metadata`);
      }
      this.associations.set(String(id).toUpperCase(), fn);
    };
    const CustomFunctions = { associate, Error: CustomFunctionsError, ErrorCode };
    this.context = vm.createContext({
      CustomFunctions, console, setTimeout, clearTimeout, URL, URLSearchParams, AbortController, JSON,
      fetch: globals.fetch || fetch,
      localStorage: globals.localStorage,
    });
    vm.runInContext(script, this.context, { filename: "functions.js" });
  }

  // Calculates one cell: =NAMESPACE.ID(args...). Returns { done: Promise<cell>, cancel() }, where a
  // cell is { values } or { error, message }. `address` is the calling cell, like "Sheet1!B2".
  calculate(id, args, { preview = false, address = "Sheet1!A1" } = {}) {
    const described = this.metadata.functions.find((f) => f.id === id);
    const fn = this.associations.get(id.toUpperCase());
    if (!described || !fn) throw new ContractBroken(`${id} is not registered`);
    if (args.length > described.parameters.length) throw new ContractBroken(`${id} takes ${described.parameters.length} arguments; Excel refuses more`);
    const passed = [];
    for (const [i, parameter] of described.parameters.entries()) {
      let value = i < args.length ? args[i] : null;
      if (value === null || value === undefined) {
        if (!parameter.optional) throw new ContractBroken(`${id}: Excel does not accept the formula without ${parameter.name}`);
        passed.push(null);
        continue;
      }
      if (parameter.dimensionality === "matrix" && !Array.isArray(value)) value = [[value]];
      if (parameter.dimensionality !== "matrix" && Array.isArray(value)) throw new ContractBroken(`${id}.${parameter.name} is one value, not a range`);
      let blocked = null;
      const convert = (cell) => {
        if (cell && typeof cell === "object" && ERROR_CELL in cell) {
          if (this.metadata.allowErrorForDataTypeAny && (parameter.type || "any") === "any") return new CustomFunctionsError(cell[ERROR_CELL]);
          blocked = blocked || cell[ERROR_CELL];
          return null;
        }
        return cell;
      };
      value = Array.isArray(value) ? value.map((row) => row.map(convert)) : convert(value);
      if (blocked) return { done: Promise.resolve({ error: blocked }), cancel() {} };  // not called at all
      passed.push(value);
    }
    const options = described.options || {};
    const invocation = { functionName: id, isInValuePreview: preview };
    if (options.requiresAddress) invocation.address = address;
    const done = (async () => {
      try {
        return cellResult(await fn(...passed, invocation), described);
      } catch (thrown) {
        if (thrown instanceof ContractBroken) throw thrown;
        if (thrown instanceof CustomFunctionsError) return cellResult(thrown, described);
        return { error: ErrorCode.invalidValue, unhandled: String(thrown && thrown.stack ? thrown.stack : thrown) };
      }
    })();
    const cancel = () => {
      if (options.cancelable && typeof invocation.onCanceled === "function") invocation.onCanceled();
    };
    return { done, cancel, invocation };
  }
}

function memoryStorage(entries = {}) {
  const store = new Map(Object.entries(entries));
  return { getItem: (k) => (store.has(k) ? store.get(k) : null), setItem: (k, v) => store.set(k, String(v)), removeItem: (k) => store.delete(k) };
}

module.exports = { Runtime, ContractBroken, CustomFunctionsError, ErrorCode, errorCell, memoryStorage, checkMetadata };
