"""sheetnet in the scikit-learn estimator API: `SheetnetRegressor` and `SheetnetClassifier`.

Both take the hidden layers, the seed, the category columns and every
training setting of `sheetnet.settings.SETTINGS` (except ``task``, which the
class decides) as parameters, train with `sheetnet.fit` and keep the fitted
`Model` as ``model_``. They read what `sheetnet.fit` reads (arrays, pandas
and polars DataFrames with text columns, lists of rows) and follow
scikit-learn's conventions where that library's tools rely on them: a
one-dimensional X is refused, column names seen in training must come back
in the same order, a column-vector y gets a `DataConversionWarning`.

Row weights (``sample_weight``) are not supported: the engine's loss weighs
every training row alike. ``fit`` has no ``sample_weight`` parameter, so
scikit-learn's tools (``has_fit_parameter``, its sample-weight checks,
metadata routing) see that it takes none, and a weight passed anyway is
refused in words rather than ignored.

>>> from sheetnet.estimators import SheetnetRegressor
>>> SheetnetRegressor(hidden=(8,), epochs=200).fit(X, y).predict(X_new)   # doctest: +SKIP

scikit-learn is imported here only; the engine does not need it.
"""

from __future__ import annotations

import math
import warnings
from typing import Any, Sequence

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.exceptions import DataConversionWarning, NotFittedError
from sklearn.utils.multiclass import type_of_target
from sklearn.utils.validation import validate_data

from .defaults import MIN_ROWS
from .errors import BadValueError, InputError, ModelError, NotEnoughRowsError, UnknownColumnError
from .model import Model
from .preparation import RawTable, read_table, read_target
from .settings import SETTINGS
from .training import fit

ESTIMATOR_SETTINGS = tuple(s.name for s in SETTINGS if s.name != "task")  # the class decides the task
_DEFAULT = {s.name: s.default for s in SETTINGS}


class NotTrainedError(ModelError, NotFittedError):
    """An estimator was asked to predict before `fit` trained it (scikit-learn's NotFittedError as well)."""


