"""sheetnet's own Office add-in: manifest, custom-functions metadata and script, task pane.

The metadata and the script are generated from `sheetnet.registry.REGISTRY`
(namespace SHEETNET, so the cells read ``=SHEETNET.TRAIN(...)``); the manifest
and the pages point at the server that serves them (one origin for the add-in
and the API). Static texts live beside this file.

What the generated files hold to (Microsoft's custom-functions documentation,
learn.microsoft.com/office/dev/add-ins/excel/custom-functions-json and the
``custom-functions-runtime`` typings): every parameter is ``any`` (ranges as
matrices) so that, with ``allowErrorForDataTypeAny``, error cells reach
sheetnet, which names them; TRAIN is ``cancelable`` and asks for its cell's
address (a training is a server job the cell can stop); the two arguments with
a fixed list of words offer them as a custom enum (AutoComplete suggestions);
the script drops the invocation object Excel passes last. Proven in CI against
a stand-in of the runtime only (tests/node/), never inside Excel.
"""

from __future__ import annotations

import json
import struct
import zlib
from functools import lru_cache
from pathlib import Path
from typing import Any, Mapping

from ..functions import PREDICT_OUTPUTS
from ..jobs import JOB_FUNCTIONS  # TRAIN and SEARCH run as server jobs (progress, cancelling); the rest are one request
from ..registry import REGISTRY, CellFunction

HERE = Path(__file__).parent
ADDIN_ID = "45530864-e72b-4b05-b522-d12954b04ef8"
ADDIN_TYPES = {
    "manifest.xml": "application/xml",
    "functions.json": "application/json",
    "functions.js": "text/javascript",
    "taskpane.html": "text/html",
    "taskpane.js": "text/javascript",
    "taskpane.css": "text/css",
    "icon-16.png": "image/png",
    "icon-32.png": "image/png",
    "icon-80.png": "image/png",
}
# trainings never start from the formula value preview (the bar's preview of a formula being typed)
NOT_IN_PREVIEW = frozenset({"SHEETNET.TRAIN", "SHEETNET.SEARCH"})
# the arguments that take one of a few words: (function, argument) -> (enum id, [(word, tooltip)])
CHOICES: dict[tuple[str, str], tuple[str, tuple[tuple[str, str], ...]]] = {
    ("SHEETNET.SPLIT", "mode"): (
        "SPLITMODES",
        (
            ("random", "rows held out at random (the default)"),
            ("ordered", "the last rows held out, for time series"),
            ("stratified", "write the column after it, like 'stratified grade': each class held out in proportion"),
        ),
    ),
    ("SHEETNET.PREDICT", "output"): (
        "PREDICTOUTPUTS",
        tuple((word, "several may be combined, like 'value, flag'") for word in PREDICT_OUTPUTS),
    ),
}
# The task pane page may run only its own files and Office's script (the pane loads office.js from
# Microsoft's address); data shown in it is text, never markup (see taskpane.js), and this keeps it so.
PANE_POLICY = (
    "default-src 'self'; script-src 'self' https://appsforoffice.microsoft.com; style-src 'self'; "
    "img-src 'self' data:; connect-src 'self'; object-src 'none'; base-uri 'none'; form-action 'none'"
)


def function_id(entry: CellFunction) -> str:
    """The id and name Excel registers, without the namespace: SHEETNET.TRAIN -> TRAIN."""
    return entry.name.split(".", 1)[1]


def _parameter(entry: CellFunction, index: int) -> dict[str, Any]:
    argument = entry.arguments[index]
    described: dict[str, Any] = {
        "name": argument.name,
        "description": argument.help,
        "type": "any",
        "dimensionality": "matrix" if argument.kind == "range" else "scalar",
        "optional": argument.optional,
    }
    choice = CHOICES.get((entry.name, argument.name))
    if choice is not None:  # the documented enum pattern takes a string parameter
        described["type"], described["customEnumId"] = "string", choice[0]
    return described


