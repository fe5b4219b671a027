"""Preparation of inputs and targets, learned on training rows only.

Numeric inputs are standardised (mean 0, population standard deviation 1);
text inputs become one-hot columns, one per category seen in training.
Regression targets are standardised too and the scaling is undone on
prediction; class labels may be of any type and are kept as given.

Tables arrive as a NumPy array, a pandas DataFrame (columns matched by name
at prediction) or a list of rows. Rows in messages count data rows from 1.
"""

from __future__ import annotations

import datetime
import math
import numbers
import warnings
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from .cell_text import ERROR_VALUES, cell_in_words, label_in_words, labels_in_words, number_in_words
from .errors import (
    BadValueError,
    CellTypeError,
    ConstantColumnError,
    InputError,
    LengthMismatchError,
    SheetnetWarning,
    UnknownCategoryError,
    UnknownColumnError,
)
from .limits import MAX_NUMBER, check_class_count

SPREADSHEET_ERRORS = ERROR_VALUES  # spreadsheet error values as they reach Python in text form
MAX_CLASSES_FOR_NUMBERS = 10  # integer targets with at most this many values are classes


# --- reading tables -----------------------------------------------------------------------

@dataclass(frozen=True)
class RawTable:
    names: tuple[str, ...]
    columns: tuple[np.ndarray, ...]  # one 1-D array per column, numeric dtype or object
    named: bool  # True when the names came with the data (a DataFrame)
    rows: int | None = None  # the row count, kept apart from the columns so a table of no columns still has its rows
    marked_categories: tuple[str, ...] = ()  # columns the data itself marks as categories (a pandas or polars category dtype)

    @property
    def n_rows(self) -> int:
        if self.rows is not None:
            return self.rows
        return len(self.columns[0]) if self.columns else 0


MAX_SPARSE_NOTE = "turn it into a full table first (for example with X.toarray()) when it fits in memory"


def read_table(X: Any) -> RawTable:
    """Split a table into named columns without interpreting the cells yet.

    Takes a NumPy array, a pandas or polars DataFrame (names kept), a pandas or
    polars Series (one column), a list of rows, a plain list (one column), or
    any object that converts itself with ``__array__``. A SciPy sparse matrix,
    complex numbers and ``None`` are refused with a message saying what to pass.
    """
    if isinstance(X, RawTable):
        return X
    if X is None:
        raise InputError("no inputs were given (the table is None); pass a table of rows and columns")
    if _is_sparse(X):
        shape = " by ".join(str(n) for n in X.shape)
        raise InputError(
            f"the inputs are a sparse matrix ({shape}); sheetnet works on full tables of cells, not sparse data: {MAX_SPARSE_NOTE}"
        )
    try:
        import pandas as pd
    except ImportError:  # pragma: no cover - pandas is a dependency
        pd = None
    if pd is not None and isinstance(X, pd.DataFrame):
        names = tuple(str(c) for c in X.columns)
        _check_unique(names)
        columns = tuple(_column_array(X.iloc[:, j].to_numpy(), names[j]) for j in range(X.shape[1]))
        marked = tuple(n for j, n in enumerate(names) if isinstance(X.iloc[:, j].dtype, pd.CategoricalDtype))
        return RawTable(names, columns, True, int(X.shape[0]), marked)
    if pd is not None and isinstance(X, pd.Series):
        name = str(X.name if X.name is not None else "x1")
        marked = (name,) if isinstance(X.dtype, pd.CategoricalDtype) else ()
        return RawTable((name,), (_column_array(X.to_numpy(), name),), X.name is not None, len(X), marked)
    if _is_polars(X, "DataFrame"):
        names = tuple(str(c) for c in X.columns)
        _check_unique(names)
        columns = tuple(_column_array(X.get_column(n).to_numpy(), n) for n in X.columns)
        marked = tuple(str(n) for n in X.columns if _polars_category(X.get_column(n).dtype))
        return RawTable(names, columns, True, int(X.height), marked)
    if _is_polars(X, "Series"):
        name = str(X.name or "x1")
        marked = (name,) if _polars_category(X.dtype) else ()
        return RawTable((name,), (_column_array(X.to_numpy(), name),), bool(X.name), len(X), marked)
    if isinstance(X, np.ndarray):
        array = X
    elif not isinstance(X, (list, tuple, str)) and hasattr(X, "__array__"):
        array = np.asarray(X)  # an array-like that converts itself (a memory map, an array of another library)
    elif isinstance(X, str) or not hasattr(X, "__iter__"):
        raise InputError(f"the inputs are {cell_in_words(X)}, not a table; pass a table of rows and columns (a list of rows, an array or a DataFrame)")
    else:
        rows = list(X)
        if rows and not isinstance(rows[0], (list, tuple, np.ndarray)):
            rows = [[value] for value in rows]  # a plain list is one column
        widths = {len(r) if isinstance(r, (list, tuple, np.ndarray)) else -1 for r in rows}
        if len(widths) > 1:
            first = len(rows[0])
            bad = next(i for i, r in enumerate(rows) if not isinstance(r, (list, tuple, np.ndarray)) or len(r) != first)
            cells = len(rows[bad]) if isinstance(rows[bad], (list, tuple, np.ndarray)) else 1
            raise InputError(f"row {bad + 1} has {cells} cells but row 1 has {first}; give every row the same number of cells")
        array = np.empty((len(rows), widths.pop() if widths else 0), dtype=object)
        for i, r in enumerate(rows):
            array[i, :] = list(r)
    if array.ndim == 1:
        array = array.reshape(-1, 1)
    if array.ndim != 2:
        raise InputError(f"the inputs have {array.ndim} dimensions; pass a table of rows and columns")
    names = tuple(f"x{j + 1}" for j in range(array.shape[1]))
    columns = tuple(_column_array(array[:, j], names[j]) for j in range(array.shape[1]))
    return RawTable(names, columns, False, int(array.shape[0]))


