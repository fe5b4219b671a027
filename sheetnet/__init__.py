"""sheetnet: small feed-forward neural networks for spreadsheet data.

>>> import sheetnet
>>> model = sheetnet.fit(X, y, hidden=(8,), seed=0)      # doctest: +SKIP
>>> model.predict(X_new)                                  # doctest: +SKIP
>>> sheetnet.save(model, "model.json"); sheetnet.load("model.json")   # doctest: +SKIP

scikit-learn users: ``sheetnet.SheetnetRegressor`` and ``sheetnet.SheetnetClassifier``
(from `sheetnet.estimators`, imported when first asked for).
"""

from typing import Any

from .errors import SheetnetError
from .evaluation import cross_validate, holdout_evaluation, permutation_importance, score, take_rows
from .model import Model
from .model_file import load, save
from .search import search
from .splits import holdout_mask, k_folds
from .training import fit

__version__ = "0.1.0"

_ESTIMATORS = ("SheetnetClassifier", "SheetnetRegressor")


def __getattr__(name: str) -> Any:
    if name in _ESTIMATORS:  # scikit-learn loads only for those who use the estimators
        from . import estimators

        return getattr(estimators, name)
    raise AttributeError(f"module 'sheetnet' has no attribute '{name}'")

__all__ = [
    "Model",
    "SheetnetClassifier",
    "SheetnetError",
    "SheetnetRegressor",
    "cross_validate",
    "fit",
    "holdout_evaluation",
    "holdout_mask",
    "k_folds",
    "load",
    "permutation_importance",
    "save",
    "score",
    "search",
    "take_rows",
    "__version__",
]
