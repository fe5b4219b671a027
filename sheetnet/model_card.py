"""The model card: what a stored model is for, what it was trained on, how well it did and where it stops.

Pure: built from a model block alone, so every door writes the same card
(`sheetnet.service.model_placements` places it on the visible sheet
``sn card NAME`` each time a model is stored). Rows are ``[item, value,
note]``; section titles have a blank value. A metric's value is a number in
its number format (a `Shown`: shares such as accuracy show as 85.0%, others
at three decimals), its interval in words and its identifier (``accuracy``)
in the note beside it for code.
"""

from __future__ import annotations

import math
from typing import Any

from .block import BlockInfo, decode_block
from .groups import GAP_CAUTION
from .labels import metric_label, number_format, percent_in_words, value_in_words
from .model import Model
from .placements import Shown
from .preparation import NumericInput

NOT_STATED = "not stated: add the setting intended_use=... (what decisions the model supports, for whom) when training"
CARD_CAUTIONS = (
    "A model is a decision aid, not a decision: keep a person accountable for every decision it informs.",
    "Where its output affects people (credit, hiring, medical or safety decisions), check it for bias across groups "
    "(SHEETNET.GROUPS), and follow local law and licensed practice.",
    "Its holdout metrics describe rows like the training rows; new kinds of rows, or a world that changed since training, may fare worse.",
)
FEW_HOLDOUT_ROWS = 30  # below this the holdout metrics are unsteady (common practice, no source)


def model_card(name: str, block: list[list[Any]]) -> list[list[Any]]:
    """The card's rows, three cells wide: item, value, note (identifier or explanation)."""
    model, info = decode_block(block)
    given = dict(info.given)
    rows: list[list[Any]] = [[f"Model card: {name}", "", ""]]
    rows += _section("Intended use", [["intended use", str(given.get("intended_use") or NOT_STATED), "setting intended_use"]])
    rows += _section("Data", _data_rows(model, info))
    rows += _section("Network and settings", _network_rows(model, info))
    rows += _section("Holdout metrics", _metric_rows(model, info))
    if info.group_column is not None:
        rows += _section(f"Metrics by group ({info.group_column}, holdout rows)", _group_rows(model, info))
    rows += _section("Limitations", _limitations(model, info))
    rows += _section("Cautions", [["caution", text, ""] for text in CARD_CAUTIONS])
    return rows


def _section(title: str, rows: list[list[Any]]) -> list[list[Any]]:
    return [["", "", ""], [title, "", ""], *rows]


def _data_rows(model: Model, info: BlockInfo) -> list[list[Any]]:
    rows: list[list[Any]] = [
        ["target", info.target, model.task],
        ["inputs", ", ".join(model.input_names), f"{len(model.input_names)} columns"],
        ["training rows", info.training_rows, ""],
        ["holdout rows", info.holdout_rows, "rows the network did not train on; the metrics below are measured on them"],
        ["trained at", info.trained_at, "UTC"],
        ["fingerprint", info.fingerprint, "SHA-256 of the used columns over the used rows; SHEETNET.ABOUT tells whether the data changed"],
    ]
    if info.source is not None:
        address, share, mode, seed = info.source
        rows.append(["source range", address, f"holdout share {percent_in_words(share)}, split {mode}, seed {seed}"])
    if model.classes:
        rows.append(["classes", ", ".join(map(str, model.classes)), ""])
    return rows


def _network_rows(model: Model, info: BlockInfo) -> list[list[Any]]:
    rows: list[list[Any]] = [
        ["layers", "-".join(str(s) for s in model.sizes), "inputs after preparation, hidden units, outputs"],
        ["activation", model.activation, ""],
        ["algorithm", model.algorithm, ""],
        ["networks", len(model.members), "repeats averaged"],
        ["seed", model.seed, ""],
        ["stopped by", model.stopped_by, f"after {model.epochs} epochs"],
        ["written by", info.written_by, ""],
    ]
    rows += [[f"setting {key}", "" if value is None else str(value), "as used"] for key, value in sorted(model.settings.items())]
    return rows