def _check_unique(names: tuple[str, ...]) -> None:
    if len(set(names)) != len(names):
        duplicate = next(n for n in names if names.count(n) > 1)
        raise InputError(f"the table has two columns named '{duplicate}'; give each column its own name")


def _is_sparse(X: Any) -> bool:
    try:
        from scipy import sparse
    except ImportError:  # pragma: no cover - SciPy is a dependency
        return False
    return bool(sparse.issparse(X))


def _is_polars(X: Any, kind: str) -> bool:
    """A polars DataFrame or Series, recognised without importing polars (an optional package)."""
    return type(X).__module__.split(".")[0] == "polars" and type(X).__name__ == kind


def _polars_category(dtype: Any) -> bool:
    return str(dtype).split("(")[0] in ("Categorical", "Enum")


DAY = np.timedelta64(1, "D")


def _column_array(values: np.ndarray, name: str = "") -> np.ndarray:
    if values.dtype.kind in "fiub":
        return values
    if values.dtype.kind == "c":
        raise InputError(
            f"column '{name}' holds complex numbers (Complex data not supported); sheetnet learns from real numbers and texts: "
            "pass the real part, the size or the angle as columns of their own"
        )
    if values.dtype.kind == "m":  # durations are numbers of days, as a spreadsheet keeps them
        return values / DAY
    if values.dtype.kind == "M":  # as date objects (nanosecond dates would turn into bare whole numbers)
        return values.astype("datetime64[us]").astype(object)
    if values.dtype.kind in "US":
        return values.astype(object)
    return np.asarray(values, dtype=object)


def _cell_kind(value: Any) -> str:
    """'number', 'text', 'blank', 'error', 'date' or 'object' (not one value) for one cell."""
    if value is None or type(value).__name__ in ("NAType", "NaTType"):  # pandas' missing values
        return "blank"
    if isinstance(value, (bool, np.bool_)):
        return "number"
    if isinstance(value, numbers.Real):
        return "blank" if math.isnan(float(value)) else "number"
    if isinstance(value, str):
        text = value.strip()
        if not text:
            return "blank"
        return "error" if text.upper() in SPREADSHEET_ERRORS else "text"
    if isinstance(value, (datetime.date, datetime.time)):
        return "date"
    if isinstance(value, datetime.timedelta):
        return "number"  # a duration counts in days, as a spreadsheet keeps it
    if isinstance(value, (dict, list, tuple, set, np.ndarray)) or isinstance(value, complex):
        return "object"
    return "text"


