"""The resource budget: how much one request and one cell function may ask for, checked before anything large is allocated.

A spreadsheet user who types ``hidden=100000000``, asks LAGS for a billion lags
or trains on a column of 10,000 different labels should get a message in a
second, not a memory error after minutes; a caller of the local server should
not be able to take it down with one request. The limits are far above what a
useful model of a worksheet table needs and well below what a 16 GB machine
can hold. Every refusal is a `SizeError` naming the limit and what to do.

Where each limit is checked:

- the request (the local server, on the raw bytes before they are parsed): `MAX_BODY_BYTES`,
  `MAX_REQUEST_VALUES`, `MAX_REQUEST_LISTS` (`check_request_body`);
- each range argument (at the entry of every cell function, so every door gives the same message):
  `MAX_RANGE_ROWS`, `MAX_RANGE_COLUMNS`, `MAX_RANGE_CELLS` (`check_ranges`);
- each answer, before it is built: `MAX_ANSWER_CELLS` (`check_answer_size`), `MAX_LAGS` (`check_lag_count`);
- the network, before training allocates it: `MAX_LAYERS`, `MAX_UNITS`, `MAX_PARAMETERS`,
  `MAX_MATRIX_CELLS` (`check_network_size`), `MAX_CLASSES` (`check_class_count`), `MAX_NUMBER`.

The server's own bounds (bodies held at once, calls at once, training jobs) live
beside the values here so that the README lists one budget; `sheetnet.server`
and `sheetnet.jobs` enforce them.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from .errors import SizeError

# --- one network -------------------------------------------------------------------------------
MAX_PARAMETERS = 2_000_000  # weights and biases of one network; L-BFGS keeps about 25 copies of them
MAX_MATRIX_CELLS = 50_000_000  # rows x widest layer (inputs, one-hot columns included): one training buffer, 400 MB
MAX_CLASSES = 200  # distinct labels of a classifier's target
MAX_LAYERS = 20  # hidden layers
MAX_UNITS = 10_000  # units of one hidden layer
MAX_NUMBER = 1e100  # larger magnitudes are refused: their squares (for the scaling) would overflow

# --- one range, one answer ---------------------------------------------------------------------
MAX_RANGE_ROWS = 1_048_576  # rows of one range: the tallest worksheet
MAX_RANGE_COLUMNS = 16_384  # columns of one range: the widest worksheet
MAX_RANGE_CELLS = 2_000_000  # cells of one range (rows x columns)
MAX_ANSWER_CELLS = 4_000_000  # cells one cell function answers: the largest range's rows with a few answer columns
MAX_LAGS = 1_000  # lags one SHEETNET.LAGS call makes

# --- one request to the local server -------------------------------------------------------------
MAX_BODY_BYTES = 32 * 1024 * 1024  # about two million numeric cells as JSON
MAX_REQUEST_VALUES = 5_000_000  # values in one request, every argument together (two full ranges and a little more)
MAX_REQUEST_LISTS = 2_500_000  # lists (range rows) in one request, every argument together
MAX_BODIES_BYTES = 64 * 1024 * 1024  # request bodies held at once, from the first byte read until the answer is sent
MAX_CALLS_AT_ONCE = 64  # requests being read or answered at once
HEADER_TIMEOUT = 10.0  # seconds a caller has to send a request's headers
BODY_TIMEOUT = 60.0  # seconds a caller has to send a request's body, once its headers are in

# --- training jobs on the local server (`sheetnet.jobs`) -----------------------------------------
MAX_RUNNING_JOBS = 2  # trainings at the same time (each holds its table and a thread)
MAX_WAITING_JOBS = 8  # jobs accepted to start when one of the running ends
MAX_JOB_TABLE_CELLS = 10_000_000  # cells of the tables that running and waiting jobs hold, in all
KEPT_JOBS = 100  # finished jobs remembered for their callers
KEPT_JOB_CELLS = 5_000_000  # cells of the model blocks the remembered jobs hold, in all
KEPT_MODELS = 100  # trained models listed by GET /v1/models

CELLS_FIX = "select only the rows and columns in use, or split the work into several calls"


def parameter_count(sizes: Sequence[int]) -> int:
    """Weights and biases of a network with these layer sizes (inputs first, outputs last)."""
    return sum((a + 1) * b for a, b in zip(sizes[:-1], sizes[1:]))


def check_network_size(rows: int, inputs: int, hidden: Sequence[int], outputs: int) -> None:
    """Refuse a network or a training table beyond the limits, naming the limit and the fix.

    ``inputs`` counts network inputs (a text column counts one per category).

    >>> check_network_size(1000, 5, (8, 4), 1)
    >>> parameter_count((5, 100_000_000, 1))
    700000001
    """
    if len(hidden) > MAX_LAYERS:
        raise SizeError(f"{len(hidden)} hidden layers are more than the {MAX_LAYERS} sheetnet trains; use one to three layers, such as 8 or 16,8")
    sizes = (inputs, *hidden, outputs)
    count = parameter_count(sizes)
    if count > MAX_PARAMETERS:
        raise SizeError(
            f"a network of {'-'.join(map(str, sizes))} has {count:,} weights, more than the {MAX_PARAMETERS:,} sheetnet trains; "
            "use fewer or narrower hidden layers, such as 8 or 16,8"
            + (", or fewer categories in the text inputs" if inputs > 1000 else "")
        )
    if hidden and max(hidden) > MAX_UNITS:
        raise SizeError(
            f"a hidden layer of {max(hidden):,} units is wider than the {MAX_UNITS:,} sheetnet trains; "
            "use fewer or narrower hidden layers, such as 8 or 16,8"
        )
    widest = max(sizes)
    if rows * widest > MAX_MATRIX_CELLS:
        what = "inputs (each category of a text column is one input)" if widest == inputs else "units in a layer"
        raise SizeError(
            f"{rows:,} rows times {widest:,} {what} make {rows * widest:,} numbers, more than the {MAX_MATRIX_CELLS:,} "
            "sheetnet holds while training; train on fewer rows, or use fewer categories or narrower layers"
        )


def check_class_count(count: int, examples: str) -> None:
    """Refuse a classifier target with more distinct labels than `MAX_CLASSES`."""
    if count > MAX_CLASSES:
        raise SizeError(
            f"the target has {count:,} different values ({examples}), more than the {MAX_CLASSES} classes sheetnet learns; "
            "if it holds amounts, add the setting task=regression; if it is an identifier or a free text, choose another target"
        )


def range_shape(cells: Any) -> tuple[int, int]:
    """Rows and columns of a range as a bridge passes it (a list of rows, a column as a flat list, one value),
    counted without copying anything; arrays report their own shape.

    >>> range_shape([["a", "b"], [1, 2], [3]])
    (3, 2)
    >>> range_shape([1, 2, 3]), range_shape(["long text", "x"]), range_shape(7)
    ((3, 1), (2, 1), (1, 1))
    """
    shape = getattr(cells, "shape", None)
    if isinstance(shape, tuple) and all(isinstance(n, int) for n in shape):
        return (shape[0] if shape else 1), (shape[1] if len(shape) > 1 else 1)
    if isinstance(cells, dict):  # a table sent by columns (`sheetnet.cells.COLUMN_FORM`)
        from .cells import column_form_shape  # here, not on top: cells imports this module

        return column_form_shape(cells)
    if not isinstance(cells, (list, tuple)):
        return 1, 1
    if cells and set(map(type, cells)) <= {list, tuple}:  # the usual case, every row a list: passes in C
        return len(cells), max(1, max(map(len, cells)))
    widest = 1
    for row in cells:
        if isinstance(row, (list, tuple)) and len(row) > widest:
            widest = len(row)
    return len(cells), widest


def check_ranges(**ranges: Any) -> None:
    """Refuse a range argument beyond `MAX_RANGE_ROWS`, `MAX_RANGE_COLUMNS` or `MAX_RANGE_CELLS`, by its name.

    Called first thing by every cell function, before a range is read or copied.

    >>> check_ranges(table=[["a", "b"], [1, 2]], split=None)
    """
    for name, cells in ranges.items():
        rows, columns = range_shape(cells)
        what = f"the {name.replace('_', ' ')} range"
        if columns > MAX_RANGE_COLUMNS:
            raise SizeError(f"{what} has {columns:,} columns, more than the {MAX_RANGE_COLUMNS:,} sheetnet reads; {CELLS_FIX}")
        if rows > MAX_RANGE_ROWS:
            raise SizeError(f"{what} has {rows:,} rows, more than the {MAX_RANGE_ROWS:,} sheetnet reads; {CELLS_FIX}")
        if rows * columns > MAX_RANGE_CELLS:
            raise SizeError(f"{what} has {rows * columns:,} cells, more than the {MAX_RANGE_CELLS:,} sheetnet reads; {CELLS_FIX}")


def check_answer_size(rows: int, columns: int, function: str) -> None:
    """Refuse an answer of more than `MAX_ANSWER_CELLS` cells before it is built.

    >>> check_answer_size(1001, 3, "SHEETNET.PREDICT")
    """
    if rows * columns > MAX_ANSWER_CELLS:
        raise SizeError(
            f"{function} would answer up to {rows * columns:,} cells ({rows:,} rows by up to {columns:,} columns), more than the "
            f"{MAX_ANSWER_CELLS:,} sheetnet returns from one cell; ask for fewer columns, or split the table into several calls"
        )


def check_lag_count(count: int) -> None:
    """Refuse a LAGS call asking for more than `MAX_LAGS` lags, before the list of lags is made."""
    if count > MAX_LAGS:
        raise SizeError(
            f"{count:,} lags are more than the {MAX_LAGS:,} SHEETNET.LAGS makes in one call; "
            "give a smaller count, or a list of the lags you need, like 1,2,12"
        )


_CHUNK = 1 << 20  # bytes looked at together when texts are skipped: bounded scratch memory


def json_size(raw: bytes) -> tuple[int, int]:
    r"""Upper bounds of the values and of the lists in a JSON text, counted on the bytes without parsing them.

    Each list holds one value more than its commas (an empty one none), so commas plus lists bound the values.
    Commas and brackets inside texts do not count: when the quick count is over the limits, the bytes are
    counted again outside the texts, a megabyte at a time.

    >>> json_size(b'{"args": [[["s"], [1], [2]], 1e9]}')  # 6 values and 5 lists in truth
    (8, 5)
    >>> _outside_texts(rb'["a,[b", "c\\", "d\",["]')  # the texts hide their commas and brackets
    (2, 1)
    """
    commas, lists = _outside_texts(raw, texts_skipped=False)
    if (commas + lists > MAX_REQUEST_VALUES or lists > MAX_REQUEST_LISTS) and b'"' in raw:
        commas, lists = _outside_texts(raw)
    return commas + lists, lists


def _outside_texts(raw: bytes, texts_skipped: bool = True) -> tuple[int, int]:
    """Commas and opening brackets (outside JSON texts, or everywhere), a chunk at a time (NumPy counts
    bytes several times faster than ``bytes.count``)."""
    if texts_skipped and b"\\" in raw:  # escaped backslashes first, so that every backslash left escapes the character after it
        raw = raw.replace(b"\\\\", b"").replace(b'\\"', b"")
    data = np.frombuffer(raw, dtype=np.uint8)
    commas = lists = parity = 0
    for start in range(0, len(data), _CHUNK):
        chunk = data[start:start + _CHUNK]
        if not texts_skipped:
            commas += int(np.count_nonzero(chunk == ord(",")))
            lists += int(np.count_nonzero(chunk == ord("[")))
            continue
        quotes = chunk == ord('"')
        outside = ((np.cumsum(quotes, dtype=np.uint8) + parity) & 1) == 0  # parity wraps harmlessly at 256
        commas += int(np.count_nonzero((chunk == ord(",")) & outside))
        lists += int(np.count_nonzero((chunk == ord("[")) & outside))
        parity = (parity + int(np.count_nonzero(quotes))) & 1
    return commas, lists


def check_request_body(raw: bytes) -> None:
    """Refuse a request body holding more values or lists than one request may (`MAX_REQUEST_VALUES`,
    `MAX_REQUEST_LISTS`), before it is parsed: parsed, each value takes 20 to 60 times its bytes."""
    values, lists = json_size(raw)
    if lists > MAX_REQUEST_LISTS:
        raise SizeError(
            f"the request holds {lists:,} rows, more than the {MAX_REQUEST_LISTS:,} sheetnet takes in one call; {CELLS_FIX}"
        )
    if values > MAX_REQUEST_VALUES:
        raise SizeError(
            f"the request holds about {values:,} cells, more than the {MAX_REQUEST_VALUES:,} sheetnet takes in one call; {CELLS_FIX}"
        )
