"""Reading spreadsheet ranges as tables, and writing answers back as cells.

A range arrives as a 2-D list of cell values (float, int, bool, str, None for
a blank; spreadsheet error values as their text, such as ``#N/A``). The first
row of a table holds column names. Rows that are blank from end to end are
not data (ranges are often selected generously): they are left out of
training and get blank answers. Rows in messages are counted the way the
user sees the range: the header is row 1 of the table, the first data row is
row 2.
"""

from __future__ import annotations

import base64
import binascii
import datetime
import functools
import hashlib
import itertools
import marshal
import math
import re
import threading
from collections import OrderedDict
from dataclasses import dataclass
from types import SimpleNamespace
from typing import Any, Callable, Sequence

import numpy as np
import pandas as pd

from .block import _canonical
from .cell_text import ERROR_VALUES, cell_in_words
from .errors import BadValueError, InputError, SettingError, UnknownColumnError
from .limits import MAX_LAYERS, MAX_RANGE_CELLS, check_ranges

Cell = float | int | bool | str | None
Cells = list[list[Cell]]

MARKER = "#SHEETNET!"  # starts every message a cell function returns instead of an answer
MAX_CELLS = MAX_RANGE_CELLS  # larger ranges are refused before any work starts (the budget's number, sheetnet.limits)
NUMBER_TYPES = frozenset({float, int, type(None), np.float64, np.float32, np.int64, np.int32})
CELL_TYPES = NUMBER_TYPES | {bool, str, np.bool_, np.str_}
CELL_TYPE_FAMILIES = (int, float, str, datetime.date, datetime.time, np.number, np.bool_)  # subclasses too (pandas Timestamp)


def message_cell(text: str) -> Cells:
    """One cell holding a readable failure message."""
    return [[f"{MARKER} {text}"]]


def is_blank(value: Any) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    return isinstance(value, str) and not value.strip()


def as_grid(cells: Any, what: str, check_cells: bool = True) -> list[list[Any]]:
    """A range as a list of rows; a single value is a 1 x 1 range.

    Every cell must be one value (number, text, TRUE/FALSE, date or blank): a
    list inside a cell, as nested lists give, is refused with its place
    (``check_cells=False`` leaves that to a caller that looks at every column anyway).
    """
    if isinstance(cells, np.ndarray):
        cells = cells.tolist()
    if not isinstance(cells, (list, tuple)):
        _check_cell_types([[cells]], what)
        return [[cells]]
    if not cells:
        raise InputError(f"the {what} range is empty; select a range with a header row and data rows")
    rows: list[list[Any]] = (
        list(cells) if set(map(type, cells)) == {list} else [list(r) if isinstance(r, (list, tuple, np.ndarray)) else [r] for r in cells]
    )
    widths = set(map(len, rows))
    width = max(widths)
    if width == 0:
        raise InputError(f"the {what} range has no cells; select a range with a header row and data rows")
    if len(rows) * width > MAX_CELLS:
        raise InputError(
            f"the {what} range has {len(rows) * width:,} cells, more than the {MAX_CELLS:,} sheetnet reads; select only the rows and columns in use"
        )
    if check_cells:
        _check_cell_types(rows, what)
    if len(widths) == 1:
        return rows  # rectangular already: the rows are read, never changed, so they are not copied
    return [r + [None] * (width - len(r)) for r in rows]


def _check_cell_types(rows: list[list[Any]], what: str, types: set[type] | None = None) -> None:
    if types is None:
        types = set(map(type, itertools.chain.from_iterable(rows)))  # one pass in C; the per-cell search below runs only on a refusal
    strange = [t for t in types if t not in CELL_TYPES and not issubclass(t, CELL_TYPE_FAMILIES)]
    if not strange:
        return
    for i, row in enumerate(rows):
        for j, value in enumerate(row):
            if type(value) in strange:
                place = f"row {i + 1}, column {j + 1} of the {what} range"
                if isinstance(value, (list, tuple, set, dict, np.ndarray)):
                    raise InputError(f"{place} holds a list of values rather than one value; pass a plain range of cells")
                raise InputError(f"{place} holds {cell_in_words(value)}; pass numbers, text, dates or TRUE/FALSE")