def _cell_number(value: Any) -> float:
    if isinstance(value, datetime.timedelta):
        return value / datetime.timedelta(days=1)
    return float(value)


def _bad_cell(column: str, row: int, value: Any, kind: str, numeric: bool) -> BadValueError:
    if kind == "blank":
        return BadValueError(column, row, value, "the cell is blank or not a number", "fill it in or remove the row")
    if kind == "object":
        if isinstance(value, complex):
            return BadValueError(
                column, row, value, "the cell holds a complex number (Complex data not supported)", "put a real number in the cell"
            )
        return CellTypeError(
            column, row, value, f"the cell holds a {type(value).__name__}, not one value (each argument must be a string or a number)",
            "put one number or one text in the cell",
        )
    if kind == "error":
        return BadValueError(column, row, value, "the cell holds a spreadsheet error value", "fix the formula that produced it or remove the row")
    if kind == "date" and numeric:
        return BadValueError(
            column, row, value, "a date or time in a numeric column",
            "turn it into a number first (for example days since a start date, or the month), or leave the column out",
        )
    if kind == "infinite":
        return BadValueError(column, row, value, "the value is infinite", "replace it with a finite number or remove the row")
    if kind == "huge":
        return BadValueError(
            column, row, value, "the number is too large to work with",
            f"sheetnet takes numbers up to {number_in_words(MAX_NUMBER)} in size: check the cell, or if the column really holds "
            "such sizes, rescale it (for example divide it by a power of ten or take its logarithm)",
        )
    if numeric:
        return BadValueError(column, row, value, "text in a numeric column", "type a number, or clear the text and remove the row")
    return BadValueError(column, row, value, "a number in a text column", "type the category as text")


def numbers_of(column: str, values: np.ndarray) -> np.ndarray:
    """The column as float64, or a `BadValueError` naming the first bad cell."""
    if values.dtype.kind in "fiub":
        numbers_ = values.astype(np.float64, copy=False)
        finite = np.isfinite(numbers_)
        if not finite.all():
            row = int(np.argmin(finite))
            kind = "blank" if np.isnan(numbers_[row]) else "infinite"
            raise _bad_cell(column, row + 1, numbers_[row], kind, True)
        huge = np.abs(numbers_) > MAX_NUMBER
        if huge.any():
            row = int(np.argmax(huge))
            raise _bad_cell(column, row + 1, numbers_[row], "huge", True)
        return numbers_
    result = np.empty(len(values), dtype=np.float64)
    for i, value in enumerate(values):
        kind = _cell_kind(value)
        if kind != "number":
            raise _bad_cell(column, i + 1, value, kind, True)
        result[i] = _cell_number(value)
        if not math.isfinite(result[i]):
            raise _bad_cell(column, i + 1, value, "infinite", True)
        if abs(result[i]) > MAX_NUMBER:
            raise _bad_cell(column, i + 1, value, "huge", True)
    return result


def category_text(value: Any) -> str:
    """How a cell reads as a category: whole numbers lose their '.0'."""
    if isinstance(value, (bool, np.bool_)):
        return "TRUE" if value else "FALSE"
    if isinstance(value, numbers.Real) and float(value).is_integer():
        return str(int(float(value)))
    return str(value).strip()


def texts_of(column: str, values: np.ndarray) -> np.ndarray:
    """The column as category texts, or a `BadValueError` for blanks and error values."""
    result = np.empty(len(values), dtype=object)
    for i, value in enumerate(values):
        kind = _cell_kind(value)
        if kind in ("blank", "error", "object"):
            raise _bad_cell(column, i + 1, value, kind, False)
        result[i] = category_text(value)
    return result.astype(str)


