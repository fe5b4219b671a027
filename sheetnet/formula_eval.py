"""A small evaluator for the formula language sheetnet's native formulas are written in.

Pure: text in, cell values out; no I/O and no ``eval``. A tokenizer and a
recursive-descent parser turn a formula into a tree of Python closures,
which run over defined names (each a constant rectangle of cells) and cell
references (each one given value). `check_native_formulas` uses it to tell,
without a spreadsheet, whether the native formulas over the constants as a
workbook stores them give what the model predicts.

What it understands, and nothing more: number, text and TRUE/FALSE
literals; cell references (``Data!$A2``, ``'My data'!B$7``, ``A2``);
defined names; ``+ - * / ^ &``, the comparisons ``= <> < > <= >=``, unary
minus and plus (so ``--``); and the functions in `formulas.ALLOWED_FUNCTIONS`.
Every value is a rectangle of cells, as in a one-cell array formula:
element-wise operations pair cells up, a single cell or a single row or
column is repeated to fit, and cells beyond a shorter operand are #N/A.
IF with a one-cell condition evaluates only the branch it picks. A part
that appears several times with the same text (each repeat's network
appears in several places of a softmax) is computed once per evaluation,
and once for all rows if it reads no cell.

Cell semantics follow the common spreadsheet rules (common practice, no
source; LibreOffice's rules are from memory of its source): a blank is 0 to
arithmetic and "" to text; TRUE and FALSE are 1 and 0 to arithmetic; text is
never turned into a number (#VALUE!); comparing values of different kinds
orders numbers before texts before logicals and never finds them equal;
texts compare ignoring case; numbers compare equal when they differ by less
than 2^-48 of their size, as LibreOffice's approxEqual does. Errors pass
through operations; SUM, MAX and COUNT skip text and logicals (COUNT
counts numbers only, as Excel counts cells; LibreOffice also counts TRUE and
FALSE cells). Logicals are a kind of their own, as in Excel; LibreOffice
holds them as the numbers 1 and 0, and native formulas ask ISLOGICAL first
wherever that could matter, so both engines agree with this evaluator.
"""

from __future__ import annotations

import datetime
import math
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from .errors import InputError, SheetnetError
from .model import Model

# --- cell values -----------------------------------------------------------------------------


@dataclass(frozen=True)
class ErrorValue:
    """A spreadsheet error value such as #N/A, as a cell shows it."""

    code: str

    def __str__(self) -> str:
        return self.code


NA = ErrorValue("#N/A")
VALUE = ErrorValue("#VALUE!")
DIV0 = ErrorValue("#DIV/0!")
NUM = ErrorValue("#NUM!")
REF = ErrorValue("#REF!")
NAME = ErrorValue("#NAME?")

Cell = float | str | bool | ErrorValue | None  # None is a blank cell
Grid = np.ndarray  # 2-D: float64 (numbers only), bool (logicals only) or object (any cells)
# names, cells, results of this evaluation, results of parts reading no cell (kept across rows)
Environment = tuple[Mapping[str, Grid], Mapping[str, Cell], dict[str, Grid], dict[str, Grid]]
Compiled = Callable[[Environment], Grid]

APPROX = 1.0 / 2.0**48  # LibreOffice's rtl::math::approxEqual tolerance (from memory)
EXCEL_EPOCH = datetime.datetime(1899, 12, 30)  # serial 0 of the 1900 date system


class FormulaSyntaxError(SheetnetError, ValueError):
    """The text is not a formula this evaluator understands."""


def cell_value(value: Any) -> Cell:
    """A Python or NumPy value as a spreadsheet cell holds it (dates become serial numbers, NaN a blank)."""
    if value is None or isinstance(value, (str, ErrorValue)):
        return value
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, float, np.integer, np.floating)):
        number = float(value)
        return None if math.isnan(number) else number
    if isinstance(value, datetime.datetime):
        return (value - EXCEL_EPOCH).total_seconds() / 86400.0
    if isinstance(value, datetime.date):
        return float((value - EXCEL_EPOCH.date()).days)
    if isinstance(value, datetime.time):
        return (value.hour * 3600 + value.minute * 60 + value.second + value.microsecond / 1e6) / 86400.0
    return str(value)


def grid_of(rows: Any) -> Grid:
    """A rectangle of cells (rows of values, a NumPy array or one value) as an evaluator grid."""
    if isinstance(rows, np.ndarray) and rows.dtype.kind in "fiu":
        return np.atleast_2d(rows.astype(np.float64))
    if isinstance(rows, np.ndarray):
        rows = rows.tolist()
    if not isinstance(rows, (list, tuple)):
        rows = [[rows]]
    elif rows and not isinstance(rows[0], (list, tuple)):
        rows = [rows]
    cells = [[cell_value(v) for v in row] for row in rows]
    if not cells or len({len(r) for r in cells}) != 1 or not cells[0]:
        raise FormulaSyntaxError("a defined name must hold a filled rectangle of cells")
    out = np.empty((len(cells), len(cells[0])), dtype=object)
    out[:, :] = cells
    return _tighten(out)