@dataclass(frozen=True, eq=False)
class SheetTable:
    """A table read from a range: named columns and which rows hold data.

    Columns are NumPy arrays over the data rows (blank rows dropped): float64
    where every cell is a number or blank (blanks as NaN), else object arrays of
    cleaned cells (texts stripped, blanks as None). ``frame`` gives them as a
    DataFrame, built on first use only, so the number-only paths never meet pandas.
    """

    columns: dict[str, np.ndarray]  # by name, in the range's order
    data_rows: np.ndarray  # for each data row kept, its index among the range's data rows (0 = row 2)
    n_rows: int  # data rows in the range, blank ones included (the height of per-row answers)
    numbers: np.ndarray | None = None  # when every column holds numbers: all of them as one matrix (the columns are its views)

    def number_matrix(self, names: Sequence[str], rows: np.ndarray) -> np.ndarray | None:
        """These number columns over ``rows`` (a mask over the data rows) as one C-ordered matrix, taken from the
        table's matrix in one copy; None when the table was not read as one."""
        if self.numbers is None:
            return None
        where = {name: j for j, name in enumerate(self.columns)}
        picked = [where[name] for name in names]
        return self.numbers[:, picked] if rows.all() else self.numbers[rows][:, picked]

    @functools.cached_property
    def frame(self) -> pd.DataFrame:
        """The columns as a DataFrame: number columns as float64, the others with object dtype (texts stay Python texts)."""
        names = list(self.columns)
        numbers = [name for name in names if self.columns[name].dtype.kind == "f"]
        others = [name for name in names if self.columns[name].dtype.kind != "f"]
        # one block per kind, not a Series per column: a table 100,000 columns wide is built in linear time
        parts = [pd.DataFrame(np.column_stack([self.columns[name] for name in numbers]), columns=numbers)] if numbers else []
        if others:
            parts.append(pd.DataFrame(np.column_stack([self.columns[name] for name in others]), columns=others, dtype=object))
        frame = parts[0] if len(parts) == 1 else pd.concat(parts, axis=1)
        return frame if numbers == names or others == names else frame[names]

    def values(self, name: str) -> np.ndarray:
        """The column's array (float64 or object), or `UnknownColumnError` naming the columns there are."""
        found = self.columns.get(name)
        if found is None:
            raise UnknownColumnError(f"the table has no column named '{name}'; its columns are: {', '.join(map(str, self.columns))}")
        return found

    def column(self, name: str) -> pd.Series:
        self.values(name)
        return self.frame[name]

    def filled(self, name: str) -> np.ndarray:
        """True for the data rows whose cell in this column is not blank."""
        values = self.values(name)
        if values.dtype.kind == "f":
            return ~np.isnan(values)
        return ~np.fromiter(map(is_blank, values), dtype=bool, count=len(values))


def read_sheet_table(cells: Any, what: str = "table") -> SheetTable:
    """Split a range into header and data rows; refuse missing or repeated column names.

    The data rows are read column by column: when every cell is a number or a
    blank, in one conversion of the whole range; otherwise each column on its
    own (a column of numbers still in one conversion). A range may also come
    column-wise (`COLUMN_FORM`), as the local server's callers may send it.
    """
    if isinstance(cells, dict):
        return _read_column_form(cells, what)
    grid = as_grid(cells, what, check_cells=False)  # the cells' types are looked at below
    _check_cell_types(grid[:1], what)
    names = _column_names(grid[0], what)
    body = grid[1:]
    typed, blank, numbers = _typed_columns(body, len(names), grid, what)
    return _table(names, typed, blank, numbers, what=what)


COLUMN_FORM = """A range sent column by column: ``{"header": [names...], "columns": [column, ...]}``.

Each column holds the cells below the header, one per data row, either as a list of cells or, for a
column of numbers, as ``{"numbers": TEXT}``: the numbers as IEEE 754 doubles in little-endian byte
order (8 bytes each), written as base64 text, a blank cell as NaN. It reads exactly like the same
range given as rows (the same table, the same messages, rows and columns counted the same way),
but a column of numbers costs no work per cell (one base64 decoding, no JSON numbers to parse).
"""


