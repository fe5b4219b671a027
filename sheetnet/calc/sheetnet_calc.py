"""sheetnet inside LibreOffice Calc: the cell functions and the store command, as one UNO component.

Runs in LibreOffice's own Python with the standard library and uno only: no NumPy and no sheetnet
import. Every call goes to ``sheetnet serve`` on 127.0.0.1, found through the server file it writes
(``~/.sheetnet/server.json``: port, token, pid). The function table (names, arguments, help, the
interpreter allowed to start a server, time limits) is ``sheetnet_calc.json`` beside this file,
generated from sheetnet's registry when the extension is built.

- ``SHEETNET.*`` cell functions (service ``com.sun.star.sheet.AddIn``, service name ``SHEETNET``):
  each returns a 2-D array; failures are one readable ``#SHEETNET! ...`` cell, never a bare error.
- ``vnd.sheetnet.calc:store[?name=..&target=..&hidden=..&settings=..&holdout=..&mode=..&seed=..&table=..]`` (a protocol
  handler, on the Tools > Add-Ons menu and a toolbar): trains the selected table (header row first)
  as a server training job (which holds out rows, seeds and records the table's address as at every
  door) and writes the placements the server decides (hidden model sheet, block, constants,
  defined names). From the menu a small dialog asks for the name, the target column
  (the selection's last column by default), hidden layers and settings; with options in the command
  address, or in an office not on screen, no dialog: the target defaults to the last column and the
  name to the first free ``modelN``.
"""

import base64
import json
import math
import os
import socket
import ssl
import struct
import subprocess
import time
import urllib.error
import urllib.parse
import urllib.request

import unohelper
from com.sun.star.frame import XDispatchProvider, XNotifyingDispatch
from com.sun.star.lang import XInitialization, XLocalizable, XServiceInfo, XServiceName
from com.sun.star.sheet import XAddIn
from sheetnetcalc import XCellFunctions

HERE = os.path.dirname(os.path.abspath(__file__))
with open(os.path.join(HERE, "sheetnet_calc.json"), encoding="utf-8") as _handle:
    TABLE = json.load(_handle)
MARKER = TABLE["marker"]
FUNCTIONS = {entry["method"]: entry for entry in TABLE["functions"]}
BY_DISPLAY = {entry["name"].upper(): entry["method"] for entry in TABLE["functions"]}
WHOLE_LIMIT = 2.0 ** 53  # whole floats below this travel as JSON integers, as a browser sends them
START_WAIT = 20.0  # seconds to wait for a server this extension started
_started_at = [0.0]  # when this office last started a server (one attempt a minute at most)


class ServerProblem(Exception):
    """A failure to show in the cell; the text is already in spreadsheet words."""


# --- the server ----------------------------------------------------------------------------------
# The server file's reading mirrors sheetnet/server_file.py: this component cannot import sheetnet.

def server_file():
    return os.path.join(os.path.expanduser("~"), ".sheetnet", "server.json")


def _alive(pid):
    if os.name == "nt":  # os.kill there would end the process, not probe it: trust the file
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def read_server():
    """The server record, or None when no server has written one (or its process is gone)."""
    try:
        with open(server_file(), encoding="utf-8") as handle:
            record = json.load(handle)
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or not isinstance(record.get("port"), int) or not isinstance(record.get("token"), str):
        return None
    if isinstance(record.get("pid"), int) and not _alive(record["pid"]):
        return None
    return record


def _free_port():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def start_server():
    """Start ``sheetnet serve`` with the interpreter recorded at install time; the new record or None."""
    interpreter = TABLE.get("interpreter")
    if not interpreter or time.monotonic() - _started_at[0] < 60:
        return None
    _started_at[0] = time.monotonic()
    port = _free_port()
    log_folder = os.path.join(os.path.expanduser("~"), ".sheetnet")
    os.makedirs(log_folder, mode=0o700, exist_ok=True)
    with open(os.path.join(log_folder, "calc-server.log"), "ab") as log:
        subprocess.Popen(
            [interpreter, "-c", "import sys; from sheetnet.cli import main; sys.exit(main(sys.argv[1:]))", "serve", "--port", str(port)],
            stdin=subprocess.DEVNULL, stdout=log, stderr=log, start_new_session=True, close_fds=True,
        )
    deadline = time.monotonic() + START_WAIT
    while time.monotonic() < deadline:
        record = read_server()
        if record is not None and record["port"] == port:
            return record
        time.sleep(0.2)
    return None


