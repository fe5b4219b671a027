"""Every error sheetnet raises on purpose.

Hierarchy::

    SheetnetError                 base of all; the edges (cells, server, CLI) catch this one
    ├── InputError (ValueError)   the data handed in cannot be used as it is
    │   ├── CellError             one cell is the problem: column, row and value held as data
    │   │   ├── BadValueError     NaN, infinity, blank, text or a too large number in one cell
    │   │   │   └── CellTypeError (TypeError)  a list, dict or array where one value belongs
    │   │   └── UnknownCategoryError  a text category never seen in training
    │   ├── LengthMismatchError   inputs and target have different row counts
    │   ├── NotEnoughRowsError    too few rows for the requested work
    │   ├── ConstantColumnError   a column (input or target) holds one value only
    │   ├── UnknownColumnError    a column the model needs is missing
    │   ├── SizeError             the work would exceed a size limit (sheetnet.limits)
    │   └── SplitError            a holdout or fold split cannot be made
    ├── SettingError (ValueError) a setting name or value is not accepted
    │   └── ClusterError          the Dask cluster cannot be used (sheetnet.parallel: not installed, not reachable)
    ├── TrainingError             training diverged (the loss became infinite or not a number)
    └── ModelError                a fitted model cannot answer the request

    SheetnetWarning (UserWarning) the work went ahead, but something deserves a look

Each message says what was received and what to do about it. The core
raises; only the outermost layers translate errors into cell text, HTTP
statuses or exit codes.
"""

from __future__ import annotations

from .cell_text import cell_in_words, labels_in_words


class SheetnetError(Exception):
    """Base of every error sheetnet raises on purpose."""


class InputError(SheetnetError, ValueError):
    """The data handed in cannot be used as it is."""


class CellError(InputError):
    """A problem with one cell: its column, its row and its value are data; the text is built from them once.

    ``row`` counts data rows from 1, as the engine sees a table. At the cell edge the
    error is moved to ``range_row``, the row as the user sees the range (the header
    is row 1 of the table), and every door shows that same text.
    """

    column: str
    row: int
    range_row: int | None

    def place(self) -> str:
        if self.range_row is not None:
            return f"row {self.range_row} of the table"
        return f"row {self.row}"

    def seen_at(self, range_row: int, column: str | None = None) -> "CellError":
        """The same error at its row in the user's range (and under the column's name there)."""
        raise NotImplementedError


class BadValueError(CellError):
    """A cell holds NaN, infinity, a blank or text where a number belongs."""

    def __init__(self, column: str, row: int, value: object, problem: str, fix: str, range_row: int | None = None) -> None:
        self.column = column
        self.row = row
        self.value = value
        self.problem = problem
        self.fix = fix
        self.range_row = range_row
        super().__init__(f"column '{column}', {self.place()}: {problem} ({cell_in_words(value)}); {fix}")

    def seen_at(self, range_row: int, column: str | None = None) -> "BadValueError":
        return BadValueError(column or self.column, self.row, self.value, self.problem, self.fix, range_row)


class CellTypeError(BadValueError, TypeError):
    """A cell holds something that is not one value (a list, a dict, an array): a TypeError as well, as Python code expects."""

    def seen_at(self, range_row: int, column: str | None = None) -> "CellTypeError":
        return CellTypeError(column or self.column, self.row, self.value, self.problem, self.fix, range_row)


class LengthMismatchError(InputError):
    """Inputs and target do not have the same number of rows."""


class NotEnoughRowsError(InputError):
    """Fewer rows than the requested work needs."""


class ConstantColumnError(InputError):
    """A column holds the same value in every row it was learned from."""


class UnknownCategoryError(CellError):
    """A text category appears that the model never saw in training."""

    def __init__(self, column: str, row: int, category: object, known: tuple[object, ...], range_row: int | None = None) -> None:
        self.column = column
        self.row = row
        self.category = category
        self.known = known
        self.range_row = range_row
        super().__init__(
            f"column '{column}', {self.place()}: category {cell_in_words(category)} was not in the training rows "
            f"(known: {labels_in_words(known)}); use a known category or retrain with rows that include it"
        )

    def seen_at(self, range_row: int, column: str | None = None) -> "UnknownCategoryError":
        return UnknownCategoryError(column or self.column, self.row, self.category, self.known, range_row)


class UnknownColumnError(InputError):
    """A column the model was trained on is missing from the table."""


class SizeError(InputError):
    """The requested network, table or answer is larger than sheetnet's limits (see `sheetnet.limits`)."""


class SplitError(InputError):
    """A holdout split or a set of folds cannot be made from these rows."""


class SettingError(SheetnetError, ValueError):
    """A setting name or value is not accepted."""


class TrainingError(SheetnetError):
    """Training diverged: the loss became infinite or not a number."""


class ModelError(SheetnetError):
    """A fitted model cannot answer this request."""


class SheetnetWarning(UserWarning):
    """The work went ahead, but something in the data deserves a look."""