def _tighten(grid: Grid) -> Grid:
    """Numbers-only object grids become float64, so arithmetic on them runs in NumPy."""
    if grid.dtype == object and all(type(v) is float for v in grid.flat):
        return grid.astype(np.float64)
    return grid


def _scalar(value: Cell) -> Grid:
    out = np.empty((1, 1), dtype=object)
    out[0, 0] = value
    return out


def _plain(value: Any) -> Cell:
    """A cell taken out of a grid as a plain Python value (NumPy scalars converted)."""
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value  # type: ignore[no-any-return]


def _top_left(grid: Grid) -> Cell:
    return _plain(grid[0, 0])


def _number(value: Cell) -> float | ErrorValue:
    if isinstance(value, ErrorValue):
        return value
    if value is None:
        return 0.0
    if isinstance(value, bool):
        return 1.0 if value else 0.0
    if isinstance(value, float):
        return value
    return VALUE  # text is never read as a number here


def _text(value: Cell) -> str | ErrorValue:
    if isinstance(value, ErrorValue):
        return value
    if value is None:
        return ""
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, float):
        return str(int(value)) if value.is_integer() and abs(value) < 1e15 else f"{value:.15g}"
    return value


def _truth(value: Cell) -> bool | ErrorValue:
    if isinstance(value, ErrorValue):
        return value
    if isinstance(value, str):
        return VALUE
    number = _number(value)
    return number if isinstance(number, ErrorValue) else number != 0.0


def approx_equal(a: float, b: float) -> bool:
    """Numbers equal as a spreadsheet compares them (relative 2^-48)."""
    if a == b:
        return True
    if a == 0.0 or b == 0.0:
        return False
    difference = abs(a - b)
    return difference < abs(a) * APPROX and difference < abs(b) * APPROX


def _rank(value: Cell) -> int:
    return 1 if isinstance(value, str) else 2 if isinstance(value, bool) else 0


def _compare(a: Cell, b: Cell) -> int | ErrorValue:
    """-1, 0 or 1 as a spreadsheet orders two cells."""
    if isinstance(a, ErrorValue):
        return a
    if isinstance(b, ErrorValue):
        return b
    if a is None:
        a = "" if isinstance(b, str) else False if isinstance(b, bool) else 0.0
    if b is None:
        b = "" if isinstance(a, str) else False if isinstance(a, bool) else 0.0
    ra, rb = _rank(a), _rank(b)
    if ra != rb:
        return -1 if ra < rb else 1
    if isinstance(a, str) and isinstance(b, str):
        la, lb = a.lower(), b.lower()
        return 0 if la == lb else -1 if la < lb else 1
    fa, fb = float(a), float(b)  # type: ignore[arg-type]
    return 0 if approx_equal(fa, fb) else -1 if fa < fb else 1


_COMPARISONS: dict[str, Callable[[int], bool]] = {
    "=": lambda c: c == 0, "<>": lambda c: c != 0, "<": lambda c: c < 0,
    ">": lambda c: c > 0, "<=": lambda c: c <= 0, ">=": lambda c: c >= 0,
}


# --- rectangles --------------------------------------------------------------------------------


def _fit(a: Grid, b: Grid) -> tuple[Grid, Grid]:
    """Both grids at one shape: single cells, rows and columns repeat; missing cells are #N/A."""
    if a.shape == b.shape:
        return a, b
    shape = tuple(max(x, y) for x, y in zip(a.shape, b.shape))
    return _stretch(a, shape), _stretch(b, shape)


def _stretch(grid: Grid, shape: tuple[int, ...]) -> Grid:
    if grid.shape == shape:
        return grid
    if all(have in (1, want) for have, want in zip(grid.shape, shape)):
        return np.broadcast_to(grid, shape)
    rows = np.arange(shape[0]) if grid.shape[0] != 1 else np.zeros(shape[0], dtype=np.int64)
    columns = np.arange(shape[1]) if grid.shape[1] != 1 else np.zeros(shape[1], dtype=np.int64)
    inside = (rows[:, None] < grid.shape[0]) & (columns[None, :] < grid.shape[1])
    if inside.all():
        return grid[np.ix_(rows, columns)]
    out = np.full(shape, NA, dtype=object)
    r, c = np.nonzero(inside)
    out[r, c] = grid.astype(object)[rows[r], columns[c]]
    return out


def _numbers(grid: Grid) -> Grid:
    """Each cell read as a number (float64 grid when all are), else an object grid holding errors."""
    if grid.dtype == np.float64:
        return grid
    if grid.dtype == bool:
        return grid.astype(np.float64)
    out = np.empty(grid.shape, dtype=object)
    out[:, :] = [[_number(v) for v in row] for row in grid]
    return _tighten(out)


