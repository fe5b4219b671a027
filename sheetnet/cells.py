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

import math
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
import pandas as pd

from .errors import InputError, SettingError, UnknownColumnError

Cell = float | int | bool | str | None
Cells = list[list[Cell]]

MARKER = "#SHEETNET!"  # starts every message a cell function returns instead of an answer
MAX_CELLS = 2_000_000  # larger ranges are refused before any work starts
NUMBER_TYPES = frozenset({float, int, type(None), np.float64, np.float32, np.int64, np.int32})


def message_cell(text: str) -> Cells:
    """One cell holding a readable failure message."""
    return [[f"{MARKER} {text}"]]


def is_blank(value: Any) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    return isinstance(value, str) and not value.strip()


def as_grid(cells: Any, what: str) -> list[list[Any]]:
    """A range as a list of rows; a single value is a 1 x 1 range."""
    if isinstance(cells, np.ndarray):
        cells = cells.tolist()
    if not isinstance(cells, (list, tuple)):
        return [[cells]]
    if not cells:
        raise InputError(f"the {what} range is empty; select a range with a header row and data rows")
    rows = cells if all(type(r) is list for r in cells) else [list(r) if isinstance(r, (list, tuple, np.ndarray)) else [r] for r in cells]
    widths = set(map(len, rows))
    width = max(widths)
    if len(rows) * width > MAX_CELLS:
        raise InputError(
            f"the {what} range has {len(rows) * width:,} cells, more than the {MAX_CELLS:,} sheetnet reads; select only the rows and columns in use"
        )
    if len(widths) == 1:
        return list(rows)  # rectangular already: the rows are read, never changed, so they are not copied
    return [r + [None] * (width - len(r)) for r in rows]


@dataclass(frozen=True)
class SheetTable:
    """A table read from a range: named columns and which rows hold data."""

    frame: pd.DataFrame  # data rows only (blank rows dropped), columns by name, object dtype
    data_rows: np.ndarray  # for each frame row, its index among the range's data rows (0 = row 2)
    n_rows: int  # data rows in the range, blank ones included (the height of per-row answers)

    def column(self, name: str) -> pd.Series:
        if name not in self.frame.columns:
            raise UnknownColumnError(f"the table has no column named '{name}'; its columns are: {', '.join(map(str, self.frame.columns))}")
        return self.frame[name]


def read_sheet_table(cells: Any, what: str = "table") -> SheetTable:
    """Split a range into header and data rows; refuse missing or repeated column names."""
    grid = as_grid(cells, what)
    header = grid[0]
    names: list[str] = []
    for j, name in enumerate(header):
        if is_blank(name):
            raise InputError(f"the {what}'s header (its first row) has a blank cell in column {j + 1}; give every column a name")
        text = _number_text(name) if isinstance(name, (int, float)) and not isinstance(name, bool) else str(name).strip()
        if text in names:
            raise InputError(f"the {what} has two columns named '{text}'; give each column its own name")
        names.append(text)
    body = grid[1:]
    columns = list(zip(*body)) if body else [() for _ in names]
    blank = np.ones(len(body), dtype=bool)
    typed: list[np.ndarray | list[Any]] = []
    for column in columns:
        if set(map(type, column)) <= NUMBER_TYPES:  # numbers and blanks only: one vectorised conversion
            numbers = np.array(column, dtype=np.float64)  # blanks (None) become NaN
            blank &= np.isnan(numbers)
            typed.append(numbers)
        else:
            cleaned = [_clean(v) for v in column]
            blank &= np.fromiter((v is None for v in cleaned), dtype=bool, count=len(cleaned))
            typed.append(cleaned)
    keep = np.flatnonzero(~blank)
    if not len(keep):
        raise InputError(f"the {what} has a header but no data rows; include the rows below the header")
    data = {
        name: values[keep] if isinstance(values, np.ndarray) else pd.Series([values[i] for i in keep], dtype=object)
        for name, values in zip(names, typed)
    }
    return SheetTable(pd.DataFrame(data), keep, len(body))


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


def row_label(data_row: int) -> str:
    """How the user sees a data row: the header is row 1 of the table."""
    return f"row {data_row + 2} of the table"


def parse_hidden(value: Any) -> tuple[int, ...]:
    """``8``, ``"8"``, ``"8,4"`` or ``"8 4"`` as hidden layer widths; blank means one layer of 4."""
    if is_blank(value):
        return (4,)
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        widths = [value]
    else:
        text = str(value).replace(";", ",").replace(" ", ",")
        if text.strip(",").strip() in ("0", "none"):
            return ()
        try:
            widths = [float(part) for part in text.split(",") if part.strip()]
        except ValueError:
            raise SettingError(f"hidden layers '{value}' are not numbers; write widths like 8 or 8,4") from None
    result = []
    for width in widths:
        if width != int(width) or width < 0:
            raise SettingError(f"hidden layers '{value}' must be whole numbers like 8 or 8,4")
        if width > 0:
            result.append(int(width))
    return tuple(result)


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
    return str(grid[0][0]), values


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
