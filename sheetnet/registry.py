"""The one list of cell functions. Every bridge (command line, workbook files,
xlwings, the local server, add-in metadata) is generated from `REGISTRY`, so a
new cell function is added here and in `sheetnet.functions` only.
"""

from __future__ import annotations

import inspect
from dataclasses import dataclass
from typing import Callable

from . import functions
from .cells import Cells


@dataclass(frozen=True)
class Argument:
    name: str
    help: str
    optional: bool = False
    kind: str = "range"  # range: a block of cells; value: one cell (number or text)


@dataclass(frozen=True)
class CellFunction:
    name: str  # as typed in a cell
    run: Callable[..., Cells]
    help: str
    arguments: tuple[Argument, ...]
    returns: str  # the shape of the answer

    @property
    def python_name(self) -> str:
        return self.run.__name__

    @property
    def bridge_name(self) -> str:
        """The name where dots are not allowed (xlwings functions): SHEETNET_TRAIN."""
        return self.name.replace(".", "_")


REGISTRY: tuple[CellFunction, ...] = (
    CellFunction(
        "SHEETNET.SPLIT",
        functions.split,
        "Marks each data row of a table 'train' or 'holdout'.",
        (
            Argument("table", "the table, its first row holding column names"),
            Argument("holdout_share", "share of rows held out, 0.2 when blank", True, "value"),
            Argument("seed", "seed of the random choice, 0 when blank", True, "value"),
            Argument("mode", "random (blank), ordered (the last rows, for time series) or 'stratified COLUMN'", True, "value"),
        ),
        "one column as tall as the table: a header, then train or holdout per row",
    ),
    CellFunction(
        "SHEETNET.TRAIN",
        functions.train,
        "Trains a neural network on a table and returns the model block.",
        (
            Argument("table", "the table, its first row holding column names"),
            Argument("target", "the name of the column to predict", kind="value"),
            Argument("hidden", "hidden widths such as 8 or 8,4, 0 for none; blank: 16, or on a small table 16, 4 or none as its folds prefer", True, "value"),
            Argument("settings", "a two-column range of names and values, or a text like epochs=500; rate=0.3", True),
            Argument("split", "the column SHEETNET.SPLIT returned: holdout rows are left out of training", True),
        ),
        "the model block, 9 columns wide (spills)",
    ),
    CellFunction(
        "SHEETNET.PREDICT",
        functions.predict,
        "Predicts each row of a table with a trained model.",
        (
            Argument("model", "the model block (or its defined name)"),
            Argument("table", "rows to predict, with the model's input columns by name"),
            Argument(
                "output",
                "value (blank), probabilities, interval (conformal, for numbers), set (conformal, for classes), "
                "spread (lowest and highest network), flag; several may be combined",
                True,
                "value",
            ),
        ),
        "as tall as the table: a header, then the prediction per row",
    ),
    CellFunction(
        "SHEETNET.SCORE",
        functions.score,
        "Error metrics of a model on a table's rows.",
        (
            Argument("model", "the model block (or its defined name)"),
            Argument("table", "rows with the model's inputs and its target column"),
            Argument("split", "score the holdout rows of this split only", True),
            Argument("error_bars", "a level such as 90% (or TRUE): adds a bootstrap interval and words to each metric", True, "value"),
            Argument("reliability", "classes: a number of bins (or TRUE for 10): adds the reliability table of predicted probabilities", True, "value"),
        ),
        "a two-column table: metric, value (five columns with error bars: metric, value, low, high, in words; "
        "with reliability, a blank row and per bin: range, rows, mean predicted, observed share)",
    ),
    CellFunction(
        "SHEETNET.EXPLAIN",
        functions.explain,
        "How much each input matters: the loss increase when it is shuffled.",
        (
            Argument("model", "the model block (or its defined name)"),
            Argument("table", "rows with the model's inputs and its target column"),
        ),
        "three columns: input, importance, spread; largest first",
    ),
    CellFunction(
        "SHEETNET.ABOUT",
        functions.about,
        "What a model is, how it was trained and how it did on the holdout.",
        (
            Argument("model", "the model block (or its defined name)"),
            Argument("table", "the training table, to tell whether its data changed since training", True),
        ),
        "a two-column table: item, value",
    ),
    CellFunction(
        "SHEETNET.LAGS",
        functions.lags,
        "Lagged copies of a series, as input columns for forecasting.",
        (
            Argument("series", "one column with a header"),
            Argument("lags", "a count k (lags 1 to k) or a list such as 1,2,52", True, "value"),
        ),
        "as tall as the series: one column per lag",
    ),
    CellFunction(
        "SHEETNET.GROUPS",
        functions.groups,
        "Metrics by group: counts, error or accuracy, positive rates, TPR and FPR per group, and the largest gap.",
        (
            Argument("model", "the model block (or its defined name)"),
            Argument("table", "rows with the model's inputs, its target column and the group column"),
            Argument("group", "the name of the column whose groups to compare", kind="value"),
            Argument("split", "compare on the holdout rows of this split only", True),
        ),
        "one row per group, then the largest gap of each metric and a caution",
    ),
    CellFunction(
        "SHEETNET.SEARCH",
        functions.search,
        "Ranks candidate networks by cross-validated score and says which one to use.",
        (
            Argument("table", "the table, its first row holding column names"),
            Argument("target", "the name of the column to predict", kind="value"),
            Argument("candidates", "a range headed hidden, decay, algorithm (any of them), one candidate per row; 12 from none to 16,8 when blank", True),
            Argument("settings", "TRAIN's settings, plus metric=NAME to rank by (rmse or log_loss when blank)", True),
            Argument("folds", "5 when blank; a count, or ordered (time series), random, stratified or 'grouped COLUMN', then a count", True, "value"),
        ),
        "one row per candidate, best mean first (rank, hidden, decay, algorithm, weights, mean, spread, standard error, choice), then the rule",
    ),
)

BY_NAME: dict[str, CellFunction] = {f.name: f for f in REGISTRY}


def check_registry() -> None:
    """Every registered argument list matches its Python function's parameters."""
    for entry in REGISTRY:
        parameters = list(inspect.signature(entry.run).parameters.values())
        names = [p.name for p in parameters]
        if names != [a.name for a in entry.arguments]:
            raise AssertionError(f"{entry.name}: registry arguments {[a.name for a in entry.arguments]} differ from {names}")
        for parameter, argument in zip(parameters, entry.arguments):
            if (parameter.default is not inspect.Parameter.empty) != argument.optional:
                raise AssertionError(f"{entry.name}: argument {argument.name} optional mismatch")