def _finish(numbers: np.ndarray) -> Grid:
    """Float results with the cells a spreadsheet would show as #NUM! made error values."""
    if np.isfinite(numbers).all():
        return numbers
    out = numbers.astype(object)
    out[~np.isfinite(numbers)] = NUM
    return out


def _arithmetic(operator: str, a: Grid, b: Grid) -> Grid:
    a, b = _fit(_numbers(a), _numbers(b))
    if a.dtype == np.float64 and b.dtype == np.float64:
        with np.errstate(all="ignore"):
            if operator == "/":
                result = _finish(a / np.where(b == 0.0, 1.0, b))
                if (b == 0.0).any():
                    result = result.astype(object)
                    result[b == 0.0] = DIV0
                return result
            return _finish(_FLOAT_OPERATORS[operator](a, b))
    out = np.empty(a.shape, dtype=object)
    for index in np.ndindex(a.shape):
        x, y = a[index], b[index]
        if isinstance(x, ErrorValue) or isinstance(y, ErrorValue):
            out[index] = x if isinstance(x, ErrorValue) else y
        elif operator == "/" and y == 0.0:
            out[index] = DIV0
        else:
            with np.errstate(all="ignore"):
                value = float(_FLOAT_OPERATORS[operator](np.float64(x), np.float64(y)))
            out[index] = value if math.isfinite(value) else NUM
    return _tighten(out)


_FLOAT_OPERATORS: dict[str, Callable[[Any, Any], Any]] = {
    "+": np.add, "-": np.subtract, "*": np.multiply, "/": np.divide, "^": np.power,
}


def _comparison(operator: str, a: Grid, b: Grid) -> Grid:
    a, b = _fit(a, b)
    test = _COMPARISONS[operator]
    if a.dtype == np.float64 and b.dtype == np.float64 and operator in ("=", "<>"):
        close = (a == b) | ((np.abs(a - b) < np.abs(a) * APPROX) & (np.abs(a - b) < np.abs(b) * APPROX))
        return close if operator == "=" else ~close
    out = np.empty(a.shape, dtype=object)
    for index in np.ndindex(a.shape):
        order = _compare(_plain(a[index]), _plain(b[index]))
        out[index] = order if isinstance(order, ErrorValue) else test(order)
    return _logicals(out)


def _logicals(grid: Grid) -> Grid:
    if all(type(v) is bool for v in grid.flat):
        return grid.astype(bool)
    return grid


def _concatenate(a: Grid, b: Grid) -> Grid:
    a, b = _fit(a, b)
    out = np.empty(a.shape, dtype=object)
    for index in np.ndindex(a.shape):
        x, y = _text(_plain(a[index])), _text(_plain(b[index]))
        out[index] = x if isinstance(x, ErrorValue) else y if isinstance(y, ErrorValue) else x + y
    return out


def _negate(grid: Grid) -> Grid:
    numbers = _numbers(grid)
    if numbers.dtype == np.float64:
        return -numbers
    out = np.empty(numbers.shape, dtype=object)
    out[:, :] = [[v if isinstance(v, ErrorValue) else -v for v in row] for row in numbers]
    return out


def _first_error(grid: Grid) -> ErrorValue | None:
    if grid.dtype != object:
        return None
    return next((v for v in grid.flat if isinstance(v, ErrorValue)), None)


# --- functions ---------------------------------------------------------------------------------


def _element_wise(function: Callable[[np.ndarray], np.ndarray]) -> Callable[[Grid], Grid]:
    def apply(grid: Grid) -> Grid:
        numbers = _numbers(grid)
        if numbers.dtype == np.float64:
            with np.errstate(all="ignore"):
                return _finish(function(numbers))
        out = np.empty(numbers.shape, dtype=object)
        for index in np.ndindex(numbers.shape):
            value = numbers[index]
            if isinstance(value, ErrorValue):
                out[index] = value
            else:
                with np.errstate(all="ignore"):
                    result = float(function(np.array(value, dtype=np.float64)))
                out[index] = result if math.isfinite(result) else NUM
        return _tighten(out)

    return apply


def _aggregate(function: Callable[[list[float]], float]) -> Callable[..., Grid]:
    def apply(*grids: Grid) -> Grid:
        values: list[float] = []
        for grid in grids:
            if grid.dtype == np.float64:
                values.extend(grid.ravel().tolist())
                continue
            for value in grid.flat:
                if isinstance(value, ErrorValue):
                    return _scalar(value)
                if type(value) is float or isinstance(value, np.floating):
                    values.append(float(value))
        return _scalar(function(values))

    return apply


def _mmult(a: Grid, b: Grid) -> Grid:
    a, b = _numbers(a), _numbers(b)
    for grid in (a, b):
        error = _first_error(grid)
        if error is not None:
            return _scalar(error)
    if a.shape[1] != b.shape[0]:
        return _scalar(VALUE)
    return _finish(a @ b)


def _whole_number(grid: Grid) -> int | ErrorValue:
    value = _number(_top_left(grid))
    return value if isinstance(value, ErrorValue) else int(value)


