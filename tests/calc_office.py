"""A live headless LibreOffice Calc for tests and benchmarks, driven through UNO.

UNO's Python bridge exists only for Debian's /usr/bin/python3, not for the test venv, so this
file is two things: imported, `CalcOffice` starts ``/usr/bin/python3 tests/calc_office.py`` and
sends it one JSON request a line; run as that script, it starts soffice.bin on a loopback port
(its own profile, HOME and TMPDIR), connects, answers the requests, and ends the office it started.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

SYSTEM_PYTHON = Path("/usr/bin/python3")
OFFICE_BINARY = Path("/usr/lib/libreoffice/program/soffice.bin")


def office_missing() -> str | None:
    """Why a live Calc cannot run here, or None."""
    if not OFFICE_BINARY.exists() or shutil.which("soffice") is None:
        return "LibreOffice Calc is not installed (apt-get install libreoffice-calc-nogui python3-uno)"
    probe = subprocess.run([str(SYSTEM_PYTHON), "-c", "import uno"], capture_output=True)
    if probe.returncode != 0:
        return "LibreOffice's Python bridge is missing for /usr/bin/python3 (apt-get install python3-uno)"
    return None


class CalcOffice:
    """One office for a test module: ``office.call("load", path=...)`` and so on (see `Driver`)."""

    def __init__(self, home: Path, profile: Path, office_settings: list[str], environment: dict[str, str] | None = None) -> None:
        env = dict(os.environ, HOME=str(home), TMPDIR=str(home), **(environment or {}))
        env.pop("PYTHONPATH", None)
        self.process = subprocess.Popen(
            [str(SYSTEM_PYTHON), __file__, str(profile), json.dumps(office_settings)],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
        )
        ready = self._answer()
        if not ready.get("ok"):
            raise RuntimeError(f"LibreOffice did not start: {ready}")

    def _answer(self) -> dict[str, Any]:
        assert self.process.stdout is not None
        line = self.process.stdout.readline()
        if not line:
            assert self.process.stderr is not None
            raise RuntimeError(f"the Calc driver ended: {self.process.stderr.read()[-3000:]}")
        return json.loads(line)

    def call(self, operation: str, **arguments: Any) -> Any:
        assert self.process.stdin is not None
        self.process.stdin.write(json.dumps({"op": operation, **arguments}) + "\n")
        self.process.stdin.flush()
        answer = self._answer()
        if "error" in answer:
            raise RuntimeError(f"Calc driver {operation}: {answer['error']}")
        return answer["result"]

    def close(self) -> None:
        try:
            self.call("quit")
        except (RuntimeError, OSError, ValueError):
            pass
        try:
            self.process.wait(60)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait(10)
        for stream in (self.process.stdin, self.process.stdout, self.process.stderr):
            if stream is not None:
                stream.close()


# --- the script side (runs in /usr/bin/python3 with uno) -------------------------------------------

class Driver:
    def __init__(self, profile: str, settings: list[str]) -> None:
        import socket

        import uno

        with socket.socket() as probe:
            probe.bind(("127.0.0.1", 0))
            port = probe.getsockname()[1]
        command = [str(OFFICE_BINARY), "--headless", "--invisible", "--norestore", "--nodefault", "--nologo", "--nolockcheck",
                   f"-env:UserInstallation={Path(profile).as_uri()}", *settings,
                   f"--accept=socket,host=127.0.0.1,port={port};urp;StarOffice.ComponentContext"]
        self.office = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        local = uno.getComponentContext()
        resolver = local.ServiceManager.createInstanceWithContext("com.sun.star.bridge.UnoUrlResolver", local)
        deadline = time.monotonic() + 90
        while True:
            try:
                self.context = resolver.resolve(f"uno:socket,host=127.0.0.1,port={port};urp;StarOffice.ComponentContext")
                break
            except Exception:
                if self.office.poll() == 81:  # a fresh profile (or a new extension) asks for one restart
                    self.office = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
                elif time.monotonic() > deadline or self.office.poll() is not None:
                    raise
                time.sleep(0.25)
        manager = self.context.ServiceManager
        self.desktop = manager.createInstanceWithContext("com.sun.star.frame.Desktop", self.context)
        self.dispatcher = manager.createInstanceWithContext("com.sun.star.frame.DispatchHelper", self.context)
        self.docs: dict[int, Any] = {}

    @staticmethod
    def _props(**values: Any) -> tuple:
        from com.sun.star.beans import PropertyValue

        return tuple(PropertyValue(Name=k, Value=v) for k, v in values.items())

    def _doc(self, doc: int) -> Any:
        return self.docs[doc]

    def _range(self, doc: int, sheet: str, address: str) -> Any:
        return self._doc(doc).Sheets.getByName(sheet).getCellRangeByName(address)

    def _keep(self, component: Any) -> int:
        number = len(self.docs) + 1
        self.docs[number] = component
        return number

    def op_new(self) -> int:
        return self._keep(self.desktop.loadComponentFromURL("private:factory/scalc", "_blank", 0, self._props(Hidden=True)))

    def op_load(self, path: str) -> int:
        return self._keep(self.desktop.loadComponentFromURL(Path(path).as_uri(), "_blank", 0, self._props(Hidden=True)))

    def op_rename_sheet(self, doc: int, index: int, name: str) -> None:
        self._doc(doc).Sheets.getByIndex(index).Name = name

    def op_add_sheet(self, doc: int, name: str) -> None:
        sheets = self._doc(doc).Sheets
        sheets.insertNewByName(name, sheets.getCount())

    def op_put(self, doc: int, sheet: str, address: str, rows: list[list[Any]]) -> None:
        self._range(doc, sheet, address).setDataArray(tuple(tuple(float(v) if isinstance(v, (int, float)) else v for v in row) for row in rows))

    def op_put_cell(self, doc: int, sheet: str, address: str, value: Any) -> None:
        cell = self._range(doc, sheet, address).getCellByPosition(0, 0)
        if isinstance(value, str):
            cell.setString(value)
        else:
            cell.setValue(float(value))

    def op_array_formula(self, doc: int, sheet: str, address: str, formula: str) -> None:
        self._range(doc, sheet, address).setArrayFormula(formula)

    def op_calculate_all(self, doc: int) -> float:
        start = time.perf_counter()
        self._doc(doc).calculateAll()
        return time.perf_counter() - start

    def op_calculate(self, doc: int) -> float:
        start = time.perf_counter()
        self._doc(doc).calculate()
        return time.perf_counter() - start

    def op_read(self, doc: int, sheet: str, address: str) -> list[list[Any]]:
        return [list(row) for row in self._range(doc, sheet, address).getDataArray()]

    def op_cells(self, doc: int, sheet: str, address: str) -> list[list[dict[str, Any]]]:
        """Per cell: type (EMPTY, VALUE, TEXT, FORMULA), error code, formula text, string."""
        area = self._range(doc, sheet, address)
        size = area.getRangeAddress()
        rows = []
        for r in range(size.EndRow - size.StartRow + 1):
            row = []
            for c in range(size.EndColumn - size.StartColumn + 1):
                cell = area.getCellByPosition(c, r)
                row.append({"type": cell.getType().value, "error": cell.getError(), "formula": cell.getFormula(), "string": cell.getString()})
            rows.append(row)
        return rows

    def op_looks(self, doc: int, sheet: str, address: str) -> dict[str, Any]:
        """Each cell's number format code and each column's width (1/100 mm) over a range."""
        component = self._doc(doc)
        area = self._range(doc, sheet, address)
        size = area.getRangeAddress()
        formats = component.NumberFormats
        codes = [[formats.getByKey(area.getCellByPosition(c, r).NumberFormat).FormatString for c in range(size.EndColumn - size.StartColumn + 1)]
                 for r in range(size.EndRow - size.StartRow + 1)]
        columns = component.Sheets.getByName(sheet).getColumns()
        widths = [columns.getByIndex(c).Width for c in range(size.StartColumn, size.EndColumn + 1)]
        return {"codes": codes, "widths": widths}

    def op_formulas(self, doc: int, sheet: str, address: str) -> list[list[str]]:
        return [list(row) for row in self._range(doc, sheet, address).getFormulaArray()]

    def op_save(self, doc: int, path: str, filter: str) -> None:
        self._doc(doc).storeToURL(Path(path).as_uri(), self._props(FilterName=filter, Overwrite=True))

    def op_close(self, doc: int) -> None:
        self.docs.pop(doc).close(True)

    def op_sheets(self, doc: int) -> list[list[Any]]:
        sheets = self._doc(doc).Sheets
        return [[sheets.getByIndex(i).Name, bool(sheets.getByIndex(i).IsVisible)] for i in range(sheets.getCount())]

    def op_names(self, doc: int) -> dict[str, str]:
        named = self._doc(doc).NamedRanges
        return {n: named.getByName(n).getContent() for n in named.getElementNames()}

    def op_store_command(self, doc: int, sheet: str, address: str, url: str) -> dict[str, Any]:
        """Select the table, then trigger the extension's command through the dispatcher, as the menu does."""
        component = self._doc(doc)
        controller = component.getCurrentController()
        controller.setActiveSheet(component.Sheets.getByName(sheet))
        controller.select(self._range(doc, sheet, address))
        start = time.perf_counter()
        result = self.dispatcher.executeDispatch(controller.getFrame(), url, "", 0, ())
        return {"result": getattr(result, "Result", result), "state": getattr(result, "State", None), "seconds": time.perf_counter() - start}

    def op_wizard_texts(self) -> dict[str, Any]:
        """What the function wizard shows for every function whose name starts with SHEETNET."""
        descriptions = self.context.ServiceManager.createInstanceWithContext("com.sun.star.sheet.FunctionDescriptions", self.context)
        found = {}
        for index in range(descriptions.getCount()):
            entry = {p.Name: p.Value for p in descriptions.getByIndex(index)}
            if str(entry.get("Name", "")).upper().startswith("SHEETNET."):
                arguments = [{"name": a.Name, "help": a.Description, "optional": bool(a.IsOptional)} for a in (entry.get("Arguments") or ())]
                found[entry["Name"]] = {"help": entry.get("Description"), "category": entry.get("Category"), "arguments": arguments}
        return found

    def op_quit(self) -> None:
        for component in list(self.docs.values()):
            try:
                component.close(True)
            except Exception:
                pass
        try:
            self.desktop.terminate()
        except Exception:
            pass
        try:
            self.office.wait(30)
        except subprocess.TimeoutExpired:
            self.office.kill()
            self.office.wait(10)


def _run_script() -> None:
    profile, settings = sys.argv[1], json.loads(sys.argv[2])
    try:
        driver = Driver(profile, settings)
    except Exception as error:
        print(json.dumps({"ok": False, "error": repr(error)}), flush=True)
        return
    print(json.dumps({"ok": True}), flush=True)
    for line in sys.stdin:
        request = json.loads(line)
        operation = request.pop("op")
        try:
            result = getattr(driver, f"op_{operation}")(**request)
            answer: dict[str, Any] = {"result": result}
        except Exception as error:
            answer = {"error": f"{type(error).__name__}: {error}"}
        print(json.dumps(answer, default=str), flush=True)
        if operation == "quit":
            return
    driver.op_quit()


if __name__ == "__main__":
    _run_script()