def timeout_for(name):
    override = os.environ.get("SHEETNET_CALC_TIMEOUT")
    if override:
        try:
            return max(0.1, float(override))
        except ValueError:
            pass
    limits = TABLE["timeouts"]
    return float(limits.get(name, limits["default"]))


def _send(record, path, body, limit, method):
    request = urllib.request.Request(
        f"{record.get('scheme', 'http')}://127.0.0.1:{record['port']}{path}",
        data=None if body is None else json.dumps(body, allow_nan=False).encode("utf-8"),
        headers={"Authorization": f"Bearer {record['token']}", "Content-Type": "application/json"},
        method=method,
    )
    context = None
    if record.get("scheme") == "https":  # sheetnet serve --https: trust its own certificate, named in the server file
        context = ssl.create_default_context(cafile=record.get("certificate"))
    with urllib.request.urlopen(request, timeout=limit, context=context) as response:  # 127.0.0.1 only: the address is built here
        return json.loads(response.read().decode("utf-8"))


def too_slow(limit):
    return f"the sheetnet server did not answer within {limit:g} s; it may be busy: recalculate later, or restart sheetnet serve"


def call_server(path, body, name):
    """POST to the local server; the parsed answer, or a `ServerProblem` in spreadsheet words."""
    return request_server(path, body, name, "POST")


def get_server(path, name):
    return request_server(path, None, name, "GET")


def request_server(path, body, name, method):
    limit = timeout_for(name)
    record = read_server()
    if record is None:
        record = start_server()
    if record is None:
        raise ServerProblem("no sheetnet server is running; start one with: sheetnet serve")
    try:
        return _send(record, path, body, limit, method)
    except urllib.error.HTTPError as error:
        try:
            detail = json.loads(error.read().decode("utf-8")).get("detail")
        except ValueError:
            detail = None
        raise ServerProblem(str(detail or f"the sheetnet server refused the call (HTTP {error.code})")) from None
    except (socket.timeout, TimeoutError):
        raise ServerProblem(too_slow(limit)) from None
    except urllib.error.URLError as error:
        if isinstance(error.reason, (socket.timeout, TimeoutError)):
            raise ServerProblem(too_slow(limit)) from None
        raise ServerProblem(f"no sheetnet server answers on 127.0.0.1:{record['port']}; start one with: sheetnet serve") from None
    except (OSError, ValueError):
        raise ServerProblem("the sheetnet server's answer could not be read; restart sheetnet serve") from None


# --- cells in and out ----------------------------------------------------------------------------

def cell_in(value):
    """A Calc value as JSON: whole numbers as integers (as the Office add-in sends them), blanks as ''."""
    if isinstance(value, float):
        if math.isfinite(value) and value.is_integer() and abs(value) < WHOLE_LIMIT:
            return int(value)
        return value if math.isfinite(value) else None
    if value is None or isinstance(value, (str, int, bool)):
        return value
    return str(value)


def argument_in(value, kind):
    """A range as rows of cells; a one-cell range where one value is meant as that value."""
    if isinstance(value, tuple):
        rows = [[cell_in(v) for v in row] for row in value]
        if kind == "value" and len(rows) == 1 and len(rows[0]) == 1:
            return rows[0][0]
        return rows
    return cell_in(value)