def _index(grid: Grid, row: Grid, column: Grid | None = None) -> Grid:
    r = _whole_number(row)
    c: int | ErrorValue = 0 if column is None else _whole_number(column)
    if isinstance(r, ErrorValue) or isinstance(c, ErrorValue):
        return _scalar(r if isinstance(r, ErrorValue) else c)
    if column is None and grid.shape[0] == 1:  # INDEX(row, n) picks the n-th cell of a single row
        r, c = 1, r
    height, width = grid.shape
    if not (0 <= r <= height and 0 <= c <= width):
        return _scalar(REF)
    rows = slice(None) if r == 0 else slice(r - 1, r)
    columns = slice(None) if c == 0 else slice(c - 1, c)
    return grid[rows, columns]


def _match(value: Grid, grid: Grid, kind: Grid | None = None) -> Grid:
    if kind is None or _number(_top_left(kind)) != 0.0:
        raise FormulaSyntaxError("MATCH is understood only with match type 0 (exact)")
    wanted = _top_left(value)
    if isinstance(wanted, ErrorValue):
        return _scalar(wanted)
    if 1 not in grid.shape:
        return _scalar(NA)
    for position, cell in enumerate(grid.astype(object).ravel().tolist(), start=1):
        if not isinstance(cell, ErrorValue) and _compare(wanted, cell) == 0:
            return _scalar(float(position))
    return _scalar(NA)


def _if_error(grid: Grid, instead: Grid) -> Grid:
    if grid.dtype != object:
        return grid
    grid, instead = _fit(grid, instead)
    out = np.empty(grid.shape, dtype=object)
    for index in np.ndindex(grid.shape):
        value = grid[index]
        out[index] = _plain(instead[index]) if isinstance(value, ErrorValue) else value
    return _tighten(out)


def _count_numbers(grid: Grid) -> int:
    if grid.dtype == np.float64:
        return grid.size
    return sum(1 for v in grid.flat if isinstance(v, (float, np.floating)))  # logicals are not counted


def _cell_test(test: Callable[[Any], bool]) -> Callable[[Grid], Grid]:
    def apply(grid: Grid) -> Grid:
        if grid.dtype == np.float64:
            return np.full(grid.shape, test(1.0))
        if grid.dtype == bool:
            return np.full(grid.shape, test(True))
        return np.vectorize(test, otypes=[bool])(grid)

    return apply


def _trim(grid: Grid) -> Grid:
    out = np.empty(grid.shape, dtype=object)
    for index in np.ndindex(grid.shape):
        text = _text(_plain(grid[index]))
        out[index] = text if isinstance(text, ErrorValue) else re.sub(" +", " ", text.strip(" "))
    return out


_FUNCTIONS: dict[str, tuple[int, int, Callable[..., Grid]]] = {  # name: (fewest, most arguments, function)
    "MMULT": (2, 2, _mmult),
    "INDEX": (2, 3, _index),
    "TANH": (1, 1, _element_wise(np.tanh)),
    "EXP": (1, 1, _element_wise(np.exp)),
    "ABS": (1, 1, _element_wise(np.abs)),
    "SUM": (1, 255, _aggregate(math.fsum)),
    "MAX": (1, 255, _aggregate(lambda v: max(v) if v else 0.0)),
    "MATCH": (2, 3, _match),
    "NA": (0, 0, lambda: _scalar(NA)),
    "IFERROR": (2, 2, lambda grid, instead: _if_error(grid, instead)),
    "COUNT": (1, 255, lambda *grids: _scalar(float(sum(_count_numbers(g) for g in grids)))),
    "ISLOGICAL": (1, 1, _cell_test(lambda v: isinstance(v, (bool, np.bool_)))),
    "ISNUMBER": (1, 1, _cell_test(lambda v: isinstance(v, (float, np.floating)) and not isinstance(v, bool))),
    "TRIM": (1, 1, _trim),
}  # IF is in the parser: it picks a branch before evaluating it


# --- tokens and parsing ------------------------------------------------------------------------

_TOKEN = re.compile(
    r"""\s*(?:
      (?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)
    | (?P<string>"(?:[^"]|"")*")
    | (?P<reference>(?:(?:'(?:[^']|'')+'|[A-Za-z_][A-Za-z0-9_.]*)!)?\$?[A-Za-z]{1,3}\$?\d+(?![A-Za-z0-9_.(!]))
    | (?P<function>[A-Za-z_][A-Za-z0-9_.]*(?=\())
    | (?P<name>[A-Za-z_\\][A-Za-z0-9_.]*)
    | (?P<operator><>|<=|>=|[-+*/^&=<>(),])
    )""",
    re.VERBOSE,
)


def _tokens(text: str) -> list[tuple[str, str, int, int]]:
    """(kind, text, first character, after the last character) of each token."""
    tokens: list[tuple[str, str, int, int]] = []
    at = 0
    text = text.rstrip()
    while at < len(text):
        match = _TOKEN.match(text, at)
        if match is None or match.end() == at:
            at += len(text[at:]) - len(text[at:].lstrip())
            raise FormulaSyntaxError(f"the formula cannot be read from character {at + 1}: {text[at:at + 20]!r}")
        kind = match.lastgroup
        assert kind is not None
        tokens.append((kind, match.group(kind), match.start(kind), match.end(kind)))
        at = match.end()
    return tokens