class _SheetnetEstimator(BaseEstimator):
    """What the regressor and the classifier share: parameters, reading X, training and predicting."""

    _task = "auto"

    def __init__(
        self,
        hidden: int | Sequence[int] | None = None,  # None: fit's default (16; 16, 4 or none as a small table's folds prefer)
        *,
        seed: int = 0,
        categories: Sequence[str] = (),
        algorithm: str = _DEFAULT["algorithm"],
        activation: str = _DEFAULT["activation"],
        epochs: int = _DEFAULT["epochs"],
        target_loss: float = _DEFAULT["target_loss"],
        gradient_threshold: float = _DEFAULT["gradient_threshold"],
        tolerance: float = _DEFAULT["tolerance"],
        patience: int = _DEFAULT["patience"],
        validation_share: float | None = _DEFAULT["validation_share"],
        decay: float | None = _DEFAULT["decay"],
        inner_folds: str = _DEFAULT["inner_folds"],
        rate: float | None = _DEFAULT["rate"],
        momentum: float = _DEFAULT["momentum"],
        batch: int | None = _DEFAULT["batch"],
        rprop_increase: float = _DEFAULT["rprop_increase"],
        rprop_decrease: float = _DEFAULT["rprop_decrease"],
        rprop_step: float = _DEFAULT["rprop_step"],
        rprop_step_max: float = _DEFAULT["rprop_step_max"],
        rprop_step_min: float = _DEFAULT["rprop_step_min"],
        adam_beta1: float = _DEFAULT["adam_beta1"],
        adam_beta2: float = _DEFAULT["adam_beta2"],
        adam_epsilon: float = _DEFAULT["adam_epsilon"],
        lbfgs_memory: int = _DEFAULT["lbfgs_memory"],
        repeats: int = _DEFAULT["repeats"],
        workers: int | None = _DEFAULT["workers"],
        threshold: float = _DEFAULT["threshold"],
        precision: str = _DEFAULT["precision"],
    ) -> None:
        # scikit-learn's rule: __init__ stores the parameters as given, and fit checks them
        self.hidden = hidden
        self.seed = seed
        self.categories = categories
        self.algorithm = algorithm
        self.activation = activation
        self.epochs = epochs
        self.target_loss = target_loss
        self.gradient_threshold = gradient_threshold
        self.tolerance = tolerance
        self.patience = patience
        self.validation_share = validation_share
        self.decay = decay
        self.inner_folds = inner_folds
        self.rate = rate
        self.momentum = momentum
        self.batch = batch
        self.rprop_increase = rprop_increase
        self.rprop_decrease = rprop_decrease
        self.rprop_step = rprop_step
        self.rprop_step_max = rprop_step_max
        self.rprop_step_min = rprop_step_min
        self.adam_beta1 = adam_beta1
        self.adam_beta2 = adam_beta2
        self.adam_epsilon = adam_epsilon
        self.lbfgs_memory = lbfgs_memory
        self.repeats = repeats
        self.workers = workers
        self.threshold = threshold
        self.precision = precision

    # --- training ------------------------------------------------------------------------
    def fit(self, X: Any, y: Any, **fit_params: Any) -> "_SheetnetEstimator":
        """Train on rows ``X`` (shape (rows, columns)) to predict ``y`` (one value per row); returns the estimator.

        Takes no ``sample_weight`` (every row weighs the same) and no other fit parameter: any is refused.
        """
        _refuse_fit_params(fit_params)
        target = self._target(y)
        table = self._table(X, reset=True)
        if len(target) != table.n_rows:
            raise InputError(f"X has {table.n_rows} rows but y has {len(target)} values; give one target value per row of X")
        self._check_target(target)
        settings = {name: getattr(self, name) for name in ESTIMATOR_SETTINGS}
        self.model_: Model = fit(table, target, self.hidden, self.seed, categories=tuple(self.categories), task=self._task, **settings)
        return self

    def _target(self, y: Any) -> np.ndarray:
        target = read_target(y)  # None, sparse and wrong shapes get the engine's messages
        if _column_vector(y):
            warnings.warn(
                DataConversionWarning(
                    "A column-vector y was passed when a 1d array was expected: sheetnet read its one column as the target; "
                    "pass y as one-dimensional (for example y.ravel()) to avoid this warning"
                ),
                stacklevel=3,
            )
        return target

    def _check_target(self, target: np.ndarray) -> None:
        """What the class needs of y beyond what sheetnet.fit checks."""

    def _table(self, X: Any, reset: bool) -> RawTable:
        """``X`` read as the engine reads it, held to scikit-learn's rules on shape, column count and names."""
        if _one_dimensional(X):
            raise InputError(
                "X is one-dimensional; Reshape your data: pass a table of rows and columns, "
                "for example X.reshape(-1, 1) for a single column or X.reshape(1, -1) for a single row"
            )
        table = read_table(X)
        if reset:
            if not table.names:
                raise InputError(
                    f"X has no columns: 0 feature(s) (shape=({table.n_rows}, 0)) while a minimum of 1 is required; add at least one column to learn from"
                )
            if table.n_rows < MIN_ROWS:
                rows = "row" if table.n_rows == 1 else "rows"
                raise NotEnoughRowsError(
                    f"training needs at least {MIN_ROWS} rows; X has {table.n_rows} {rows} ({table.n_rows} sample{'' if table.n_rows == 1 else 's'}): add rows"
                )
        try:
            validate_data(self, table_for_names(X, table), reset=reset, skip_check_array=True)
        except ValueError as error:  # scikit-learn's words about column counts and names, as our error
            raise UnknownColumnError(str(error)) from None
        except TypeError as error:  # column names of mixed kinds (texts and numbers)
            raise InputError(str(error)) from None
        _check_no_missing_numbers(X, table)
        return table

    # --- prediction ----------------------------------------------------------------------
    def _model(self) -> Model:
        model = getattr(self, "model_", None)
        if model is None:
            raise NotTrainedError(
                f"this {type(self).__name__} instance is not fitted yet (it has not been trained); call fit with a table and its target first"
            )
        return model

    def _rows(self, X: Any) -> Any:
        """What to hand the model: a numeric array as it is (the model's fast path), anything else as the table already read."""
        table = self._table(X, reset=False)
        return X if isinstance(X, np.ndarray) and X.ndim == 2 and X.dtype.kind in "fiu" else table

    def predict(self, X: Any) -> np.ndarray:
        """Predicted values (regressor) or class labels (classifier), shape (rows,)."""
        model = self._model()
        return model.predict(self._rows(X))

    def __sklearn_tags__(self) -> Any:
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = False  # a blank cell is named, not guessed
        tags.non_deterministic = False  # the seed decides everything
        return tags


