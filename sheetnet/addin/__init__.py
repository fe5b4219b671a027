"""sheetnet's own Office add-in: manifest, custom-functions metadata and script, task pane.

The metadata and the script are generated from `sheetnet.registry.REGISTRY`
(namespace SHEETNET, so the cells read ``=SHEETNET.TRAIN(...)``); the manifest
and the pages point at the server that serves them (one origin for the add-in
and the API). Static texts live beside this file.
"""

from __future__ import annotations

import json
import struct
import zlib
from functools import lru_cache
from pathlib import Path

from ..registry import REGISTRY

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


def functions_metadata() -> dict:
    """The custom-functions metadata JSON: every registry entry, ranges as matrices, answers spilled."""
    return {
        "functions": [
            {
                "id": entry.name.split(".", 1)[1],
                "name": entry.name.split(".", 1)[1],
                "description": entry.help,
                "parameters": [
                    {
                        "name": argument.name,
                        "description": argument.help,
                        "type": "any",
                        "dimensionality": "matrix" if argument.kind == "range" else "scalar",
                        "optional": argument.optional,
                    }
                    for argument in entry.arguments
                ],
                "result": {"type": "any", "dimensionality": "matrix"},
            }
            for entry in REGISTRY
        ]
    }


def functions_script() -> str:
    """The custom-functions script: each function forwards its arguments to the server."""
    associations = "\n".join(
        f'CustomFunctions.associate("{e.name.split(".", 1)[1]}", (...args) => callSheetnet("{e.name}", args));' for e in REGISTRY
    )
    return (HERE / "functions.js").read_text() + "\n" + associations + "\n"


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