def reference_key(reference: str) -> str:
    """One spelling of a cell reference: no $, sheet name unquoted and case-folded, column upper case.

    >>> reference_key("'My data'!$b$7"), reference_key("Data!A2")
    ('my data!B7', 'data!A2')
    """
    sheet, _, cell = reference.rpartition("!")
    if sheet.startswith("'") and sheet.endswith("'"):
        sheet = sheet[1:-1].replace("''", "'")
    cell = cell.replace("$", "").upper()
    return f"{sheet.casefold()}!{cell}" if sheet else cell


class _Parser:
    def __init__(self, text: str) -> None:
        found = _tokens(text)
        self.text = text
        self.tokens = [(kind, token) for kind, token, _, _ in found]
        self.starts = [start for _, _, start, _ in found]
        self.ends = [end for _, _, _, end in found]
        self.references_before = [0]  # references among the first i tokens
        for kind, _ in self.tokens:
            self.references_before.append(self.references_before[-1] + (kind == "reference"))
        self.at = 0
        self.names: set[str] = set()
        self.references: set[str] = set()

    def remembered(self, start: int, compiled: Compiled) -> Compiled:
        """The part spanning tokens ``start`` to here, computed once per evaluation (once for all, if it reads no cell).

        Native formulas repeat parts (each member's output appears in several
        places of a softmax), so this saves most of the work.
        """
        key = self.text[self.starts[start]:self.ends[self.at - 1]]  # the same text is the same part
        constant = self.references_before[self.at] == self.references_before[start]

        def apply(env: Environment) -> Grid:
            memo = env[3] if constant else env[2]
            found = memo.get(key)
            if found is None:
                found = memo[key] = compiled(env)
            return found

        return apply

    def peek(self) -> tuple[str, str] | None:
        return self.tokens[self.at] if self.at < len(self.tokens) else None

    def take(self, expected: str | None = None) -> tuple[str, str]:
        token = self.peek()
        if token is None or (expected is not None and token[1] != expected):
            found = "the end" if token is None else repr(token[1])
            raise FormulaSyntaxError(f"the formula has {found} where {expected or 'a value'} belongs")
        self.at += 1
        return token

    def operator(self, *choices: str) -> str | None:
        token = self.peek()
        if token is not None and token[0] == "operator" and token[1] in choices:
            self.at += 1
            return token[1]
        return None

    def formula(self) -> Compiled:
        self.operator("=")
        compiled = self.comparison()
        if self.peek() is not None:
            raise FormulaSyntaxError(f"the formula has {self.peek()[1]!r} where it should end")  # type: ignore[index]
        return compiled

    def comparison(self) -> Compiled:
        start, left = self.at, self.concatenation()
        while (operator := self.operator("=", "<>", "<=", ">=", "<", ">")) is not None:
            left = self.remembered(start, _binary(_comparison, operator, left, self.concatenation()))
        return left

    def concatenation(self) -> Compiled:
        start, left = self.at, self.additive()
        while self.operator("&") is not None:
            left = self.remembered(start, _binary(lambda _, a, b: _concatenate(a, b), "&", left, self.additive()))
        return left

    def additive(self) -> Compiled:
        start, left = self.at, self.term()
        while (operator := self.operator("+", "-")) is not None:
            left = self.remembered(start, _binary(_arithmetic, operator, left, self.term()))
        return left

    def term(self) -> Compiled:
        start, left = self.at, self.power()
        while (operator := self.operator("*", "/")) is not None:
            left = self.remembered(start, _binary(_arithmetic, operator, left, self.power()))
        return left

    def power(self) -> Compiled:
        start, left = self.at, self.unary()
        while self.operator("^") is not None:
            left = self.remembered(start, _binary(_arithmetic, "^", left, self.unary()))
        return left

    def unary(self) -> Compiled:  # binds tighter than ^, as in spreadsheets: -2^2 is 4
        start = self.at
        operator = self.operator("-", "+")
        if operator is None:
            return self.primary()
        inner = self.unary()
        if operator == "+":
            return inner
        return self.remembered(start, lambda env: _negate(inner(env)))

    def primary(self) -> Compiled:
        kind, text = self.take()
        if kind == "number":
            value = _scalar(float(text)).astype(np.float64)
            return lambda env: value
        if kind == "string":
            literal = _scalar(text[1:-1].replace('""', '"'))
            return lambda env: literal
        if kind == "reference":
            key = reference_key(text)
            self.references.add(key)
            return lambda env: _scalar(env[1].get(key))
        if kind == "name":
            if text.upper() in ("TRUE", "FALSE"):
                logical = np.full((1, 1), text.upper() == "TRUE")
                return lambda env: logical
            folded = text.casefold()
            self.names.add(folded)
            return lambda env: env[0].get(folded, _scalar(NAME))
        if kind == "function":
            start = self.at - 1
            return self.remembered(start, self.call(text.upper()))
        if text == "(":
            inner = self.comparison()
            self.take(")")
            return inner
        raise FormulaSyntaxError(f"the formula has {text!r} where a value belongs")

    def call(self, function: str) -> Compiled:
        self.take("(")
        arguments: list[Compiled] = []
        if self.operator(")") is None:
            arguments.append(self.comparison())
            while self.operator(",") is not None:
                arguments.append(self.comparison())
            self.take(")")
        if function == "IF":
            if not 2 <= len(arguments) <= 3:
                raise FormulaSyntaxError(f"IF takes 2 or 3 arguments, not {len(arguments)}")
            return _if(*arguments)
        if function not in _FUNCTIONS:
            raise FormulaSyntaxError(f"the function {function} is not one native formulas use")
        fewest, most, implementation = _FUNCTIONS[function]
        if not fewest <= len(arguments) <= most:
            raise FormulaSyntaxError(f"{function} takes {fewest} to {most} arguments, not {len(arguments)}")
        return lambda env: implementation(*(argument(env) for argument in arguments))