def _read_column_form(form: dict[str, Any], what: str) -> SheetTable:
    fix = f"send the {what} as rows of cells, or as {{\"header\": [...], \"columns\": [...]}} (see sheetnet.cells.COLUMN_FORM)"
    header, columns = form.get("header"), form.get("columns")
    if set(form) != {"header", "columns"} or not isinstance(header, list) or not isinstance(columns, list):
        raise InputError(f"the {what} came as an object that is not a table by columns; {fix}")
    if len(columns) != len(header):
        raise InputError(f"the {what}'s header has {len(header)} names but {len(columns)} columns came; {fix}")
    check_ranges(**{what: SimpleNamespace(shape=column_form_shape(form))})  # the limits of a range given as rows, before decoding
    cells = [_column_cells(column, j, what, fix) for j, column in enumerate(columns)]
    heights = set(map(len, cells))
    if len(heights) > 1:
        raise InputError(f"the {what}'s columns came with different numbers of cells ({min(heights):,} to {max(heights):,}); {fix}")
    height = heights.pop() if heights else 0
    if not header:
        raise InputError(f"the {what} range has no cells; select a range with a header row and data rows")
    _check_cell_types([header], what)
    names = _column_names(header, what)

    def as_rows() -> list[list[Any]]:  # only to name a strange cell at its row and column, as for a range given as rows
        return [header, *map(list, zip(*(c.tolist() if isinstance(c, np.ndarray) else c for c in cells)))]

    typed = [column if isinstance(column, np.ndarray) else _typed_column(column, as_rows, what) for column in cells]
    if all(values.dtype.kind == "f" for values in typed):  # every column numbers: one matrix, the columns its views (one copy)
        columns, blank, numbers = _number_columns(np.column_stack(typed))
        return _table(names, columns, blank, numbers, what=what)
    typed = [np.array(values) if values.base is not None else values for values in typed]  # decoded in place: copies of their own
    blank = np.ones(height, dtype=bool)
    for values in typed:
        blank &= np.isnan(values) if values.dtype.kind == "f" else _none_mask(values)
    return _table(names, typed, blank, what=what)