def table_in(value):
    """A table range by columns (the server's column form, sheetnet.cells.COLUMN_FORM): a column of numbers
    and blanks as base64 doubles (blanks as NaN), which JSON carries as one text and the server reads with no
    work per cell; any other column as its cells. The server reads it exactly like the same range by rows."""
    header = [cell_in(v) for v in value[0]] if value else []
    columns = []
    for j in range(len(header)):
        cells = [row[j] if j < len(row) else None for row in value[1:]]
        if all(isinstance(v, float) or v is None or v == "" for v in cells):
            numbers = [v if isinstance(v, float) and math.isfinite(v) else math.nan for v in cells]
            columns.append({"numbers": base64.b64encode(struct.pack(f"<{len(numbers)}d", *numbers)).decode("ascii")})
        else:
            columns.append([cell_in(v) for v in cells])
    return {"header": header, "columns": columns}


def cell_out(value):
    """A JSON value as a Calc cell: numbers as doubles (Calc shows booleans as 0 and refuses big integers),
    blanks as empty text (a None would show #N/A)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return 1.0 if value else 0.0
    if isinstance(value, (int, float)):
        number = float(value)
        return number if math.isfinite(number) else ""
    return str(value)


def grid_out(rows):
    if not isinstance(rows, list) or not rows:
        return ((message("the sheetnet server sent no cells; restart sheetnet serve"),),)
    width = max(len(row) if isinstance(row, list) else 1 for row in rows)
    out = []
    for row in rows:
        cells = [cell_out(v) for v in (row if isinstance(row, list) else [row])]
        out.append(tuple(cells + [""] * (width - len(cells))))
    return tuple(out)


def message(text):
    return f"{MARKER} {text}"


def run_function(method, args):
    entry = FUNCTIONS[method]
    values = [table_in(v) if a["name"] == "table" and isinstance(v, tuple) and v else argument_in(v, a["kind"]) for v, a in zip(args, entry["arguments"])]
    while values and values[-1] is None:  # left-out optional arguments
        values.pop()
    try:
        answer = call_server("/v1/functions/" + urllib.parse.quote(entry["name"]), {"args": values}, entry["name"])
    except ServerProblem as problem:
        return ((message(str(problem)),),)
    except Exception as error:  # a bug here must still read as words in the cell
        return ((message(f"the Calc extension failed ({type(error).__name__}); please report it"),),)
    return grid_out(answer.get("result") if isinstance(answer, dict) else None)


# --- the add-in ----------------------------------------------------------------------------------

class CellFunctions(unohelper.Base, XCellFunctions, XAddIn, XServiceName, XServiceInfo, XLocalizable):
    def __init__(self, ctx):
        self.ctx = ctx
        self.locale = None

    # XServiceName: Calc stores each function as SERVICE.METHOD
    def getServiceName(self):
        return TABLE["service"]

    def getImplementationName(self):
        return TABLE["implementation"]

    def supportsService(self, name):
        return name in self.getSupportedServiceNames()

    def getSupportedServiceNames(self):
        return (TABLE["service"], "com.sun.star.sheet.AddIn")

    def setLocale(self, locale):
        self.locale = locale

    def getLocale(self):
        return self.locale

    # XAddIn: what the function wizard shows
    def getProgrammaticFuntionName(self, display_name):
        return BY_DISPLAY.get(display_name.upper(), "")

    def getDisplayFunctionName(self, method):
        return FUNCTIONS[method]["name"] if method in FUNCTIONS else ""

    def getFunctionDescription(self, method):
        entry = FUNCTIONS.get(method)
        return f"{entry['help']} Returns {entry['returns']}." if entry else ""

    def _argument(self, method, index):
        entry = FUNCTIONS.get(method)
        if entry is None or not 0 <= index < len(entry["arguments"]):
            return None
        return entry["arguments"][index]

    def getDisplayArgumentName(self, method, index):
        argument = self._argument(method, index)
        return argument["name"] if argument else ""

    def getArgumentDescription(self, method, index):
        argument = self._argument(method, index)
        return (argument["help"] + (" (optional)" if argument["optional"] else "")) if argument else ""

    def getProgrammaticCategoryName(self, method):
        return TABLE["category"]

    def getDisplayCategoryName(self, method):
        return TABLE["category"]


def _cell_function(method):
    def call(self, *args):
        return run_function(method, args)

    call.__name__ = method
    return call


for _method in FUNCTIONS:
    setattr(CellFunctions, _method, _cell_function(_method))


# --- the store command ---------------------------------------------------------------------------

def calc_reference(sheet, top, left, bottom, right):
    """A rectangle in Calc's own reference syntax: $'Sheet'.$A$1:$I$40."""
    def letters(number):
        text = ""
        while number:
            number, rest = divmod(number - 1, 26)
            text = chr(65 + rest) + text
        return text

    quoted = "'" + sheet.replace("'", "''") + "'"
    return f"${quoted}.${letters(left)}${top}:${letters(right)}${bottom}"