def _binary(combine: Callable[[str, Grid, Grid], Grid], operator: str, left: Compiled, right: Compiled) -> Compiled:
    return lambda env: combine(operator, left(env), right(env))


def _if(condition: Compiled, when_true: Compiled, when_false: Compiled | None = None) -> Compiled:
    def otherwise(env: Environment) -> Grid:
        return np.full((1, 1), False) if when_false is None else when_false(env)

    def apply(env: Environment) -> Grid:
        test = condition(env)
        if test.shape == (1, 1):
            truth = _truth(_top_left(test))
            if isinstance(truth, ErrorValue):
                return _scalar(truth)
            return when_true(env) if truth else otherwise(env)
        yes, no = when_true(env), otherwise(env)
        test, yes = _fit(test, yes)
        test, no = _fit(test, no)
        yes, no = _fit(yes, no)
        test = _stretch(test, yes.shape)
        out = np.empty(yes.shape, dtype=object)
        for index in np.ndindex(yes.shape):
            truth = _truth(_plain(test[index]))
            out[index] = truth if isinstance(truth, ErrorValue) else _plain(yes[index] if truth else no[index])
        return _tighten(out)

    return apply


@dataclass(frozen=True)
class Formula:
    """A parsed formula: run it with `run`; the defined names and cell references it reads."""

    text: str
    names: frozenset[str]  # case-folded
    references: frozenset[str]  # as `reference_key` spells them
    compiled: Compiled

    def run(
        self,
        names: Mapping[str, Grid],
        cells: Mapping[str, Cell],
        constant_parts: dict[str, Grid] | None = None,
        cell_parts: dict[str, Grid] | None = None,
    ) -> Grid:
        """The formula's whole result; ``names`` case-folded, ``cells`` keyed by `reference_key`.

        Parts computed are remembered by their text: pass one dict as
        ``constant_parts`` to every run over the same ``names`` (the parts that
        read no cell are then computed once), and one as ``cell_parts`` to the
        runs of several formulas over the same ``cells``.
        """
        return self.compiled((names, cells, {} if cell_parts is None else cell_parts, {} if constant_parts is None else constant_parts))


@lru_cache(maxsize=64)
def parse(text: str) -> Formula:
    """Parse a formula once (with or without its leading '='); a `FormulaSyntaxError` if it cannot be read."""
    parser = _Parser(text)
    try:
        compiled = parser.formula()
    except RecursionError:
        raise FormulaSyntaxError("the formula nests parentheses or functions too deeply to be read") from None
    return Formula(text, frozenset(parser.names), frozenset(parser.references), compiled)


def name_grids(names: Mapping[str, Any]) -> dict[str, Grid]:
    """Defined names (any case) to rectangles of cells, as `Formula.run` reads them."""
    return {name.casefold(): grid_of(rows) for name, rows in names.items()}


def _shown_cell(value: Any) -> Cell:
    value = _plain(value)
    return 0.0 if value is None else value  # a formula showing a blank cell shows 0


def evaluate_array(formula: str, names: Mapping[str, Any], cells: Mapping[str, Any]) -> tuple[tuple[Cell, ...], ...]:
    """Every cell of a formula's result, as rows (what a multi-cell array formula would show)."""
    grid = parse(formula).run(name_grids(names), {reference_key(k): cell_value(v) for k, v in cells.items()})
    return tuple(tuple(_shown_cell(v) for v in row) for row in grid)


