"""sheetnet: small feed-forward neural networks for spreadsheet data.

>>> import sheetnet
>>> model = sheetnet.fit(X, y, hidden=(8,), seed=0)      # doctest: +SKIP
>>> model.predict(X_new)                                  # doctest: +SKIP
"""

from .errors import SheetnetError
from .evaluation import cross_validate, holdout_evaluation, permutation_importance, score, take_rows
from .model import Model
from .search import search
from .splits import holdout_mask, k_folds
from .training import fit

__version__ = "0.1.0"

__all__ = [
    "Model",
    "SheetnetError",
    "cross_validate",
    "fit",
    "holdout_evaluation",
    "holdout_mask",
    "k_folds",
    "permutation_importance",
    "score",
    "search",
    "take_rows",
    "__version__",
]