def _same(a, b):
    return a.casefold() == b.casefold()


def check_replaceable(doc, placements):
    """Refuse, before anything changes, placements that would drop a sheet sheetnet did not write
    (its A1 holds none of the marks the placements list), in the words the placements carry."""
    sheets = doc.Sheets
    marks = placements.get("owned_marks", [])
    for title in placements.get("drop_sheets", []):
        for existing in sheets.getElementNames():
            if _same(existing, title) and sheets.getByName(existing).getCellByPosition(0, 0).getString() not in marks:
                raise ServerProblem(placements.get("not_ours", "").replace("{title}", existing))


def number_format_key(doc, code):
    """The document's key of a Calc format code in the en-US locale, added when the document lacks it."""
    from com.sun.star.lang import Locale

    formats, locale = doc.NumberFormats, Locale("en", "US", "")
    key = formats.queryKey(code, locale, False)
    return key if key != -1 else formats.addNew(code, locale)


def apply_placements(doc, placements):
    """Apply placements in the documented order (see sheetnet/placements.py): refuse to replace a sheet
    of the user's, drop names and sheets, create sheets, write cells as values (setDataArray puts strings
    in as text, never as formulas), write formulas, number formats and column widths, define names.
    Calc has no very hidden state: such sheets become hidden."""
    check_replaceable(doc, placements)
    named = doc.NamedRanges
    for name in placements.get("drop_names", []):
        for existing in named.getElementNames():
            if _same(existing, name):
                named.removeByName(existing)
    sheets = doc.Sheets
    for title in placements.get("drop_sheets", []):
        for existing in sheets.getElementNames():
            if _same(existing, title):
                sheets.removeByName(existing)
    for plan in placements.get("sheets", []):
        sheets.insertNewByName(plan["title"], sheets.getCount())
        if plan.get("visibility", "visible") != "visible":
            sheets.getByName(plan["title"]).IsVisible = False
    for block in placements.get("cells", []):
        rows = block["values"]
        width = max((len(r) for r in rows), default=0)
        if not rows or not width:
            continue
        data = tuple(tuple([cell_out(v) for v in row] + [""] * (width - len(row))) for row in rows)
        sheet = sheets.getByName(block["sheet"])
        left, top = block["left"] - 1, block["top"] - 1
        sheet.getCellRangeByPosition(left, top, left + width - 1, top + len(rows) - 1).setDataArray(data)
    for block in placements.get("formulas", []):
        sheet = sheets.getByName(block["sheet"])
        for r, row in enumerate(block["formulas"]):
            for c, text in enumerate(row):
                target = sheet.getCellRangeByPosition(block["left"] - 1 + c, block["top"] - 1 + r, block["left"] - 1 + c, block["top"] - 1 + r)
                write_formula(doc, target, text, block.get("array", True))
    for style in placements.get("formats", []):
        area = sheets.getByName(style["sheet"]).getCellRangeByPosition(style["left"] - 1, style["top"] - 1, style["right"] - 1, style["bottom"] - 1)
        area.NumberFormat = number_format_key(doc, style["calc"])
    for width in placements.get("widths", []):  # a column's Width is in 1/100 mm
        sheets.getByName(width["sheet"]).getColumns().getByIndex(width["column"] - 1).Width = int(width["calc"])
    for name in placements.get("names", []):
        reference = calc_reference(name["sheet"], name["top"], name["left"], name["bottom"], name["right"])
        named.addNewByName(name["name"], reference, sheets.getByName(name["sheet"]).getCellByPosition(0, 0).CellAddress, 0)