class SheetnetRegressor(RegressorMixin, _SheetnetEstimator):
    """A sheetnet network that predicts amounts, in the scikit-learn estimator API.

    Parameters are `sheetnet.fit`'s: ``hidden`` (widths of the hidden layers; None, the default, as in `fit`),
    ``seed``, ``categories`` (numeric-looking columns to read as categories) and
    every training setting (see ``sheetnet settings``). After `fit`: ``model_``
    (the `Model`), ``n_features_in_`` and, for a DataFrame, ``feature_names_in_``.
    ``score`` is R².
    """

    _task = "regression"


class SheetnetClassifier(ClassifierMixin, _SheetnetEstimator):
    """A sheetnet network that predicts classes, in the scikit-learn estimator API.

    Parameters as for `SheetnetRegressor`; ``threshold`` decides between two
    classes. After `fit`: ``classes_`` (labels in the order of the columns of
    `predict_proba`), ``model_``, ``n_features_in_``, ``feature_names_in_``.
    ``score`` is accuracy.
    """

    _task = "multiclass"  # two classes become one logistic output by themselves

    def fit(self, X: Any, y: Any, **fit_params: Any) -> "SheetnetClassifier":
        super().fit(X, y, **fit_params)
        self.classes_ = np.asarray(self.model_.classes, dtype=object if _mixed_or_text(self.model_.classes) else None)
        return self

    def _check_target(self, target: np.ndarray) -> None:
        try:
            kind = type_of_target(target)
        except (ValueError, TypeError):
            return  # the engine names the bad label
        if kind.startswith("continuous"):
            raise InputError(
                "Unknown label type: the target holds continuous numbers (fractions, or many different values), which are amounts, not classes; "
                "use SheetnetRegressor to predict amounts, or round the values into classes"
            )

    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities, shape (rows, classes), columns in the order of ``classes_``."""
        model = self._model()
        return model.predict_proba(self._rows(X))


def _refuse_fit_params(fit_params: dict[str, Any]) -> None:
    if "sample_weight" in fit_params:
        raise InputError(
            "sample_weight is not supported: sheetnet weighs every training row alike; leave sample_weight out, "
            "or give a row a whole-number weight by repeating it in X and y"
        )
    if fit_params:
        raise InputError(f"fit takes X and y only, but was also given {', '.join(sorted(fit_params))}; leave them out")


def _one_dimensional(X: Any) -> bool:
    if isinstance(X, np.ndarray) or type(X).__name__ == "Series":
        return len(getattr(X, "shape", ())) == 1
    if isinstance(X, (list, tuple)) and X:
        return not isinstance(X[0], (list, tuple, np.ndarray))
    return False


def _column_vector(y: Any) -> bool:
    shape = getattr(y, "shape", None)
    if isinstance(shape, tuple):
        return len(shape) == 2
    return isinstance(y, (list, tuple)) and bool(y) and isinstance(y[0], (list, tuple, np.ndarray))


def table_for_names(X: Any, table: RawTable) -> Any:
    """What scikit-learn's column-name rules should see: the DataFrame itself, or an empty stand-in of the table's width."""
    if table.named and hasattr(X, "columns"):
        return X
    return np.empty((0, len(table.names)))


def _check_no_missing_numbers(X: Any, table: RawTable) -> None:
    """A NaN in a numeric array is named in Python's word for it (the engine says 'blank', as cells do)."""
    if isinstance(X, np.ndarray) and X.dtype.kind == "f":
        with np.errstate(over="ignore", invalid="ignore"):
            if np.isfinite(X.sum()):  # one contiguous sum: no NaN anywhere
                return
    for name, values in zip(table.names, table.columns):
        if values.dtype.kind == "f":
            missing = np.isnan(values)
            if missing.any():
                row = int(np.argmax(missing))
                raise BadValueError(name, row + 1, math.nan, "the value is NaN (not a number: a blank or a missing value)", "fill it in or remove the row")


def _mixed_or_text(labels: tuple[Any, ...]) -> bool:
    return not all(isinstance(v, (int, float, bool, np.number)) for v in labels)


__all__ = ["ESTIMATOR_SETTINGS", "NotTrainedError", "SheetnetClassifier", "SheetnetRegressor"]
