"""Model files: a model block (`sheetnet.block`) on disk, as JSON text.

A model file holds data only, never code: the rows of the model block as a
spreadsheet would hold them, under a small JSON header::

    {"format": "sheetnet model file", "version": 1,
     "block": [
      ["sheetnet model block", 3],
      ["written_by", "sheetnet 0.1.0"],
      ...
      ["checksum", "9f2c..."]
     ]}

Each row is a list of cells: a text, a number, true/false or null (a blank
cell); empty cells at the end of a row are left out. Reading checks the file
before it parses it (size, UTF-8, JSON without NaN or infinity, the header,
rows of plain cells), then decodes the block with `decode_block`, which makes
every check it makes on a block in a workbook (format version, checksum,
parts that fit). Nothing is evaluated, imported or unpickled, so a file from
someone else is as safe to load as their workbook.

>>> sheetnet.save(model, "grades.json")          # doctest: +SKIP
>>> sheetnet.load("grades.json").predict(X)      # doctest: +SKIP
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from .block import BlockInfo, decode_block, encode_block
from .errors import ModelError
from .model import Model

FILE_FORMAT = "sheetnet model file"
FILE_VERSION = 1  # of the file around the block; the block has its own format version
MAX_FILE_BYTES = 128 * 1024 * 1024  # a network at the size limit (2,000,000 weights) takes about 45 MB
NOT_RECORDED = "not recorded"  # the fingerprint of a model saved from Python, which knows no table


class ModelFileError(ModelError):
    """A model file cannot be written or read: missing, too large, not a model file, damaged."""


def default_info(model: Model, target: str = "target") -> BlockInfo:
    """What a block written from Python records besides the model: the time, the version, no table."""
    from . import __version__

    return BlockInfo(
        target=target,
        trained_at=datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        written_by=f"sheetnet {__version__}",
        fingerprint=NOT_RECORDED,
        training_rows=0,
        holdout_rows=0,
    )


def file_text(block: list[list[Any]]) -> str:
    """The JSON text of a model file holding ``block``: one block row a line, trailing empty cells left out."""
    rows = [json.dumps(_trimmed(row), ensure_ascii=False, allow_nan=False) for row in block]
    return '{"format": "' + FILE_FORMAT + f'", "version": {FILE_VERSION},\n "block": [\n  ' + ",\n  ".join(rows) + "\n ]}\n"


def save(model: Model, path: str | os.PathLike[str], info: BlockInfo | None = None) -> Path:
    """Write ``model`` to ``path`` as a model file; returns the path.

    ``info`` is what the block records besides the model (target name, rows,
    fingerprint...); without it, the time and sheetnet's version. The file is
    written whole or not at all, and an existing file is replaced only when it
    is itself a model file.
    """
    return save_block(encode_block(model, info or default_info(model)), path)


def save_block(block: list[list[Any]], path: str | os.PathLike[str]) -> Path:
    """Write a model block as it is (one read from a workbook, a signed one) to ``path`` as a model file; returns the path.

    The block is decoded first, so a damaged block is refused here rather than when the file is loaded.
    """
    decode_block(block)
    target = Path(path)
    data = file_text(block).encode("utf-8")
    if len(data) > MAX_FILE_BYTES:
        raise ModelFileError(
            f"the model would take {len(data):,} bytes as a file, more than the {MAX_FILE_BYTES:,} a model file may hold; "
            "train a smaller network or fewer repeats"
        )
    if target.is_dir():
        raise ModelFileError(f"'{target}' is a folder; give the name of the model file to write, for example '{target / 'model.json'}'")
    if target.exists() and not _is_model_file(target):
        raise ModelFileError(f"'{target}' exists and is not a sheetnet model file; choose another name, or move that file away first")
    if not target.parent.is_dir():
        raise ModelFileError(f"the folder '{target.parent}' does not exist; create it first or save elsewhere")
    handle, temporary = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    try:
        with os.fdopen(handle, "wb") as out:
            out.write(data)
            out.flush()
            os.fsync(out.fileno())
        os.replace(temporary, target)  # readers see the old file or the new one, never half of one
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise
    return target


def load(path: str | os.PathLike[str]) -> Model:
    """The model stored in the model file at ``path``; every failure is a `ModelFileError` or a `BlockError` saying what to do."""
    return load_with_info(path)[0]


def load_with_info(path: str | os.PathLike[str]) -> tuple[Model, BlockInfo]:
    """The model of a model file and what its block records besides it."""
    return decode_block(load_block(path))


def load_block(path: str | os.PathLike[str]) -> list[list[Any]]:
    """The block rows of a model file, checked as plain cells but not decoded (to check a signature, or to store it in a workbook)."""
    return block_of(_read_bytes(Path(path)))


def block_of(data: bytes) -> list[list[Any]]:
    """The block rows of a model file's bytes, checked to be plain cells (the block itself is checked by `decode_block`)."""
    if len(data) > MAX_FILE_BYTES:
        raise ModelFileError(f"the file is larger than the {MAX_FILE_BYTES:,} bytes a model file may hold; it is not a model sheetnet wrote")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise ModelFileError("the file is not text (UTF-8); it is not a sheetnet model file") from None
    try:
        document = json.loads(text, parse_constant=_refuse_constant, parse_float=_finite_float)
    except RecursionError:
        raise ModelFileError("the file nests lists too deeply for a model file; it is not a sheetnet model file") from None
    except ValueError as error:  # JSON syntax, a number too long to read, NaN or infinity
        raise ModelFileError(f"the file is not a readable model file ({_reason(error)}); it is damaged or was not written by sheetnet") from None
    if not isinstance(document, dict) or document.get("format") != FILE_FORMAT:
        raise ModelFileError("the file is not a sheetnet model file (its 'format' is not 'sheetnet model file'); load a file sheetnet.save wrote")
    version = document.get("version")
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        raise ModelFileError("the model file's version is missing or not a whole number; the file is damaged: save the model again")
    if version > FILE_VERSION:
        raise ModelFileError(f"the model file was written by a newer sheetnet (file version {version}; this one reads up to {FILE_VERSION}); upgrade sheetnet")
    extra = sorted(set(document) - {"format", "version", "block"})
    if extra:
        parts = ", ".join(repr(k) for k in extra[:3])
        raise ModelFileError(f"the model file holds parts sheetnet does not write ({parts}); it was edited: save the model again")
    block = document.get("block")
    if not isinstance(block, list) or not block:
        raise ModelFileError("the model file holds no block rows; the file is damaged: save the model again")
    for number, row in enumerate(block, start=1):
        if not isinstance(row, list):
            raise ModelFileError(f"row {number} of the model file's block is not a list of cells; the file is damaged: save the model again")
        for cell in row:
            if not (cell is None or isinstance(cell, (str, int, float, bool))):
                raise ModelFileError(
                    f"row {number} of the model file's block holds a cell that is a {'list' if isinstance(cell, list) else 'record'}, "
                    "not a text or a number; the file is damaged: save the model again"
                )
    return block