def write_formula(doc, target, text, array):
    """A formula in spreadsheet-file syntax (commas, English names) through Calc's formula parser,
    since Calc's own API syntax separates arguments with semicolons."""
    from com.sun.star.sheet.AddressConvention import XL_A1
    from com.sun.star.sheet.FormulaLanguage import XL_ENGLISH
    from com.sun.star.sheet.FormulaMapGroup import ALL_EXCEPT_SPECIAL

    parser = doc.createInstance("com.sun.star.sheet.FormulaParser")
    parser.FormulaConvention = XL_A1
    mapper = doc.createInstance("com.sun.star.sheet.FormulaOpCodeMapper")
    parser.OpCodeMap = mapper.getAvailableMappings(XL_ENGLISH, ALL_EXCEPT_SPECIAL)
    tokens = parser.parseFormula(text.lstrip("="), target.getCellByPosition(0, 0).CellAddress)
    if array:
        target.setArrayTokens(tokens)
    else:
        target.getCellByPosition(0, 0).setTokens(tokens)


def _query(url):
    _, _, rest = url.partition("?")
    return {k: v[-1] for k, v in urllib.parse.parse_qs(rest, keep_blank_values=False).items()}


def _free_model_name(existing):
    taken = {n.casefold() for n in existing}
    number = 1
    while f"model{number}" in taken:
        number += 1
    return f"model{number}"


class Cancelled(Exception):
    pass


DIALOG_FIELDS = (
    ("name", "Model name"),
    ("target", "Column to predict"),
    ("hidden", "Hidden layers (8, or 8,4)"),
    ("settings", "Settings (epochs=500; rate=0.3)"),
    ("holdout", "Share of rows held out"),
)


def ask_options(ctx, defaults):
    """A small dialog for the menu and toolbar: the model's name, the target column, hidden layers and
    settings, filled with the defaults; the answers, or None when cancelled."""
    manager = ctx.ServiceManager
    model = manager.createInstanceWithContext("com.sun.star.awt.UnoControlDialogModel", ctx)
    model.Width, model.Height, model.Title = 260, 132, "sheetnet: store a model from the selected table"
    for row, (key, label) in enumerate(DIALOG_FIELDS):
        text = model.createInstance("com.sun.star.awt.UnoControlFixedTextModel")
        text.PositionX, text.PositionY, text.Width, text.Height, text.Label = 6, 9 + 20 * row, 118, 12, label
        model.insertByName("label_" + key, text)
        field = model.createInstance("com.sun.star.awt.UnoControlEditModel")
        field.PositionX, field.PositionY, field.Width, field.Height, field.Text = 126, 6 + 20 * row, 128, 14, defaults.get(key, "")
        model.insertByName(key, field)
    for key, label, kind, left in (("ok", "Train and store", 1, 126), ("cancel", "Cancel", 2, 194)):
        button = model.createInstance("com.sun.star.awt.UnoControlButtonModel")
        button.PositionX, button.PositionY, button.Width, button.Height, button.Label, button.PushButtonType = left, 108, 60, 16, label, kind
        model.insertByName(key, button)
    dialog = manager.createInstanceWithContext("com.sun.star.awt.UnoControlDialog", ctx)
    dialog.setModel(model)
    dialog.createPeer(manager.createInstanceWithContext("com.sun.star.awt.Toolkit", ctx), None)
    try:
        if dialog.execute() != 1:
            return None
        return {key: dialog.getControl(key).getText().strip() for key, _ in DIALOG_FIELDS}
    finally:
        dialog.dispose()