def functions_metadata() -> dict[str, Any]:
    """The custom-functions metadata JSON: every registry entry, ranges as matrices, answers spilled."""
    functions = []
    for entry in REGISTRY:
        described: dict[str, Any] = {
            "id": function_id(entry),
            "name": function_id(entry),
            "description": entry.help,
            "parameters": [_parameter(entry, i) for i in range(len(entry.arguments))],
            "result": {"type": "any", "dimensionality": "matrix"},
        }
        if entry.name in JOB_FUNCTIONS:
            described["options"] = {"cancelable": True, "requiresAddress": True}
        functions.append(described)
    enums = [
        {"id": enum_id, "type": "string", "values": [{"name": word, "stringValue": word, "tooltip": tip} for word, tip in words]}
        for enum_id, words in CHOICES.values()
    ]
    return {"allowErrorForDataTypeAny": True, "functions": functions, "enums": enums}


def functions_script() -> str:
    """The custom-functions script: each function forwards its arguments to the server."""
    table = {
        e.name: {
            "arguments": len(e.arguments), "job": e.name in JOB_FUNCTIONS, "preview": e.name not in NOT_IN_PREVIEW,
            "tables": [i for i, a in enumerate(e.arguments) if a.name == "table"],  # sent by columns (sheetnet.cells.COLUMN_FORM)
        }
        for e in REGISTRY
    }
    associations = "\n".join(
        f'  CustomFunctions.associate("{function_id(e)}", (...args) => callSheetnet("{e.name}", args));' for e in REGISTRY
    )
    script = (HERE / "functions.js").read_text().replace("%SHEETNET_FUNCTIONS%", json.dumps(table, sort_keys=True))
    return script + '\nif (typeof CustomFunctions !== "undefined") {\n' + associations + "\n}\n"


def _png(size: int) -> bytes:
    """A small square icon of our own: a dark tile with a lighter grid of 3 x 3 dots (a tiny network)."""
    rows = []
    for y in range(size):
        row = bytearray([0])
        for x in range(size):
            inside = abs((x * 3 % size) - size // 2) < size // 6 and abs((y * 3 % size) - size // 2) < size // 6
            row += bytes((236, 239, 241)) if inside else bytes((38, 50, 56))
        rows.append(bytes(row))
    raw = zlib.compress(b"".join(rows))

    def chunk(kind: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)

    header = struct.pack(">IIBBBBB", size, size, 8, 2, 0, 0, 0)
    return b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", raw) + chunk(b"IEND", b"")


def served_base(scope: Mapping[str, Any], origin: str) -> str:
    """The address the add-in's files name: the one the server listens on (the ASGI ``server`` entry,
    which uvicorn takes from its socket), else ``origin``. Never the request's Host header, which a
    caller (or a page rebinding a name to 127.0.0.1) writes as it likes."""
    listening = scope.get("server")
    if not listening or listening[1] is None:
        return origin
    host, port = listening[0], int(listening[1])
    host = f"[{host}]" if ":" in host else host
    return f"{scope.get('scheme', 'http')}://{host}:{port}"


def addin_headers(name: str) -> dict[str, str]:
    """Headers for one served add-in file: no type sniffing; the pane page under its content policy."""
    headers = {"X-Content-Type-Options": "nosniff"}
    if name == "taskpane.html":
        headers["Content-Security-Policy"] = PANE_POLICY
    return headers


@lru_cache(maxsize=64)
def addin_file_bytes(name: str, base: str) -> bytes:
    """One add-in file as served from ``base`` (like ``http://127.0.0.1:8765``)."""
    if name == "functions.json":
        return json.dumps(functions_metadata(), indent=2).encode()
    if name == "functions.js":
        return functions_script().replace("%SHEETNET_BASE%", base).encode()
    if name.startswith("icon-"):
        return _png(int(name[5:-4]))
    text = (HERE / name).read_text()
    return text.replace("%SHEETNET_BASE%", base).replace("%SHEETNET_ADDIN_ID%", ADDIN_ID).encode()