def _read_bytes(path: Path) -> bytes:
    if path.is_dir():
        raise ModelFileError(f"'{path}' is a folder, not a model file; give the path of a file sheetnet.save wrote")
    try:
        size = path.stat().st_size
        if size > MAX_FILE_BYTES:
            raise ModelFileError(
                f"'{path}' holds {size:,} bytes, more than the {MAX_FILE_BYTES:,} a model file may hold; it is not a model sheetnet wrote"
            )
        with path.open("rb") as handle:
            return handle.read(MAX_FILE_BYTES + 1)  # the size may change between stat and read
    except FileNotFoundError:
        raise ModelFileError(f"there is no file '{path}'; check the name and the folder") from None
    except PermissionError:
        raise ModelFileError(f"'{path}' cannot be read (no permission); ask its owner or copy it somewhere you can read") from None


def _is_model_file(path: Path) -> bool:
    try:
        with path.open("rb") as handle:
            start = handle.read(64)
    except OSError:
        return False
    return start.lstrip().startswith(b'{"format": "' + FILE_FORMAT.encode() + b'"')


def _trimmed(row: list[Any]) -> list[Any]:
    end = len(row)
    while end and (row[end - 1] is None or row[end - 1] == ""):
        end -= 1
    return [_plain(cell) for cell in row[:end]]


def _plain(cell: Any) -> Any:
    return cell.item() if hasattr(cell, "item") and not isinstance(cell, (str, bytes)) else cell


def _refuse_constant(name: str) -> float:
    raise ValueError(f"it holds {name}, which no spreadsheet cell holds")


def _finite_float(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(f"it holds the number {text[:20]}, too large for any cell")
    return value


def _reason(error: ValueError) -> str:
    if isinstance(error, json.JSONDecodeError):
        return f"{error.msg.lower()} at line {error.lineno}, column {error.colno}"
    return str(error)[:120]