def file_address(selection):
    """The selection as a workbook file writes it, like 'Data'!$A$1:$D$61, recorded so the model can be refreshed."""
    where = selection.getRangeAddress()
    sheet = selection.getSpreadsheet().getName()
    first = calc_reference(sheet, where.StartRow + 1, where.StartColumn + 1, where.EndRow + 1, where.EndColumn + 1)
    quoted, _, cells = first[1:].partition(".")
    return f"{quoted}!{cells}"


def _number(text, what, whole=False):
    try:
        number = float(text)
    except ValueError:
        raise ServerProblem(f"the {what} is '{text}'; give a number such as {'0' if whole else '0.2'}") from None
    return int(number) if whole and number.is_integer() else number


def train_job(body, progress=None):
    """Train through a server job (the service splits, seeds and places as for every door); the done job."""
    limit = timeout_for("SHEETNET.TRAIN")
    job = call_server("/v1/jobs", body, "SHEETNET.TRAIN")
    deadline = time.monotonic() + limit
    while time.monotonic() < deadline:
        view = get_server("/v1/jobs/" + urllib.parse.quote(job["id"]), "SHEETNET.TRAIN")
        if view["state"] != "running":
            if view["state"] != "done":
                text = str(view.get("message") or f"the training job ended {view['state']}")
                raise ServerProblem(text[len(MARKER):].strip() if text.startswith(MARKER) else text)
            return view
        if progress is not None:
            progress(view.get("epoch") or 0, view.get("epochs") or 0)
        time.sleep(0.1)
    try:
        request_server("/v1/jobs/" + urllib.parse.quote(job["id"]), None, "SHEETNET.TRAIN", "DELETE")
    except ServerProblem:
        pass
    raise ServerProblem(f"the training did not finish within {limit:g} s and was cancelled; train fewer rows or epochs")


def store_model(doc, selection, options, ask=None, progress=None):
    """Train the selected table through the server and store the model; returns what happened, in words.
    ``ask`` (the dialog) gets the defaults and returns the options, or None to cancel."""
    if options.get("table"):
        sheet_name, _, address = options["table"].rpartition(".")
        sheet = doc.Sheets.getByName(sheet_name.strip("$'")) if sheet_name else doc.getCurrentController().getActiveSheet()
        selection = sheet.getCellRangeByName(address)
    if selection is None or not hasattr(selection, "getDataArray") or not hasattr(selection, "getRangeAddress"):
        raise ServerProblem("select the table first (its header row included), then run the command again")
    table = [[cell_in(v) for v in row] for row in selection.getDataArray()]
    if len(table) < 2:
        raise ServerProblem("the selection has no data rows; select the table with its header row and the rows below")
    existing = list(doc.NamedRanges.getElementNames())
    if ask is not None:
        defaults = {"name": _free_model_name(existing), "target": str(table[0][-1]), "hidden": "", "settings": "", "holdout": f"{TABLE['holdout']:g}"}
        options = ask(defaults)
        if options is None:
            raise Cancelled()
        options = {k: v for k, v in options.items() if v}
    target = options.get("target") or str(table[0][-1])
    name = options.get("name") or _free_model_name(existing)
    args = [table, target, options.get("hidden"), options.get("settings")]
    while args and args[-1] is None:
        args.pop()
    body = {
        "name": name, "args": args, "existing_names": existing, "address": file_address(selection),
        "holdout": _number(options["holdout"], "holdout share") if "holdout" in options else TABLE["holdout"],
        "mode": options.get("mode", "auto"),
    }
    if "seed" in options:
        body["seed"] = _number(options["seed"], "seed", whole=True)
    view = train_job(body, progress)
    placements = view.get("placements")
    if not placements:
        raise ServerProblem(str(view.get("message") or "the server sent no placements for the model; restart sheetnet serve"))
    apply_placements(doc, placements)
    plans = placements.get("sheets", [])
    hidden = ", ".join(plan["title"] for plan in plans if plan.get("visibility") != "visible")
    shown = ", ".join(plan["title"] for plan in plans if plan.get("visibility") == "visible")
    card = f"; its card is on the sheet {shown}" if shown else ""
    return f"model {name} ({target}) stored on the hidden sheet {hidden} under the defined name {name}{card}"