def looks_like_categories(values: np.ndarray) -> bool:
    """True when most filled cells hold text: the column is read as categories."""
    if values.dtype.kind in "fiub":
        return False
    kinds = [_cell_kind(v) for v in values]
    text = kinds.count("text")
    return text > 0 and text >= kinds.count("number")


# --- inputs -------------------------------------------------------------------------------

@dataclass(frozen=True)
class NumericInput:
    name: str
    mean: float
    scale: float  # population standard deviation on training rows
    low: float  # smallest and largest training value, for the out-of-range flag
    high: float

    @property
    def width(self) -> int:
        return 1


@dataclass(frozen=True)
class CategoryInput:
    name: str
    categories: tuple[str, ...]  # sorted; one one-hot column each

    @property
    def width(self) -> int:
        return len(self.categories)


InputSpec = NumericInput | CategoryInput


@dataclass(frozen=True)
class Preparation:
    """How raw input columns become the network's input matrix."""

    inputs: tuple[InputSpec, ...]
    named: bool  # match columns by name at prediction

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(spec.name for spec in self.inputs)

    @property
    def width(self) -> int:
        return sum(spec.width for spec in self.inputs)

    @property
    def all_numeric(self) -> bool:
        return all(isinstance(spec, NumericInput) for spec in self.inputs)

    def encoded_names(self) -> tuple[str, ...]:
        """One name per network input: the column, or 'column=category' for one-hot columns."""
        out: list[str] = []
        for spec in self.inputs:
            if isinstance(spec, NumericInput):
                out.append(spec.name)
            else:
                out.extend(f"{spec.name}={c}" for c in spec.categories)
        return tuple(out)

    def columns_in_order(self, X: Any) -> list[np.ndarray]:
        """The raw columns of ``X`` in training order (matched by name when the model has names)."""
        table = read_table(X)
        if self.named and table.named:
            where = {name: j for j, name in enumerate(table.names)}
            missing = [name for name in self.names if name not in where]
            if missing:
                quoted = ", ".join(f"'{m}'" for m in missing)
                raise UnknownColumnError(
                    f"the table has no column named {quoted}; "
                    f"the model needs the columns {', '.join(self.names)}"
                )
            return [table.columns[where[name]] for name in self.names]
        if len(table.names) != len(self.inputs):
            raise LengthMismatchError(
                f"the table has {len(table.names)} columns but the model was trained on {len(self.inputs)} "
                f"({', '.join(self.names)}); pass the same columns in the same order"
            )
        return list(table.columns)

    def transform(self, X: Any) -> np.ndarray:
        """The network input matrix for ``X``: shape (rows, `width`), float64.

        >>> prep = fit_preparation(read_table([[1.0], [3.0]]))
        >>> prep.transform([[2.0], [3.0]]).ravel().tolist()
        [0.0, 1.0]
        """
        return self.transform_columns(self.columns_in_order(X))

    def numeric_constants(self) -> tuple[np.ndarray, np.ndarray]:
        """Means and scales of the inputs (all numeric), as arrays."""
        return (
            np.array([s.mean for s in self.inputs]),  # type: ignore[union-attr]
            np.array([s.scale for s in self.inputs]),  # type: ignore[union-attr]
        )

    def numeric_rows(self, X: Any) -> np.ndarray | None:
        """``X`` itself when it is a numeric array of the right width (the fast path), else None."""
        if not (isinstance(X, np.ndarray) and X.ndim == 2 and X.dtype.kind in "fiu"):
            return None
        if X.shape[1] != len(self.inputs):
            raise LengthMismatchError(
                f"the table has {X.shape[1]} columns but the model was trained on {len(self.inputs)} "
                f"({', '.join(self.names)}); pass the same columns in the same order"
            )
        return X if X.dtype == np.float64 else X.astype(np.float64)

    def transform_columns(self, columns: Sequence[np.ndarray]) -> np.ndarray:
        n = len(columns[0]) if columns else 0
        out = np.zeros((n, self.width))
        at = 0
        for spec, values in zip(self.inputs, columns):
            if isinstance(spec, NumericInput):
                out[:, at] = (numbers_of(spec.name, values) - spec.mean) / spec.scale
            else:
                texts = texts_of(spec.name, values)
                known = np.array(spec.categories)
                index = np.searchsorted(known, texts)
                index = np.minimum(index, len(known) - 1)
                unknown = known[index] != texts
                if unknown.any():
                    row = int(np.argmax(unknown))
                    raise UnknownCategoryError(spec.name, row + 1, str(texts[row]), spec.categories)
                out[np.arange(n), at + index] = 1.0
            at += spec.width
        return out

    def out_of_range(self, X: Any) -> np.ndarray:
        """Per row, True when a numeric input lies outside the training rows' range."""
        columns = self.columns_in_order(X)
        n = len(columns[0]) if columns else 0
        flag = np.zeros(n, dtype=bool)
        for spec, values in zip(self.inputs, columns):
            if isinstance(spec, NumericInput):
                v = numbers_of(spec.name, values)
                flag |= (v < spec.low) | (v > spec.high)
        return flag


