"""Every error sheetnet raises on purpose.

Hierarchy::

    SheetnetError                 base of all; the edges (cells, server, CLI) catch this one
    ├── InputError (ValueError)   the data handed in cannot be used as it is
    │   ├── BadValueError         NaN, infinity, blank or text where a number belongs
    │   ├── LengthMismatchError   inputs and target have different row counts
    │   ├── NotEnoughRowsError    too few rows for the requested work
    │   ├── ConstantColumnError   a column (input or target) holds one value only
    │   ├── UnknownCategoryError  a text category never seen in training
    │   ├── UnknownColumnError    a column the model needs is missing
    │   └── SplitError            a holdout or fold split cannot be made
    ├── SettingError (ValueError) a setting name or value is not accepted
    ├── TrainingError             training diverged (the loss became infinite or not a number)
    └── ModelError                a fitted model cannot answer the request

    SheetnetWarning (UserWarning) the work went ahead, but something deserves a look

Each message says what was received and what to do about it. The core
raises; only the outermost layers translate errors into cell text, HTTP
statuses or exit codes.
"""

from __future__ import annotations


class SheetnetError(Exception):
    """Base of every error sheetnet raises on purpose."""


class InputError(SheetnetError, ValueError):
    """The data handed in cannot be used as it is."""


class BadValueError(InputError):
    """A cell holds NaN, infinity, a blank or text where a number belongs."""

    def __init__(self, column: str, row: int, value: object, problem: str, fix: str) -> None:
        self.column = column
        self.row = row  # data rows counted from 1
        self.value = value
        self.problem = problem
        self.fix = fix
        super().__init__(f"column '{column}', row {row}: {problem} ({value!r}); {fix}")

    def moved(self, row: int, column: str | None = None) -> "BadValueError":
        """The same error reported at another row (and column name), as a caller sees it."""
        return BadValueError(column or self.column, row, self.value, self.problem, self.fix)


class LengthMismatchError(InputError):
    """Inputs and target do not have the same number of rows."""


class NotEnoughRowsError(InputError):
    """Fewer rows than the requested work needs."""


class ConstantColumnError(InputError):
    """A column holds the same value in every row it was learned from."""


class UnknownCategoryError(InputError):
    """A text category appears that the model never saw in training."""

    def __init__(self, column: str, row: int, category: object, known: tuple[object, ...]) -> None:
        self.column = column
        self.row = row  # data rows counted from 1
        self.category = category
        self.known = known
        shown = ", ".join(map(str, known))
        super().__init__(
            f"column '{column}', row {row}: category {category!r} was not in the training rows (known: {shown}); "
            "use a known category or retrain with rows that include it"
        )

    def moved(self, row: int, column: str | None = None) -> "UnknownCategoryError":
        return UnknownCategoryError(column or self.column, row, self.category, self.known)


class UnknownColumnError(InputError):
    """A column the model was trained on is missing from the table."""


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
