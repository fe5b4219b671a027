"""Partial dependence: the model's average answer as one input is swept over a grid, the others kept as they are.

Pure (Friedman 2001, "Greedy function approximation", section 8.2): for each
grid value ``v`` of input ``j``, set column ``j`` of every row to ``v`` and
average the predictions (regression: the value; two classes: the
probability of the second class; more classes: each class's probability).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .errors import InputError
from .evaluation import _as_named
from .preparation import NumericInput, read_table

GRID_POINTS = 20


def grid_of(values: Any, points: int = GRID_POINTS) -> np.ndarray:
    """Evenly spaced values from the 5th to the 95th percentile of a numeric column (the tails are thin)."""
    numbers = np.asarray(values, dtype=np.float64)
    low, high = np.percentile(numbers, [5, 95])
    return np.unique(np.linspace(low, high, points))


def partial_dependence(model: Any, X: Any, column: str, grid: Any = None) -> tuple[np.ndarray, np.ndarray]:
    """(grid, average) for one numeric input: average has shape (grid,) or, for more than two classes, (grid, classes)."""
    if column not in model.input_names:
        raise InputError(f"'{column}' is not an input of the model; choose one of: {', '.join(model.input_names)}")
    spec = model.preparation.inputs[model.input_names.index(column)]
    if not isinstance(spec, NumericInput):
        raise InputError(f"'{column}' is a category input; partial dependence curves are drawn for number inputs")
    read_table(X)
    columns = [np.asarray(c) for c in model.preparation.columns_in_order(X)]
    j = model.input_names.index(column)
    values = grid_of(columns[j].astype(np.float64)) if grid is None else np.asarray(grid, dtype=np.float64)
    averages = []
    for v in values:
        swept = list(columns)
        swept[j] = np.full(len(columns[j]), v, dtype=np.float64)
        rows = _as_named(swept, model)
        if model.task == "regression":
            averages.append(model.predict(rows).mean())
        elif model.task == "binary":
            averages.append(model.predict_proba(rows)[:, 1].mean())
        else:
            averages.append(model.predict_proba(rows).mean(axis=0))
    return values, np.asarray(averages)