def _metric_rows(model: Model, info: BlockInfo) -> list[list[Any]]:
    if not info.holdout_metrics:
        return [["holdout metrics", "none: the model was trained on every row", "train with a split to measure it on rows it did not see"]]
    rows: list[list[Any]] = []
    bars = info.error_bars
    for key, value in info.holdout_metrics.items():
        note = key
        if key in info.metric_intervals and bars is not None:
            low, high = info.metric_intervals[key]
            note = f"{percent_in_words(bars[0])} interval {value_in_words(key, low)} to {value_in_words(key, high)} ({key})"
        rows.append([metric_label(key), _number(key, value), note])
    if bars is not None:
        rows.append(["error bars", f"percentile bootstrap over the holdout rows, {bars[1]} resamples, seed {bars[2]}", ""])
    conformal = info.conformal
    if conformal is not None:
        level = percent_in_words(conformal.level)
        if model.task == "regression":
            text = f"predicted value ± {conformal.quantile:.4g}"
            note = f"split-conformal on {conformal.rows} holdout rows: covers {level} of new rows like them (PREDICT output interval)"
        else:
            text = f"every class with probability {1 - conformal.quantile:.3g} or more"
            note = f"split-conformal on {conformal.rows} holdout rows: holds the true class for {level} of new rows (PREDICT output set)"
        rows.append(["prediction interval" if model.task == "regression" else "prediction set", text, note])
    return rows


def _group_rows(model: Model, info: BlockInfo) -> list[list[Any]]:
    rows: list[list[Any]] = []
    metrics = sorted({m for values in info.group_metrics.values() for m in values if m != "rows"}, key=_metric_order)
    for label, values in info.group_metrics.items():
        parts = [f"{metric_label(m)} {value_in_words(m, values[m])}" for m in metrics if m in values]
        rows.append([str(label), f"{int(values.get('rows', 0))} rows", "; ".join(parts)])
    for m in metrics:
        defined = [(values[m], label) for label, values in info.group_metrics.items() if m in values]
        if len(defined) >= 2:
            (high, top), (low, bottom) = max(defined), min(defined)
            rows.append([f"largest gap: {metric_label(m)}", _number(m, high - low), f"{top} against {bottom}"])
    is_input = info.group_column in model.input_names
    rows.append(["group column", "an input of the model" if is_input else "not an input of the model", ""])
    rows.append(["caution", GAP_CAUTION, ""])
    return rows


def _number(metric: str, value: Any) -> Any:
    """A metric's value as a number in its format (shares as percentages); anything else as it is."""
    if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(float(value)):
        return Shown(float(value), number_format(metric))
    return value


def _metric_order(name: str) -> int:
    order = ("accuracy", "actual_positive_rate", "positive_rate", "true_positive_rate", "false_positive_rate", "balanced_accuracy",
             "mean_actual", "mean_predicted", "mean_error", "rmse", "mae")
    return order.index(name) if name in order else len(order)


def _limitations(model: Model, info: BlockInfo) -> list[list[Any]]:
    rows: list[list[Any]] = []
    for spec in model.preparation.inputs:
        if isinstance(spec, NumericInput):
            rows.append([f"{spec.name} range", f"{spec.low:.6g} to {spec.high:.6g}", "outside it the model extrapolates (PREDICT output flag marks such rows)"])
        else:
            rows.append([f"{spec.name} categories", ", ".join(spec.categories), "any other category is refused"])
    if 0 < info.holdout_rows < FEW_HOLDOUT_ROWS:
        rows.append(["few holdout rows", info.holdout_rows, "the metrics are unsteady; their intervals say how much"])
    if info.holdout_rows == 0:
        rows.append(["no holdout rows", 0, "nothing measured on unseen rows: no metrics, no prediction interval"])
    return rows