def fit_preparation(table: RawTable, categories: Sequence[str] = ()) -> Preparation:
    """Learn scaling constants and categories from the training rows of ``table``."""
    unknown = [c for c in categories if c not in table.names]
    if unknown:
        raise UnknownColumnError(f"'{unknown[0]}' is listed as a category column but the table has no such column ({', '.join(table.names)})")
    specs: list[InputSpec] = []
    for name, values in zip(table.names, table.columns):
        if name in categories or name in table.marked_categories or looks_like_categories(values):
            texts = texts_of(name, values)
            found = tuple(sorted(set(texts.tolist())))
            if len(found) < 2:
                _warn_constant(name, label_in_words(found[0]))
            specs.append(CategoryInput(name, found))
        else:
            v = numbers_of(name, values)
            scale = float(v.std())
            if not scale > 0:
                _warn_constant(name, number_in_words(float(v[0])))
                scale = 1.0  # the centred column is all zeros: it is carried but adds nothing
            specs.append(NumericInput(name, float(v.mean()), scale, float(v.min()), float(v.max())))
    return Preparation(tuple(specs), table.named)


def planned_width(table: RawTable, categories: Sequence[str] = ()) -> int:
    """How many network inputs `fit_preparation` will make of ``table`` (one per category of a text column), without raising.

    Cheap enough to check sizes before anything large is allocated.
    """
    width = 0
    for name, values in zip(table.names, table.columns):
        if name in categories or name in table.marked_categories or looks_like_categories(values):
            width += len({category_text(v) for v in values if _cell_kind(v) not in ("blank", "error")})
        else:
            width += 1
    return width


def _warn_constant(name: str, value: str) -> None:
    warnings.warn(
        SheetnetWarning(
            f"column '{name}' holds the same value ({value}) in every training row, so it cannot inform the model; "
            "it is kept (rows with another value are flagged out of range), but remove it if it should vary"
        ),
        stacklevel=4,
    )


# --- targets ------------------------------------------------------------------------------

def read_target(y: Any) -> np.ndarray:
    """The target as a 1-D array (numeric dtype or object)."""
    if y is None:
        raise InputError(
            "the target is missing: training requires y to be passed, but the target y is None; pass one value or label per input row"
        )
    if _is_sparse(y):
        raise InputError(f"the target is a sparse matrix; pass one column of values as a full array: {MAX_SPARSE_NOTE}")
    if _is_polars(y, "Series"):
        y = y.to_numpy()
    elif _is_polars(y, "DataFrame"):
        if y.width != 1:
            raise InputError(f"the target has {y.width} columns; pass one column")
        y = y.to_series().to_numpy()
    try:
        import pandas as pd

        if isinstance(y, (pd.Series, pd.Index)):
            y = y.to_numpy()
        elif isinstance(y, pd.DataFrame):
            if y.shape[1] != 1:
                raise InputError(f"the target has {y.shape[1]} columns; pass one column")
            y = y.iloc[:, 0].to_numpy()
    except ImportError:  # pragma: no cover
        pass
    if isinstance(y, np.ndarray):
        array = y
    elif not isinstance(y, (list, tuple, str)) and hasattr(y, "__array__"):
        array = np.asarray(y)
    elif isinstance(y, str) or not hasattr(y, "__iter__"):
        raise InputError(f"the target is {cell_in_words(y)}, not a column; pass one value or label per input row")
    else:
        array = np.asarray(list(y), dtype=object)
    if array.ndim == 2 and array.shape[1] == 1:
        array = array[:, 0]
    if array.ndim != 1:
        raise InputError(f"the target has {array.ndim} dimensions ({' by '.join(map(str, array.shape))}); pass one column of values")
    return _column_array(array, "target")