def column_form_shape(form: dict[str, Any]) -> tuple[int, int]:
    """Rows (the header's included) and columns of a table sent by columns (`COLUMN_FORM`), counted without
    decoding anything (a column of numbers by its text's length, an upper bound); (1, 1) for an object that is
    not one, which reading then refuses with what to send.

    >>> column_form_shape({"header": ["a", "b"], "columns": [[1, None, 3], {"numbers": "AAAAAAAA8D8="}]})
    (4, 2)
    """
    columns = form.get("columns")
    if not isinstance(columns, list):
        return 1, 1
    longest = 0
    for column in columns:
        if isinstance(column, list):
            longest = max(longest, len(column))
        elif isinstance(column, dict) and isinstance(column.get("numbers"), str):
            longest = max(longest, len(column["numbers"]) * 3 // 32)  # 4 characters of base64 carry 3 bytes; a number takes 8
    return longest + 1, max(len(columns), 1)


def _column_cells(column: Any, j: int, what: str, fix: str) -> np.ndarray | list[Any]:
    if isinstance(column, list):
        return column
    text = column.get("numbers") if isinstance(column, dict) and set(column) == {"numbers"} else None
    try:
        raw = base64.b64decode(text, validate=True) if isinstance(text, str) else None
    except (binascii.Error, ValueError):
        raw = None
    if raw is None or len(raw) % 8:
        raise InputError(f"column {j + 1} of the {what} came neither as a list of cells nor as numbers written as base64 doubles; {fix}")
    return np.frombuffer(raw, dtype="<f8").astype(np.float64, copy=False)  # a view of the decoded bytes (a copy only on a big-endian machine)


def _table(names: list[str], typed: list[np.ndarray], blank: np.ndarray, numbers: np.ndarray | None = None, *, what: str) -> SheetTable:
    keep = np.flatnonzero(~blank)
    if not len(keep):
        raise InputError(f"the {what} has a header but no data rows; include the rows below the header")
    if len(keep) < len(blank):
        if numbers is not None:
            numbers = numbers[keep]
            typed = list(numbers.T)
        else:
            typed = [values[keep] for values in typed]
    return SheetTable(dict(zip(names, typed)), keep, len(blank), numbers)


def _column_names(header: list[Any], what: str) -> list[str]:
    names: list[str] = []
    seen: set[str] = set()  # a set, not the list: a header 100,000 columns wide is read in linear time
    for j, name in enumerate(header):
        if is_blank(name):
            raise InputError(f"the {what}'s header (its first row) has a blank cell in column {j + 1}; give every column a name")
        text = _number_text(name) if isinstance(name, (int, float)) and not isinstance(name, bool) else str(name).strip()
        if text in seen:
            raise InputError(f"the {what} has two columns named '{text}'; give each column its own name")
        seen.add(text)
        names.append(text)
    return names


def _typed_columns(
    body: list[list[Any]], width: int, grid: list[list[Any]], what: str
) -> tuple[list[np.ndarray], np.ndarray, np.ndarray | None]:
    """The data rows' columns (float64 for numbers and blanks, else object arrays of cleaned cells), which rows are
    blank, and the float64 matrix the columns are views of when every cell is a number or a blank."""
    if not body:
        return [np.empty(0, dtype=np.float64) for _ in range(width)], np.ones(0, dtype=bool), None
    found = _numbers_found(body, width)
    if found is not None and found.dtype != object:  # every cell a number: read in one C pass, no look at each cell's type
        return _number_columns(found.astype(np.float64, copy=False))
    types = set(map(type, itertools.chain.from_iterable(body)))  # one pass in C over every cell
    if types <= NUMBER_TYPES:  # numbers and blanks only: one conversion of the whole range (blanks become NaN)
        return _number_columns(found.astype(np.float64) if found is not None else np.array(body, dtype=np.float64))
    if not types <= CELL_TYPES:
        columns = [_typed_column(list(column), grid, what) for column in zip(*body)]  # each column checked in turn, as the messages expect
    else:
        objects = found if found is not None else np.empty((len(body), width), dtype=object)
        if found is None:
            objects[:] = body  # rows of equal length (as_grid pads them): one copy in C, no list inside a cell
        columns = [_typed_column(objects[:, j], grid, what) for j in range(width)]
    blank = np.ones(len(body), dtype=bool)
    for values in columns:
        blank &= np.isnan(values) if values.dtype.kind == "f" else _none_mask(values)
    return columns, blank, None


_WHOLE_OR_FRACTION = frozenset({float, int})
_TRUE_OR_FALSE = (bool, np.bool_)
_NUMBER_DTYPES = frozenset(map(np.dtype, ("float64", "float32", "int64", "int32", "uint64")))


def _numbers_found(body: list[list[Any]], width: int) -> np.ndarray | None:
    """The data rows as NumPy reads them in one C pass, when the first and last rows hold only numbers: a number
    array when every cell is a number (TRUE and FALSE, which NumPy reads as 1 and 0, ruled out), an object array
    of the cells when some cell is not (a blank, a text), else None. NumPy's own type discovery proves the cells
    numbers (a text, a blank, a date or a list makes another kind of array), so no cell's type is looked at in Python.
    """
    if not all(type(v) in _WHOLE_OR_FRACTION for v in body[0]) or not all(type(v) in _WHOLE_OR_FRACTION for v in body[-1]):
        return None  # texts or blanks in view: reading the rows by NumPy would only cost a pass (or make every cell a text)
    try:
        found = np.array(body)
    except (ValueError, TypeError, OverflowError):  # a list inside a cell: the caller names it
        return None
    if found.shape != (len(body), width):
        return None
    if found.dtype == object:
        return found
    if found.dtype not in _NUMBER_DTYPES:
        return None
    maybe = np.nonzero((found == 0) | (found == 1))  # only such a cell can be TRUE or FALSE
    if len(maybe[0]) and any(type(body[i][j]) in _TRUE_OR_FALSE for i, j in zip(maybe[0].tolist(), maybe[1].tolist())):
        return None
    return found


def _number_columns(matrix: np.ndarray) -> tuple[list[np.ndarray], np.ndarray, np.ndarray]:
    blank = np.asarray(np.isnan(matrix).all(axis=1))
    return list(matrix.T), blank, matrix  # each column a view of the matrix: no copy


def _typed_column(column: Any, grid: list[list[Any]] | Callable[[], list[list[Any]]], what: str) -> np.ndarray:
    """One column's cells as float64 or cleaned cells; a strange cell is named at its place in ``grid`` (the range as rows)."""
    types = set(map(type, column))
    if not types <= CELL_TYPES:
        _check_cell_types(grid() if callable(grid) else grid, what, types)
    if types <= NUMBER_TYPES:
        return np.array(column, dtype=np.float64)
    if types <= {str}:
        cleaned = [v.strip() or None for v in column]
    else:
        cleaned = [_clean(v) for v in column]
    values = np.empty(len(cleaned), dtype=object)
    values[:] = cleaned
    return values


def _none_mask(values: np.ndarray) -> np.ndarray:
    return np.fromiter((v is None for v in values), dtype=bool, count=len(values))


def content_key(*parts: Any) -> str | None:
    """A SHA-256 key of arguments exactly as given, every cell's type and value, for caches of answers.

    Written in one pass in C (marshal, format 2, of plain values only; nothing is ever read back), so a
    10,000-row range costs milliseconds. Two keys are equal only if the arguments are (1, 1.0 and TRUE
    differ, so do 0.0 and -0.0: such a pair only misses the cache). None when a part is not a plain
    value or a list of rows of plain values (a date, a NumPy number or array, which marshal would write
    as bare bytes): the caller then keys it its own way.
    """
    if not all(map(_plain, parts)):
        return None
    return hashlib.sha256(marshal.dumps(parts, 2)).hexdigest()


_PLAIN_CELLS = frozenset({float, int, bool, str, type(None)})
_SEQUENCES = frozenset({list, tuple})


def _plain(value: Any, depth: int = 0) -> bool:
    """A plain cell, or a range of them (a list of cells, or of rows of cells; a `COLUMN_FORM` object) of exactly these types."""
    if type(value) in _PLAIN_CELLS:
        return True
    if type(value) is dict:
        return depth < 3 and all(type(k) is str and _plain(v, depth + 1) for k, v in value.items())
    if type(value) not in _SEQUENCES:
        return False
    kinds = set(map(type, value))
    if kinds <= _PLAIN_CELLS:
        return True
    if dict in kinds and depth < 3:
        return all(_plain(v, depth + 1) for v in value)  # the columns of a COLUMN_FORM object
    if not kinds <= _PLAIN_CELLS | _SEQUENCES:
        return False
    rows = value if kinds <= _SEQUENCES else [row for row in value if type(row) in _SEQUENCES]
    return set(map(type, itertools.chain.from_iterable(rows))) <= _PLAIN_CELLS


FINGERPRINT_SCHEME = "sha256v2:"  # starts every fingerprint of the byte scheme; a first-scheme one is 64 hex digits alone
_FIRST_SCHEME = re.compile(r"[0-9a-f]{64}")
# what each cell is, one byte per cell in the fingerprint's bytes
_BLANK, _NUMBER, _FALSE, _TRUE, _TEXT, _HUGE_WHOLE, _OTHER = range(7)
_CARRY_TEXT = frozenset({_TEXT, _HUGE_WHOLE, _OTHER})


def fingerprint(table: SheetTable, columns: Sequence[str], rows: np.ndarray) -> str:
    """A SHA-256 fingerprint of these columns over ``rows`` (a mask or index over the data rows), as new blocks store it.

    Each column is written as bytes (`fingerprint_bytes`), one C pass for a column of numbers: the scheme's
    name, then the hex digest. Every cell counts exactly: a number to its last bit, so a change in its
    seventeenth digit is a change; -0.0 counts as 0.0 (a sheet shows both as 0 and they compare equal) and
    a blank is a blank whether it came as an empty cell, an empty text or NaN. Blocks written before this
    scheme hold `first_fingerprint`; `fingerprint_matches` compares a table with either.

    >>> fingerprint(read_sheet_table([["x"], [1.5]]), ["x"], np.ones(1, dtype=bool))[:9]
    'sha256v2:'
    """
    digest = hashlib.sha256()
    every = rows.dtype == bool and bool(rows.all())  # no copy of each column then
    for name in columns:
        digest.update(fingerprint_bytes(table.values(name) if every else table.values(name)[rows]))
    return FINGERPRINT_SCHEME + digest.hexdigest()


def fingerprint_matches(table: SheetTable, columns: Sequence[str], rows: np.ndarray, stored: str) -> bool:
    """Whether these columns over ``rows`` have the fingerprint a block stored, in the block's own scheme
    (the first scheme's number texts are written only for a block that holds one)."""
    if stored.startswith(FINGERPRINT_SCHEME):
        return fingerprint(table, columns, rows) == stored
    if _FIRST_SCHEME.fullmatch(stored):
        return first_fingerprint(table, columns, rows) == stored
    return False  # no fingerprint recorded (a model saved from Python knows no table)


def fingerprint_bytes(values: np.ndarray) -> bytes:
    """One column's cells as the fingerprint reads them: a record mark and the cell count (8 bytes, little-endian),
    a kind byte per cell (blank, number, FALSE, TRUE, text, a whole number too large for a double, another value
    such as a date), the numbers as little-endian doubles, then the byte length (8 bytes each) and UTF-8 of every
    text, huge whole number (its digits) and other value (its text). The counts make the layout unambiguous."""
    if values.dtype.kind == "f":
        blank = np.isnan(values)
        kinds = np.where(blank, _BLANK, _NUMBER).astype(np.uint8)
        numbers = values if not blank.any() else values[~blank]
        texts: list[bytes] = []
    else:
        kinds, numbers, texts = _cell_kinds(values)
    lengths = np.fromiter(map(len, texts), dtype="<u8", count=len(texts))
    plain = (np.asarray(numbers, dtype="<f8") + 0.0).tobytes()  # + 0.0 turns -0.0 into 0.0 and leaves every other number as it is
    return b"".join((b"\x1e", len(values).to_bytes(8, "little"), kinds.tobytes(), plain, lengths.tobytes(), *texts))


def _cell_kinds(values: np.ndarray) -> tuple[np.ndarray, list[float], list[bytes]]:
    """A column of cleaned cells (an object array) as kind bytes, its numbers, and its texts as UTF-8."""
    if set(map(type, values)) <= {str, type(None)}:  # a column of texts and blanks, the usual one: no loop in Python per cell
        blank = np.fromiter((v is None for v in values), dtype=bool, count=len(values))
        return np.where(blank, _BLANK, _TEXT).astype(np.uint8), [], [v.encode("utf-8", "surrogatepass") for v in values if v is not None]
    kinds = np.empty(len(values), dtype=np.uint8)
    numbers: list[float] = []
    texts: list[bytes] = []
    for k, value in enumerate(values):
        kind = _cell_kind(value)
        kinds[k] = kind
        if kind == _NUMBER:
            numbers.append(float(value))
        elif kind in _CARRY_TEXT:
            texts.append(str(value).encode("utf-8", "surrogatepass"))
    return kinds, numbers, texts


def _cell_kind(value: Any) -> int:
    if value is None:
        return _BLANK
    if isinstance(value, (bool, np.bool_)):
        return _TRUE if value else _FALSE
    if isinstance(value, str):
        return _TEXT
    if isinstance(value, (int, float, np.number)):
        try:
            number = float(value)
        except OverflowError:
            return _HUGE_WHOLE
        return _BLANK if math.isnan(number) else _NUMBER
    return _OTHER


def first_fingerprint(table: SheetTable, columns: Sequence[str], rows: np.ndarray) -> str:
    """The first scheme's fingerprint, which blocks stored before the byte scheme (`block.table_fingerprint` of these
    columns over ``rows``): the very same digest, with each number column written as text in one pass rather than cell by cell."""
    digest = hashlib.sha256()
    for name in columns:
        values = table.values(name)[rows]
        digest.update(b"\x1e")
        if values.dtype.kind == "f":
            digest.update(_kept_number_texts(values))
        else:
            digest.update(b"".join(_canonical(v.item() if isinstance(v, np.generic) else v).encode("utf-8") + b"\x1f" for v in values))
    return digest.hexdigest()


NUMBER_TEXTS_KEPT = 64 * 2**20  # bytes of number texts kept, so that a table fingerprinted again (ABOUT on every
KEPT_FROM_ROWS = 1_000  # recalculation, TRAIN with other settings) finds its longer columns written already
_kept_texts: OrderedDict[bytes, bytes] = OrderedDict()
_kept_size = [0]
_kept_lock = threading.Lock()  # the server runs cell functions in several threads


def forget_number_texts() -> None:
    """Drop the kept number texts (for measurements of a table never seen, and for tests)."""
    with _kept_lock:
        _kept_texts.clear()
        _kept_size[0] = 0


def _kept_number_texts(values: np.ndarray) -> bytes:
    """`_number_texts`, kept by the column's bytes (equal bytes, equal texts; a NaN with other bits only misses)."""
    if len(values) < KEPT_FROM_ROWS:
        return _number_texts(values)
    key = hashlib.sha256(np.ascontiguousarray(values).tobytes()).digest()
    with _kept_lock:
        found = _kept_texts.get(key)
        if found is not None:
            _kept_texts.move_to_end(key)
            return found
    texts = _number_texts(values)
    with _kept_lock:
        if key not in _kept_texts:
            _kept_texts[key] = texts
            _kept_size[0] += len(texts)
        while _kept_size[0] > NUMBER_TEXTS_KEPT and _kept_texts:
            _kept_size[0] -= len(_kept_texts.popitem(last=False)[1])
    return texts


def _number_texts(values: np.ndarray) -> bytes:
    """Floats as `block._canonical` writes them ('%.15g', -0 as 0, blanks as nan), each ended by \\x1f, in one
    formatting call; a column of whole numbers below 1e15, which '%.15g' writes as their digits, through '%d' (faster)."""
    plain = np.where(values == 0, 0.0, values)
    if ((np.abs(plain) < 1e15) & (plain == np.trunc(plain))).all():  # False for nan and the infinities
        return (("%d\x1f" * len(plain)) % tuple(plain.astype(np.int64).tolist())).encode("ascii")
    return (("%.15g\x1f" * len(plain)) % tuple(plain.tolist())).encode("ascii")


def _number_text(value: float | int) -> str:
    return str(int(value)) if float(value).is_integer() else str(value)


def _clean(value: Any) -> Any:
    if isinstance(value, str):
        text = value.strip()
        return None if not text else text
    if isinstance(value, float) and math.isnan(value):
        return None
    if isinstance(value, np.generic):
        return value.item()
    return value


def numeric_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """Columns whose filled cells are all numbers become float columns (so the fast paths apply)."""
    if all(dtype.kind == "f" for dtype in frame.dtypes):
        return frame  # float columns already: not copied into a frame of their own again
    out = {}
    for name in frame.columns:
        values = frame[name]
        if values.dtype.kind == "f":
            out[name] = values
        elif all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
            out[name] = values.astype(np.float64)
        else:
            out[name] = values
    return pd.DataFrame(out)


NUMBERS_IN_TEXT = ("error", "point", "comma")  # the cell option numbers_in_text: refuse, or read with this decimal mark
_POINT_NUMBER = re.compile(r"[+-]?(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d*)?(?:[eE][+-]?\d+)?|[+-]?\.\d+(?:[eE][+-]?\d+)?")
_COMMA_NUMBER = re.compile(r"[+-]?(?:\d{1,3}(?:\.\d{3})+|\d+)(?:,\d*)?|[+-]?,\d+")
_GROUP_SPACE = re.compile(r"(?<=\d)[ \u00a0\u202f](?=\d{3}(?!\d))")  # 1 234: a space between digit groups


def number_from_text(text: str, decimal_mark: str) -> float | None:
    """A number typed as text, read with ``decimal_mark`` 'point' (1,234.5) or 'comma' (1.234,5); None if it is not one.

    >>> number_from_text("12%", "point"), number_from_text("1,234", "point"), number_from_text("32,1", "comma")
    (0.12, 1234.0, 32.1)
    """
    body = text.strip()
    percent = body.endswith("%")
    if percent:
        body = body[:-1].rstrip()
    body = _GROUP_SPACE.sub("", body)
    if decimal_mark == "point":
        if not _POINT_NUMBER.fullmatch(body):
            return None
        number = float(body.replace(",", ""))
    else:
        if not _COMMA_NUMBER.fullmatch(body):
            return None
        number = float(body.replace(".", "").replace(",", "."))
    return number / 100 if percent else number


def _reads_as_number(text: str) -> bool:
    return number_from_text(text, "point") is not None or number_from_text(text, "comma") is not None


def read_numbers_in_text(table: SheetTable, columns: Sequence[str], mode: str, fix: str) -> SheetTable:
    """The table with numbers typed as text in ``columns`` read as numbers (mode point or comma), or refused (mode error).

    A column counts as numbers typed as text when every text in it (spreadsheet
    error values aside) reads as a number, such as '12%', '1,234', '32,1' or
    '1 234'. Mode error refuses the first such cell with ``fix`` as the advice;
    otherwise each text is read with the mode's decimal mark, and a text that
    only reads with the other mark is refused. Columns holding other text are
    left as they are. ``{column}`` in ``fix`` becomes the column's name.
    """
    replaced: dict[str, np.ndarray] = {}
    for name in columns:
        values = table.values(name)
        if values.dtype.kind == "f":
            continue
        texts = [(k, v) for k, v in enumerate(values) if isinstance(v, str) and v.upper() not in ERROR_VALUES]
        if not texts or not all(_reads_as_number(v) for _, v in texts):
            continue
        if mode == "error":
            k, value = texts[0]
            raise BadValueError(name, k + 1, value, "a number typed as text", fix.replace("{column}", name), range_row(int(table.data_rows[k])))
        read = values.copy()
        for k, value in texts:
            number = number_from_text(value, mode)
            if number is None:
                other = "comma" if mode == "point" else "point"
                raise BadValueError(
                    name, k + 1, value, f"this text reads as a number only with a decimal {other}",
                    f"type it with a decimal {mode} like the rest of the column, or use the setting numbers_in_text={other} if the column is written that way",
                    range_row(int(table.data_rows[k])),
                )
            read[k] = number
        replaced[name] = read
    if not replaced:
        return table
    return SheetTable({**table.columns, **replaced}, table.data_rows, table.n_rows)


def range_row(data_row: int) -> int:
    """A data row (0 = the first below the header) as the user counts it in the range: the header is row 1."""
    return data_row + 2


def row_label(data_row: int) -> str:
    """How the user sees a data row: the header is row 1 of the table."""
    return f"row {range_row(data_row)} of the table"


HIDDEN_FIX = "write the widths of the hidden layers like 8 or 8,4 (0 or none for no hidden layer)"


def parse_hidden(value: Any) -> tuple[int, ...] | None:
    """``8``, ``"8"``, ``"8,4"``, ``"8; 4"`` or ``"8 4"`` as hidden layer widths; blank is None, which `sheetnet.fit`
    takes as its default (one layer of 16; on a small table 16, 4 or none, as cross-validation prefers).

    An empty place (``8,,4``), a zero inside a list, a fraction or a negative width is refused
    rather than guessed: ``8,,4`` may be a typing slip for ``8,16,4``.
    """
    if is_blank(value):
        return None
    if isinstance(value, bool):
        raise SettingError(f"hidden layers got {cell_in_words(value)}; {HIDDEN_FIX}")
    if isinstance(value, (int, float, np.number)):
        parts = [float(value)]
        if parts[0] == 0:
            return ()
    else:
        text = str(value).strip()
        if text.lower() in ("0", "none"):
            return ()
        pieces = re.split(r"\s*[,;]\s*", text) if re.search(r"[,;]", text) else text.split()
        if any(not piece for piece in pieces):
            raise SettingError(f"hidden layers {cell_in_words(value)} have an empty place between separators; {HIDDEN_FIX}")
        try:
            parts = [float(piece) for piece in pieces]
        except ValueError:
            raise SettingError(f"hidden layers {cell_in_words(value)} are not numbers; {HIDDEN_FIX}") from None
    if len(parts) > MAX_LAYERS:
        raise SettingError(f"hidden layers {cell_in_words(value)} ask for {len(parts)} layers, more than the {MAX_LAYERS} sheetnet trains; {HIDDEN_FIX}")
    for width in parts:
        if not math.isfinite(width) or width != int(width) or width < 1:
            raise SettingError(
                f"hidden layers {cell_in_words(value)} hold the width {cell_in_words(width)}; every width must be a whole number of 1 or more: {HIDDEN_FIX}"
            )
    return tuple(int(width) for width in parts)


def parse_settings(value: Any) -> dict[str, Any]:
    """Settings from a two-column range (name, value) or a text like ``epochs=500; rate=0.3``."""
    if value is None or (not isinstance(value, (list, tuple, np.ndarray)) and is_blank(value)):
        return {}
    found: dict[str, Any] = {}
    if isinstance(value, (list, tuple, np.ndarray)):
        grid = as_grid(value, "settings")
        if len(grid[0]) == 1 and len(grid) == 1:
            return parse_settings(grid[0][0])
        for row in grid:
            if len(row) < 2:
                raise SettingError("a settings range needs two columns: the setting's name, then its value")
            name, setting = row[0], row[1]
            if is_blank(name):
                continue
            found[str(name).strip().lower()] = None if is_blank(setting) else setting
        return found
    for part in str(value).replace("\n", ";").split(";"):
        if not part.strip():
            continue
        if "=" not in part:
            raise SettingError(f"the setting '{part.strip()}' has no '='; write settings like epochs=500; rate=0.3")
        name, setting = part.split("=", 1)
        found[name.strip().lower()] = setting.strip()
    return found


def column_of(cells: Any, what: str, height: int) -> tuple[str, list[Any]]:
    """A one-column range with a header, such as the column SPLIT returns, checked against a table's height."""
    grid = as_grid(cells, what)
    if len(grid[0]) != 1:
        raise InputError(f"the {what} must be one column; it has {len(grid[0])}")
    values = [row[0] for row in grid[1:]]
    if len(values) != height:
        raise InputError(f"the {what} has {len(values)} rows below its header but the table has {height}; select both ranges over the same rows")
    header = grid[0][0]
    if is_blank(header):
        raise InputError(f"the {what} has a blank first cell; select the {what} with its header (its name) on top")
    return _number_text(header) if isinstance(header, (int, float)) and not isinstance(header, bool) else str(header).strip(), values


def one_value(value: Any, what: str) -> Any:
    """An argument that takes one cell: a 1 x 1 range gives its cell; a larger range is refused."""
    if isinstance(value, np.ndarray):
        value = value.tolist()
    while isinstance(value, (list, tuple)) and len(value) == 1:
        value = value[0]
    if isinstance(value, (list, tuple)):
        raise SettingError(f"the {what} takes one cell, but it got a range of several cells; select or type one value")
    _check_cell_types([[value]], what)
    return value


def as_cells(values: Sequence[Any] | np.ndarray) -> list[Cell]:
    """Python and NumPy values as plain cell values (NaN becomes a blank)."""
    if isinstance(values, np.ndarray) and values.dtype.kind == "f" and np.isfinite(values).all():
        return values.tolist()  # the common case, without a loop in Python
    if isinstance(values, np.ndarray):
        values = values.tolist()
    out: list[Cell] = []
    for v in values:
        if isinstance(v, np.generic):
            v = v.item()
        if isinstance(v, float) and not math.isfinite(v):
            v = None
        out.append(v)
    return out