class StoreCommand(unohelper.Base, XInitialization, XDispatchProvider, XNotifyingDispatch, XServiceInfo):
    """The protocol handler behind the menu entry and the toolbar button."""

    def __init__(self, ctx):
        self.ctx = ctx
        self.frame = None

    def initialize(self, arguments):
        if arguments:
            self.frame = arguments[0]

    def getImplementationName(self):
        return "sheetnet.calc.StoreCommand"

    def supportsService(self, name):
        return name == "com.sun.star.frame.ProtocolHandler"

    def getSupportedServiceNames(self):
        return ("com.sun.star.frame.ProtocolHandler",)

    def queryDispatch(self, url, target, flags):
        return self if url.Complete.startswith("vnd.sheetnet.calc:store") else None

    def queryDispatches(self, requests):
        return tuple(self.queryDispatch(r.FeatureURL, r.FrameName, r.SearchFlags) for r in requests)

    def addStatusListener(self, listener, url):
        pass

    def removeStatusListener(self, listener, url):
        pass

    def _run(self, url):
        try:
            controller = self.frame.getController()
            doc = controller.getModel()
            options = _query(url.Complete)
            ask = (lambda defaults: ask_options(self.ctx, defaults)) if not options and self._on_screen() else None
            indicator = self._indicator()
            try:
                text = store_model(doc, controller.getSelection(), options, ask, self._progress(indicator))
            finally:
                if indicator is not None:
                    indicator.end()
            ok = True
        except Cancelled:
            return False, "cancelled"
        except ServerProblem as problem:
            text, ok = message(str(problem)), False
        except Exception as error:
            text, ok = message(f"storing the model failed ({type(error).__name__}: {error}); please report it"), False
        self._tell(text)
        return ok, text

    def _indicator(self):
        try:
            indicator = self.frame.createStatusIndicator()
            indicator.start("sheetnet: training", 100)
            return indicator
        except Exception:
            return None

    @staticmethod
    def _progress(indicator):
        def show(epoch, epochs):
            if indicator is not None and epochs:
                indicator.setText(f"sheetnet: training, epoch {epoch} of at most {epochs}")
                indicator.setValue(min(100, int(100 * epoch / epochs)))
        return show

    def _on_screen(self):
        try:
            return bool(self.frame.getContainerWindow().isVisible())
        except Exception:
            return False

    def _tell(self, text):
        """A message box when the window is on screen (never in a headless or hidden office)."""
        try:
            window = self.frame.getContainerWindow()
            if not self._on_screen():
                return
            toolkit = self.ctx.ServiceManager.createInstanceWithContext("com.sun.star.awt.Toolkit", self.ctx)
            from com.sun.star.awt.MessageBoxType import INFOBOX

            box = toolkit.createMessageBox(window, INFOBOX, 1, "sheetnet", text)
            box.execute()
        except Exception:
            pass

    def dispatch(self, url, arguments):
        self._run(url)

    def dispatchWithNotification(self, url, arguments, listener):
        from com.sun.star.frame import DispatchResultEvent
        from com.sun.star.frame.DispatchResultState import FAILURE, SUCCESS

        ok, text = self._run(url)
        if listener is not None:
            listener.dispatchFinished(DispatchResultEvent(self, SUCCESS if ok else FAILURE, text))


g_ImplementationHelper = unohelper.ImplementationHelper()
g_ImplementationHelper.addImplementation(CellFunctions, TABLE["implementation"], (TABLE["service"], "com.sun.star.sheet.AddIn"))
g_ImplementationHelper.addImplementation(StoreCommand, "sheetnet.calc.StoreCommand", ("com.sun.star.frame.ProtocolHandler",))