def _sorted_labels(values: Sequence[Any]) -> tuple[Any, ...]:
    unique = list(dict.fromkeys(values))
    try:
        return tuple(sorted(unique))
    except TypeError:
        return tuple(sorted(unique, key=lambda v: (type(v).__name__, str(v))))


def _plain(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


@dataclass(frozen=True)
class TargetPreparation:
    """How the target column becomes the network's output matrix and back."""

    task: str  # regression, binary or multiclass
    mean: float = 0.0
    scale: float = 1.0
    classes: tuple[Any, ...] = ()

    @property
    def outputs(self) -> int:
        return self.classes.__len__() if self.task == "multiclass" else 1

    @property
    def head(self) -> str:
        return {"regression": "squared_error", "binary": "binary_cross_entropy", "multiclass": "cross_entropy"}[self.task]

    def class_indices(self, y: np.ndarray) -> np.ndarray:
        """Index of each label in `classes`; an unknown label is an `InputError`."""
        y = np.asarray(y)
        if y.dtype.kind in "fiub" and _all_plain_numbers(self.classes):
            known = np.asarray(self.classes, dtype=y.dtype if y.dtype.kind != "b" else bool)
            index = np.minimum(np.searchsorted(known, y), len(known) - 1)
            unknown = known[index] != y
            if unknown.any():
                row = int(np.argmax(unknown))
                raise UnknownCategoryError("target", row + 1, _plain(y[row]), self.classes)
            return index.astype(np.int64)
        where = {label: i for i, label in enumerate(self.classes)}
        out = np.empty(len(y), dtype=np.int64)
        for i, label in enumerate(y):
            label = _plain(label)
            if isinstance(label, str):
                label = label.strip()
            if label not in where:
                raise UnknownCategoryError("target", i + 1, label, self.classes)
            out[i] = where[label]
        return out

    def encode(self, y: np.ndarray) -> np.ndarray:
        """Targets as the network's outputs: scaled values, 0/1, or one-hot rows."""
        if self.task == "regression":
            return ((numbers_of("target", y) - self.mean) / self.scale).reshape(-1, 1)
        index = self.class_indices(y)
        if self.task == "binary":
            return index.astype(np.float64).reshape(-1, 1)
        return np.eye(len(self.classes))[index]


def _all_plain_numbers(values: Sequence[Any]) -> bool:
    return all(isinstance(v, (int, float, bool)) for v in values)


def _target_labels(y: np.ndarray) -> list[Any]:
    if y.dtype.kind in "fiub":  # numbers were checked finite by the caller
        return np.unique(y).tolist()
    labels = []
    for i, value in enumerate(y):
        kind = _cell_kind(value)
        if kind in ("blank", "error"):
            raise _bad_cell("target", i + 1, value, kind, False)
        labels.append(value.strip() if isinstance(value, str) else _plain(value))
    return labels


def _looks_like_classes(values: np.ndarray) -> bool:
    distinct = np.unique(values)
    whole = bool(np.all(distinct == np.round(distinct)))
    return len(distinct) == 2 or (whole and len(distinct) <= MAX_CLASSES_FOR_NUMBERS and len(values) >= 5 * len(distinct))


STRAY_TEXT_FIX = (
    "type a number or clear the cell and remove the row; if the column holds classes rather than amounts, add the setting task=multiclass"
)


def _stray_text_in_numbers(y: np.ndarray) -> BadValueError | None:
    """The first text cell of a target that is mostly numbers: a typing slip, not a class of its own."""
    kinds = [_cell_kind(v) for v in y]
    texts = kinds.count("text") + kinds.count("date")
    if texts == 0 or kinds.count("number") <= texts:
        return None
    row = next(i for i, kind in enumerate(kinds) if kind in ("text", "date"))
    problem = "text in a numeric column" if kinds[row] == "text" else "a date or time in a numeric column"
    return BadValueError("target", row + 1, y[row], problem, STRAY_TEXT_FIX)


def fit_target(y: np.ndarray, task: str = "auto") -> TargetPreparation:
    """Decide the task (unless given) and learn the target's scaling or classes.

    Auto: text, or exactly two distinct values, are classes (binary with two);
    whole numbers with at most 10 distinct values, each class averaging 5 rows
    or more, are classes; anything else numeric is regression. A text cell in
    a target that is mostly numbers is named as a bad cell rather than made a
    class. `task_choice_in_words` explains the choice to the user.
    """
    numeric = y.dtype.kind in "fiub" or all(_cell_kind(v) == "number" for v in y)
    if task == "auto" and not numeric:
        stray = _stray_text_in_numbers(y)
        if stray is not None:
            raise stray
    if task == "regression" or (task == "auto" and numeric and not _looks_like_classes(numbers_of("target", y))):
        values = numbers_of("target", y)
        scale = float(values.std())
        if not scale > 0:
            raise ConstantColumnError(
                f"the target holds the same value ({number_in_words(float(values[0]))}) in every training row; there is nothing to learn"
            )
        return TargetPreparation("regression", float(values.mean()), scale)
    if y.dtype.kind == "f":
        numbers_of("target", y)  # a blank (NaN) or infinite label is named
    labels = _target_labels(y)
    classes = _sorted_labels(labels)
    check_class_count(len(classes), labels_in_words(classes, most=5))
    if len(classes) < 2:
        raise ConstantColumnError(f"the target holds the one class {cell_in_words(classes[0])} in every training row; there is nothing to learn")
    chosen = task if task != "auto" else ("binary" if len(classes) == 2 else "multiclass")
    if chosen == "binary" and len(classes) != 2:
        raise InputError(
            f"task 'binary' needs two classes but the target has {len(classes)} ({labels_in_words(classes, most=5)}); use task 'multiclass'"
        )
    if chosen == "multiclass" and len(classes) == 2:
        chosen = "binary"  # two classes are always one logistic output
    return TargetPreparation(chosen, classes=classes)


def task_choice_in_words(task: str, setting: str, classes: Sequence[Any]) -> str:
    """How the task was chosen and how to choose another, for ABOUT and the command line.

    >>> task_choice_in_words("multiclass", "auto", [1, 2, 3, 4, 5]).split("; ")[-1]
    'to predict them as numbers that keep their order (a rating or a count), add the setting task=regression'
    """
    if setting == task:
        return f"{task}, as the setting task={setting} asked"
    if setting != "auto":  # multiclass asked for a target of two classes
        return f"{task}: the setting task={setting} asked for classes, and the target holds two, which one output tells apart"
    head = f"{task}, chosen automatically"
    if task == "regression":
        return (
            f"{head}: the target holds numbers with more than {MAX_CLASSES_FOR_NUMBERS} different values, or fractions, "
            "or too few rows per value to be classes; to treat its values as classes, add the setting task=multiclass"
        )
    numbers_ = _all_plain_numbers(classes)
    shown = labels_in_words(classes, most=5)
    if task == "binary":
        override = "; to predict the values as numbers, add the setting task=regression" if numbers_ else ""
        return f"{head}: the target holds two different values ({shown}), so the model tells which of the two applies{override}"
    if numbers_:
        return (
            f"{head}: the target holds {len(classes)} different whole numbers ({shown}) with 5 rows or more each on average, "
            "so they were read as classes; to predict them as numbers that keep their order (a rating or a count), add the setting task=regression"
        )
    return f"{head}: the target holds text with {len(classes)} different values ({shown}), so each value is a class"