def evaluate(formula: str, names: Mapping[str, Any], cells: Mapping[str, Any]) -> Cell:
    """What a cell holding ``formula`` as a one-cell array formula shows.

    ``names``: defined name to its rows of cell values; ``cells``: cell reference
    (any spelling, e.g. ``Data!$A2``) to its value. Unknown names give #NAME?,
    unknown cells are blank.

    >>> evaluate("=INDEX(w,1,2)*Data!$A2+1", {"w": [[1.0, 2.0]]}, {"Data!A2": 3.0})
    7.0
    >>> evaluate("=IF(SUM(--(Data!A2=k))=1,1,NA())", {"k": [["a", "b"]]}, {"Data!A2": "c"})
    ErrorValue(code='#N/A')
    """
    return evaluate_array(formula, names, cells)[0][0]


# --- native formulas against the model ------------------------------------------------------

CHECK_SHEET = "sheetnet check"  # the sheet the checked formulas' input cells are imagined on
RELATIVE_TOLERANCE = 1e-9


def _column_letters(index: int) -> str:
    letters = ""
    index += 1
    while index:
        index, rest = divmod(index - 1, 26)
        letters = chr(65 + rest) + letters
    return letters


def _input_frame(model: Model, rows: Any) -> pd.DataFrame:
    frame = rows if isinstance(rows, pd.DataFrame) else pd.DataFrame(list(rows))
    missing = [name for name in model.input_names if name not in frame.columns]
    if missing:
        raise InputError(
            f"the rows have no column named {', '.join(repr(m) for m in missing)}; the model needs {', '.join(model.input_names)}"
        )
    return frame[list(model.input_names)].reset_index(drop=True)


def _shown(value: Cell) -> str:
    if isinstance(value, ErrorValue):
        return value.code
    if value is None:
        return "a blank"
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, float):
        return f"{value:.15g}"
    return f"'{value}'"


def _label_cell(label: Any) -> Cell:
    """A class label as the classes constant holds it (see `formulas.formula_constants`)."""
    if isinstance(label, (bool, np.bool_)):
        return "TRUE" if label else "FALSE"
    if isinstance(label, (int, float, np.integer, np.floating)):
        return float(label)
    return str(label)


@dataclass(frozen=True)
class _Expected:
    cells: tuple[Cell, ...] = ()  # what each formula should show
    refused: str = ""  # the engine's reason when it refuses the row
    borderline: bool = False  # the class is decided by less than the tolerance


def _expected(model: Model, frame: pd.DataFrame, output: str) -> list[_Expected]:
    try:
        return _expected_rows(model, frame, output)
    except SheetnetError:  # some row is refused: find which, one row at a time
        out: list[_Expected] = []
        for i in range(len(frame)):
            try:
                out.extend(_expected_rows(model, frame.iloc[i:i + 1], output))
            except SheetnetError as error:
                out.append(_Expected(refused=str(error).replace("row 1: ", "").replace("row 1 ", "")))
        return out


def _expected_rows(model: Model, frame: pd.DataFrame, output: str) -> list[_Expected]:
    if model.task == "regression":
        return [_Expected((float(v),)) for v in model.predict(frame)]
    probabilities = model.predict_proba(frame)
    if output == "probabilities":
        return [_Expected(tuple(float(p) for p in row)) for row in probabilities]
    labels = model.classes_of(probabilities)
    if model.task == "binary":
        margins = np.abs(probabilities[:, 1] - model.threshold)
    else:
        top_two = np.sort(probabilities, axis=1)[:, -2:]
        margins = top_two[:, 1] - top_two[:, 0]
    return [_Expected((_label_cell(label),), borderline=bool(m <= RELATIVE_TOLERANCE)) for label, m in zip(labels, margins)]


def _same(got: Cell, wanted: Cell, floor: float) -> bool:
    if isinstance(wanted, float):
        return type(got) is float and abs(got - wanted) <= RELATIVE_TOLERANCE * max(abs(wanted), floor)
    return got == wanted


