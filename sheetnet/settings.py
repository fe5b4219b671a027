"""Training settings, declared as data and checked by one validator.

Every setting has a name, a kind, a default, an accepted range and one line
of help. `resolve_settings` is the only place that reads user settings, so
every message about a bad setting reads the same way. The README's settings
table is generated from `SETTINGS` (see `settings_table_markdown`).
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass
from typing import Any, Mapping

from . import defaults as d
from .cell_text import cell_in_words
from .errors import SettingError
from .optimizers import OPTIMIZERS

ALGORITHMS = ("auto", *OPTIMIZERS)  # the optimizer table's names, in its order
ACTIVATIONS = ("tanh", "logistic", "relu")
TASKS = ("auto", "regression", "binary", "multiclass")
PRECISIONS = ("auto", "float64", "float32")
INNER_FOLD_ORDERS = ("shuffled", "ordered")


@dataclass(frozen=True)
class Setting:
    name: str
    kind: type  # int, float, str
    default: Any
    help: str
    low: float | None = None  # inclusive lower bound for numbers
    high: float | None = None  # inclusive upper bound for numbers
    choices: tuple[str, ...] = ()
    allow_none: bool = False  # None means "pick for me" (documented in help)


SETTINGS: tuple[Setting, ...] = (
    Setting("algorithm", str, "auto", f"training algorithm; auto: L-BFGS below {d.LBFGS_ROW_LIMIT:,} training rows, Adam from there on", choices=ALGORITHMS),
    Setting("activation", str, "tanh", "activation of the hidden layers", choices=ACTIVATIONS),
    Setting("task", str, "auto", "regression, binary or multiclass; auto decides from the target column", choices=TASKS),
    Setting("epochs", int, d.EPOCHS, "most epochs (passes over the training rows; one L-BFGS or Rprop iteration each)", low=1, high=1_000_000),
    Setting("target_loss", float, d.TARGET_LOSS, "stop once the training loss is at or below this (0: off)", low=0.0),
    Setting("gradient_threshold", float, d.GRADIENT_THRESHOLD, "stop once the largest partial derivative is at or below this", low=0.0),
    Setting("tolerance", float, d.TOLERANCE, "a loss must fall by this share of itself to count as progress", low=0.0, high=1.0),
    Setting("patience", int, d.PATIENCE, "epochs without progress before stopping (validation loss, or training loss when no validation share)", low=1, high=100_000),
    Setting("validation_share", float, None, f"share of training rows held back for early stopping; none: {d.AUTO_VALIDATION_SHARE:g} from {d.VALIDATION_ROW_LIMIT:,} training rows on, else 0 "
        "(and 0 while the decay is chosen by cross-validation)", low=0.0, high=0.5, allow_none=True),
    Setting("decay", float, None, "L2 weight decay: adds decay/2 * sum of squared weights (biases excluded) to the summed loss; "
        f"none: {d.TINY_TABLE_DECAY:g} below {d.TUNING_MIN_ROWS} training rows, then below {d.TUNING_ROW_LIMIT:,} the one of "
        f"{', '.join(f'{c:g}' for c in d.DECAY_CHOICES)} that {d.TUNING_FOLDS}-fold cross-validation on the training rows prefers, "
        f"else {d.DEFAULT_DECAY:g}", low=0.0, allow_none=True),
    Setting("inner_folds", str, "shuffled", "how that cross-validation cuts the training rows: shuffled, or ordered for rows in time order "
        "(each fold checks on rows after the ones it trains on); TRAIN takes ordered when its holdout is the table's last rows",
        choices=INNER_FOLD_ORDERS),
    Setting("rate", float, None, f"learning rate; none: {d.GD_RATE:g} for gd, {d.ADAM_RATE:g} for adam "
        f"(the paper suggests {d.ADAM_PAPER_RATE:g}; {d.ADAM_RATE:g} converged about 3x sooner on large tables)", low=0.0, allow_none=True),
    Setting("momentum", float, 0.9, "momentum of gradient descent", low=0.0, high=0.999),
    Setting("batch", int, None, f"rows per update for gd and adam; 0: all rows; none: all rows for gd, {d.ADAM_BATCH_ROWS} for adam", low=0, allow_none=True),
    Setting("rprop_increase", float, 1.2, "Rprop step growth when the gradient keeps its sign (eta+)", low=1.0),
    Setting("rprop_decrease", float, 0.5, "Rprop step shrink when the gradient changes sign (eta-)", low=0.0, high=1.0),
    Setting("rprop_step", float, 0.1, "Rprop initial step size (Delta_0)", low=0.0),
    Setting("rprop_step_max", float, 50.0, "Rprop largest step size", low=0.0),
    Setting("rprop_step_min", float, 1e-6, "Rprop smallest step size", low=0.0),
    Setting("adam_beta1", float, 0.9, "Adam decay of the first-moment estimate", low=0.0, high=0.9999),
    Setting("adam_beta2", float, 0.999, "Adam decay of the second-moment estimate", low=0.0, high=0.999999),
    Setting("adam_epsilon", float, 1e-8, "Adam constant added to the denominator", low=0.0),
    Setting("lbfgs_memory", int, 10, "L-BFGS number of stored correction pairs", low=1, high=1000),
    Setting("repeats", int, 1, "networks trained from different seeds and averaged", low=1, high=1000),
    Setting("workers", int, None, "processes for repeats and search fits; none: chosen from the free cores, or the cluster's workers", low=1, high=256, allow_none=True),
    Setting("threshold", float, 0.5, "binary models: probability of the second class at or above which it is predicted", low=0.0, high=1.0),
    Setting("precision", str, "auto", f"arithmetic of training; auto: float32 from {d.FLOAT32_ROW_LIMIT:,} training rows on, else float64 (prediction is always float64)", choices=PRECISIONS),
)

SETTINGS_BY_NAME: dict[str, Setting] = {s.name: s for s in SETTINGS}


def _coerce(setting: Setting, value: Any) -> Any:
    if value is None or (isinstance(value, str) and value.strip().lower() in ("", "none", "auto") and setting.allow_none):
        if setting.allow_none:
            return None
        raise SettingError(f"setting '{setting.name}' needs a value; its default is {cell_in_words(setting.default)}")
    if setting.kind is str:
        text = str(value).strip().lower()
        if text not in setting.choices:
            raise SettingError(
                f"setting '{setting.name}' got {cell_in_words(value)}; choose one of: {', '.join(setting.choices)}"
            )
        return text
    if isinstance(value, bool):
        raise SettingError(f"setting '{setting.name}' got {cell_in_words(value)}; it takes a number")
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise SettingError(f"setting '{setting.name}' got {cell_in_words(value)}; it takes a number") from None
    if not math.isfinite(number):
        raise SettingError(f"setting '{setting.name}' got {cell_in_words(value)}; it takes a finite number")
    if setting.kind is int:
        if number != int(number):
            raise SettingError(f"setting '{setting.name}' got {cell_in_words(value)}; it takes a whole number")
        number = int(number)
    if setting.low is not None and number < setting.low:
        raise SettingError(f"setting '{setting.name}' got {cell_in_words(value)}; it must be at least {setting.low:g}")
    if setting.high is not None and number > setting.high:
        raise SettingError(f"setting '{setting.name}' got {cell_in_words(value)}; it must be at most {setting.high:g}")
    return number


def resolve_settings(given: Mapping[str, Any]) -> dict[str, Any]:
    """Check user settings and fill in defaults.

    >>> resolve_settings({"epochs": "200"})["epochs"]
    200
    """
    unknown = [name for name in given if name not in SETTINGS_BY_NAME]
    if unknown:
        name = unknown[0]
        close = difflib.get_close_matches(name, SETTINGS_BY_NAME, n=1)
        hint = f"; did you mean '{close[0]}'?" if close else f"; known settings: {', '.join(SETTINGS_BY_NAME)}"
        raise SettingError(f"unknown setting '{name}'{hint}")
    resolved = {s.name: s.default for s in SETTINGS}
    for name, value in given.items():
        resolved[name] = _coerce(SETTINGS_BY_NAME[name], value)
    if resolved["rprop_step_min"] > resolved["rprop_step_max"]:
        raise SettingError("setting 'rprop_step_min' is larger than 'rprop_step_max'; lower the first or raise the second")
    return resolved


def settings_table_markdown() -> str:
    """The settings as a Markdown table, for the README."""
    lines = ["| setting | default | accepted | meaning |", "|---|---|---|---|"]
    for s in SETTINGS:
        if s.choices:
            accepted = ", ".join(s.choices)
        else:
            low = "" if s.low is None else f"{s.low:g}"
            high = "" if s.high is None else f"{s.high:g}"
            accepted = f"{s.kind.__name__} {low}..{high}".rstrip(".") if (low or high) else s.kind.__name__
            if s.allow_none:
                accepted += ", none"
        default = "none" if s.default is None else f"{s.default}"
        lines.append(f"| `{s.name}` | {default} | {accepted} | {s.help} |")
    return "\n".join(lines)