def check_native_formulas(
    model: Model,
    model_name: str,
    constants: Mapping[str, Any],
    rows: Any,
    output: str = "value",
    *,
    row_numbers: Sequence[int] | None = None,
    row_word: str = "row",
    limit: int = 10,
    max_rows: int | None = None,
) -> list[str]:
    """Problems found when the native formulas, run over ``constants``, are compared with ``model``.

    ``constants``: each defined name the formulas read (any case) to its rows of
    cell values as the workbook stores them. ``rows``: a DataFrame (or a list of
    mappings) with a column per model input, cells as the sheet holds them.
    ``output``: ``value``, ``class`` or ``probabilities`` (every class's column).
    ``row_numbers`` names the rows in messages (default 1, 2, ...), after
    ``row_word``. Numbers must agree to a relative 1e-9; a row the engine
    refuses must give an error value. An empty list means they agree. At most
    ``limit`` rows are described, then how many more differ. ``max_rows``:
    check only that many rows, spread evenly from the first to the last (each
    row costs about a millisecond per output cell).

    >>> check_native_formulas(model, "grades", stored, frame, "class")   # doctest: +SKIP
    ["row 5: the native formula gives 'B' but the model predicts 'A'"]
    """
    from .formulas import FormulaError, formula_constants, native_formula

    frame = _input_frame(model, rows)
    numbers = list(row_numbers) if row_numbers is not None else list(range(1, len(frame) + 1))
    if max_rows is not None and len(frame) > max_rows:
        chosen = np.unique(np.linspace(0, len(frame) - 1, max(max_rows, 1)).round().astype(np.int64))
        frame = frame.iloc[chosen].reset_index(drop=True)
        numbers = [numbers[i] for i in chosen]
    cells = {name: f"'{CHECK_SHEET}'!${_column_letters(j)}$2" for j, name in enumerate(model.input_names)}
    width = len(model.classes) if output == "probabilities" and model.task != "regression" else 1
    try:
        formulas = [parse(native_formula(model, model_name, cells, output, j)) for j in range(width)]
        names = name_grids(constants)
    except (FormulaError, FormulaSyntaxError) as error:
        return [str(error)]
    missing = sorted(set().union(*(f.names for f in formulas)) - set(names))
    if missing:
        return [
            f"the workbook has no defined name {', '.join(missing)}, which the native formulas of '{model_name}' read; "
            "store the model again so its formula constants are written"
        ]
    misshapen = [
        f"the defined name {c.name} covers {' x '.join(map(str, names[c.name.casefold()].shape))} cells but the native formulas "
        f"of '{model_name}' need {' x '.join(map(str, c.shape))}; store the model again so its formula constants are written"
        for c in formula_constants(model, model_name)
        if c.name.casefold() in names and names[c.name.casefold()].shape != c.shape
    ]
    if misshapen:
        return misshapen
    keys = [reference_key(cells[name]) for name in model.input_names]
    floor = 1e-6 if output == "probabilities" else 1e-6 * (model.target.scale if model.task == "regression" else 1.0)
    problems: list[str] = []
    differing = 0
    constant_parts: dict[str, Grid] = {}
    for i, expected in enumerate(_expected(model, frame, output)):
        values = {key: cell_value(frame.iat[i, j]) for j, key in enumerate(keys)}
        shared: dict[str, Grid] = {}
        got = tuple(_shown_cell(f.run(names, values, constant_parts, shared)[0, 0]) for f in formulas)
        problem = _difference(got, expected, floor, output, model)
        if problem:
            differing += 1
            if len(problems) < limit:
                problems.append(f"{row_word} {numbers[i]}: {problem}")
    if differing > len(problems):
        problems.append(f"... and {differing - len(problems)} more {row_word}s differ")
    return problems


def _difference(got: tuple[Cell, ...], expected: _Expected, floor: float, output: str, model: Model) -> str:
    shown = ", ".join(_shown(v) for v in got)
    formula = "the native formulas give" if len(got) > 1 else "the native formula gives"
    if expected.refused:
        if all(isinstance(v, ErrorValue) for v in got):
            return ""
        return f"{formula} {shown} but the model refuses the row ({expected.refused})"
    if all(_same(g, w, floor) for g, w in zip(got, expected.cells)) or expected.borderline:
        return ""
    wanted = ", ".join(_shown(v) for v in expected.cells)
    kind = "probabilities" if len(got) > 1 else "probability" if output == "probabilities" else "predicts"
    verb = f"gives the {kind}" if kind != "predicts" else "predicts"
    return f"{formula} {shown} but the model {verb} {wanted}"


def sample_rows(model: Model, count: int = 24, seed: int = 0) -> pd.DataFrame:
    """Rows built from the model's own inputs, for checking formulas without the user's data.

    Numeric inputs: the lowest and highest training value in the first two
    rows, then values drawn evenly between them. Category inputs: every
    category in turn, as a cell would hold it (a number where the engine reads
    the category from a number, TRUE/FALSE as logicals), and on every second
    round as text. At least ``count`` rows, more when a category input needs
    them to show each category in both forms.

    >>> sample_rows(model).shape          # doctest: +SKIP
    (24, 5)
    """
    from .formulas import category_number
    from .preparation import CategoryInput

    rng = np.random.default_rng(seed)
    widest = max((len(s.categories) for s in model.preparation.inputs if isinstance(s, CategoryInput)), default=0)
    rows = max(count, 2 * widest, 2)
    columns: dict[str, list[Any]] = {}
    for spec in model.preparation.inputs:
        if isinstance(spec, CategoryInput):
            cells: list[Any] = []
            for i in range(rows):
                key = spec.categories[i % len(spec.categories)]
                as_text = (i // len(spec.categories)) % 2 == 1
                number = category_number(key)
                if as_text or (number is None and key not in ("TRUE", "FALSE")):
                    cells.append(key)
                else:
                    cells.append(number if number is not None else key == "TRUE")
            columns[spec.name] = cells
        else:
            drawn = rng.uniform(spec.low, spec.high, rows)
            drawn[:2] = spec.low, spec.high
            columns[spec.name] = drawn.tolist()
    return pd.DataFrame({name: pd.Series(values, dtype=object) for name, values in columns.items()})
