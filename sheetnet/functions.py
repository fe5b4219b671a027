"""The cell functions: what SHEETNET.SPLIT, TRAIN, PREDICT, SCORE, EXPLAIN, ABOUT and LAGS compute.

Each takes and returns 2-D lists of cell values. A failure never raises into
the spreadsheet: it returns one cell whose text starts with ``#SHEETNET!`` and
says what to do. These are the only functions the bridges (command line,
workbook files, xlwings, the local server) call; `sheetnet.registry` lists
them with their arguments.
"""

from __future__ import annotations

import functools
import hashlib
import json
from collections import OrderedDict
from datetime import datetime, timezone
from typing import Any, Callable

import numpy as np
import pandas as pd

from . import __version__
from .block import BlockInfo, _canonical, decode_block, encode_block, table_fingerprint
from .cells import (
    Cells,
    SheetTable,
    as_cells,
    as_grid,
    column_of,
    is_blank,
    message_cell,
    numeric_frame,
    parse_hidden,
    parse_settings,
    read_sheet_table,
    row_label,
)
from .errors import BadValueError, InputError, ModelError, SettingError, SheetnetError, UnknownCategoryError
from .evaluation import permutation_importance
from .evaluation import score as score_model
from .model import Model
from .splits import holdout_mask
from .stopping import ProgressCallback
from .training import fit

CAUTION = "a decision aid, not a decision: check it for bias and follow local law and licensed practice"
CELL_OPTIONS = ("seed", "ignore", "inputs", "categories", "blank_rows")  # settings the cell layer reads itself
TRAIN_CACHE_SIZE = 32
_train_cache: OrderedDict[str, Cells] = OrderedDict()
_decoded_cache: OrderedDict[str, tuple[Model, BlockInfo]] = OrderedDict()


def cell_function(fn: Callable[..., Cells]) -> Callable[..., Cells]:
    """Turn every failure into one readable cell; nothing raises into the spreadsheet."""

    @functools.wraps(fn)
    def guarded(*args: Any, **kwargs: Any) -> Cells:
        try:
            return fn(*args, **kwargs)
        except (BadValueError, UnknownCategoryError) as error:
            return message_cell(_sheet_rows(str(error)))
        except SheetnetError as error:
            return message_cell(str(error))
        except Exception as error:  # a bug: still no crash in the cell, and a message to report
            return message_cell(f"unexpected {type(error).__name__}: {error}. Please report this with the workbook")

    return guarded


def raising(fn: Callable[..., Cells]) -> Callable[..., Cells]:
    """A cell function without its message cell: raises `SheetnetError`, for bridges that report errors their own way."""
    return fn.__wrapped__  # type: ignore[attr-defined]


def _sheet_rows(text: str) -> str:
    # the engine counts data rows from 1; the user's range has the header as row 1
    head, sep, rest = text.partition(", row ")
    if sep and rest.split(":")[0].isdigit():
        number = int(rest.split(":")[0])
        return f"{head}, {row_label(number - 1)}{rest[len(str(number)):]}"
    return text


# --- shared steps -------------------------------------------------------------------------

def _in_sheet_rows(data_rows: np.ndarray, target: str | None, call: Callable[[], Any]) -> Any:
    """Run ``call``; a bad cell it finds is reported at its row in the user's range."""
    try:
        return call()
    except (BadValueError, UnknownCategoryError) as error:
        column = target if error.column == "target" and target else error.column
        raise error.moved(int(data_rows[error.row - 1]) + 1, column) from None


def _rows_used(table: SheetTable, columns: list[str], skip_blanks: bool) -> np.ndarray:
    """Mask over the table's data rows: rows with every needed column filled (or all, without skipping)."""
    if not skip_blanks:
        return np.ones(len(table.frame), dtype=bool)
    filled = np.ones(len(table.frame), dtype=bool)
    for name in columns:
        filled &= ~table.frame[name].map(is_blank).to_numpy(dtype=bool)
    return filled


def _inputs_frame(table: SheetTable, names: tuple[str, ...] | list[str], rows: np.ndarray) -> pd.DataFrame:
    for name in names:
        table.column(name)
    frame = table.frame.loc[rows, list(names)].reset_index(drop=True)
    return numeric_frame(frame)


def _check_no_identifiers(frame: pd.DataFrame) -> None:
    for name in frame.columns:
        values = frame[name]
        texts = [v for v in values if isinstance(v, str)]
        if len(values) >= 20 and len(texts) == len(values) and len(set(texts)) == len(texts):
            raise InputError(
                f"column '{name}' holds a different text in every row, like an identifier, so it cannot inform the model; "
                f"leave it out of the table or add the setting ignore={name}"
            )


def _read_split(split: Any, table: SheetTable) -> np.ndarray:
    """True for holdout rows among the table's data rows (blank rows were dropped)."""
    _, values = column_of(split, "split", table.n_rows)
    held = np.zeros(len(table.frame), dtype=bool)
    for k, row in enumerate(table.data_rows):
        value = values[row]
        text = "" if is_blank(value) else str(value).strip().lower()
        if text not in ("train", "holdout"):
            raise InputError(f"the split has {value!r} in {row_label(int(row))}; each data row needs 'train' or 'holdout' (use SHEETNET.SPLIT)")
        held[k] = text == "holdout"
    return held


def _options(settings: dict[str, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
    cell = {k: settings.pop(k) for k in list(settings) if k in CELL_OPTIONS}
    blank_rows = str(cell.get("blank_rows", "error")).strip().lower()
    if blank_rows not in ("error", "skip"):
        raise SettingError(f"setting 'blank_rows' got {cell['blank_rows']!r}; choose error (a blank cell is a mistake) or skip (leave such rows out)")
    cell["blank_rows"] = blank_rows
    return cell, settings


def _name_list(value: Any) -> list[str]:
    if value is None or is_blank(value):
        return []
    return [part.strip() for part in str(value).replace(";", ",").split(",") if part.strip()]


def _model_inputs(sheet: SheetTable, model: Model, rows: np.ndarray) -> Any:
    """The model's input columns for these rows: a float array in model order when all are numbers
    (the engine's fast path, no pandas on the way), else a DataFrame."""
    columns = [sheet.column(name).to_numpy() for name in model.input_names]
    if model.preparation.all_numeric and all(c.dtype.kind == "f" for c in columns):
        return np.column_stack([c[rows] for c in columns]) if columns else np.empty((int(rows.sum()), 0))
    return _inputs_frame(sheet, model.input_names, rows)


def _scalar_metrics(metrics: dict[str, Any]) -> dict[str, float]:
    return {k: float(v) for k, v in metrics.items() if isinstance(v, float)}


def _decode(model: Any) -> tuple[Model, BlockInfo, dict[str, Any]]:
    if isinstance(model, str) and not model.strip():
        raise ModelError("no model given; pass the block SHEETNET.TRAIN returned (or its defined name)")
    grid = as_grid(model, "model")
    # decoded models are immutable, so a block seen before (every cell the same) is not decoded again
    key = hashlib.sha256(repr(grid).encode("utf-8")).hexdigest()
    found = _decoded_cache.get(key)
    if found is None:
        found = _decoded_cache[key] = decode_block(grid)
        while len(_decoded_cache) > TRAIN_CACHE_SIZE:
            _decoded_cache.popitem(last=False)
    decoded, info = found
    return decoded, info, {"skip_blanks": info.blank_rows == "skip"}


def _fingerprint(table: SheetTable, columns: list[str], rows: np.ndarray) -> str:
    return table_fingerprint([table.frame.loc[rows, name].tolist() for name in columns])


# --- the cell functions -------------------------------------------------------------------

@cell_function
def split(table: Any, holdout_share: Any = None, seed: Any = None, mode: Any = None) -> Cells:
    """A column as tall as the table: a header, then 'train' or 'holdout' for each data row."""
    sheet = read_sheet_table(table)
    share = 0.2 if is_blank(holdout_share) else _number_setting(holdout_share, "holdout share")
    chosen_seed = 0 if is_blank(seed) else int(_number_setting(seed, "seed"))
    text = "random" if is_blank(mode) else str(mode).strip()
    labels = None
    lowered = text.lower()
    if lowered.startswith("stratified"):
        column = text[len("stratified"):].strip(" :")
        if not column:
            raise SettingError("a stratified split needs the column to stratify by: write the mode as 'stratified grade'")
        labels = [str(v) for v in sheet.column(column)]
        lowered = "stratified"
    elif lowered not in ("random", "ordered"):
        raise SettingError(f"split mode {text!r} is not known; use random, ordered, or 'stratified COLUMN'")
    held = holdout_mask(len(sheet.frame), share, chosen_seed, lowered, labels)
    answer: Cells = [["split"]]
    answer += [[""] for _ in range(sheet.n_rows)]
    for k, row in enumerate(sheet.data_rows):
        answer[row + 1][0] = "holdout" if held[k] else "train"
    return answer


def _number_setting(value: Any, what: str) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        raise SettingError(f"the {what} is {value!r}; give a number") from None


def _cache_key(*parts: Any) -> str:
    def canonical(value: Any) -> Any:
        if isinstance(value, np.ndarray):
            value = value.tolist()
        if isinstance(value, (list, tuple)):
            return [canonical(v) for v in value]
        return _canonical(value)

    return hashlib.sha256(json.dumps(canonical(list(parts))).encode("utf-8")).hexdigest()


@cell_function
def train(table: Any, target: Any, hidden: Any = None, settings: Any = None, split: Any = None) -> Cells:
    """The model block: trains on the table's rows (holdout rows of the split left out)."""
    key = _cache_key(table, target, hidden, settings, split)
    if key in _train_cache:
        _train_cache.move_to_end(key)
        return [list(row) for row in _train_cache[key]]
    block = train_block(table, target, hidden, settings, split)
    _train_cache[key] = block
    while len(_train_cache) > TRAIN_CACHE_SIZE:
        _train_cache.popitem(last=False)
    return [list(row) for row in block]


def train_block(
    table: Any,
    target: Any,
    hidden: Any = None,
    settings: Any = None,
    split: Any = None,
    progress: ProgressCallback | None = None,
    source: tuple[str, float, str, int] | None = None,
) -> Cells:
    """TRAIN without the cache and the message cell: raises `SheetnetError`; reports progress per epoch."""
    sheet = read_sheet_table(table)
    if is_blank(target):
        raise InputError(f"no target given; name the column to predict, one of: {', '.join(map(str, sheet.frame.columns))}")
    target_name = str(target).strip()
    sheet.column(target_name)
    options, engine_settings = _options(parse_settings(settings))
    chosen = _name_list(options.get("inputs"))
    ignored = set(_name_list(options.get("ignore")))
    inputs = chosen or [c for c in sheet.frame.columns if c != target_name and c not in ignored]
    if target_name in inputs:
        raise SettingError(f"'{target_name}' is the target, so it cannot also be an input; remove it from the setting inputs")
    if not inputs:
        raise InputError("no input columns are left; the table needs at least one column besides the target")
    skip = options["blank_rows"] == "skip"
    used = _rows_used(sheet, [*inputs, target_name], skip)
    held = _read_split(split, sheet) if split is not None and not is_blank(split) else np.zeros(len(sheet.frame), dtype=bool)
    training = used & ~held
    frame = _inputs_frame(sheet, inputs, training)
    _check_no_identifiers(frame)
    y = numeric_frame(sheet.frame.loc[training, [target_name]])[target_name].to_numpy()
    seed = int(_number_setting(options.get("seed", 0), "seed"))
    layers = parse_hidden(hidden)
    categories = _name_list(options.get("categories"))
    model = _in_sheet_rows(
        sheet.data_rows[training], target_name, lambda: fit(frame, y, layers, seed, categories=categories, progress=progress, **engine_settings)
    )

    metrics: dict[str, float] = {}
    holdout = used & held
    if holdout.any():
        actual = numeric_frame(sheet.frame.loc[holdout, [target_name]])[target_name].to_numpy()
        holdout_frame = _inputs_frame(sheet, inputs, holdout)
        metrics = _scalar_metrics(_in_sheet_rows(sheet.data_rows[holdout], target_name, lambda: score_model(model, holdout_frame, actual)))
    info = BlockInfo(
        target=target_name,
        trained_at=datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        written_by=f"sheetnet {__version__}",
        fingerprint=_fingerprint(sheet, [*inputs, target_name], used),
        training_rows=int(training.sum()),
        holdout_rows=int(holdout.sum()),
        holdout_metrics=metrics,
        blank_rows=options["blank_rows"],
        source=source,
    )
    return encode_block(model, info)


PREDICT_OUTPUTS = ("value", "probabilities", "interval", "flag")


def _parse_output(value: Any) -> list[str]:
    if is_blank(value):
        return ["value"]
    parts = [p for p in str(value).replace(",", " ").lower().split() if p]
    for part in parts:
        if part not in PREDICT_OUTPUTS:
            raise SettingError(f"output '{part}' is not known; choose from {', '.join(PREDICT_OUTPUTS)} (several may be combined, like 'value, flag')")
    return parts


@cell_function
def predict(model: Any, table: Any, output: Any = None) -> Cells:
    """As tall as the table: a header, then per row the prediction (and what `output` asks for)."""
    decoded, info, options = _decode(model)
    wanted = _parse_output(output)
    sheet = read_sheet_table(table)
    rows = _rows_used(sheet, list(decoded.input_names), options["skip_blanks"])
    frame = _model_inputs(sheet, decoded, rows)
    header, columns = _in_sheet_rows(sheet.data_rows[rows], None, lambda: _predictions(decoded, info, frame, wanted))
    answered = sheet.data_rows[rows]
    if len(answered) == sheet.n_rows:  # no blank rows: the answer rows are the columns zipped
        return [header] + [list(row) for row in zip(*columns)]
    answer: Cells = [header] + [[""] * len(header) for _ in range(sheet.n_rows)]
    for k, row in enumerate(answered):
        answer[row + 1] = [column[k] for column in columns]
    return answer


def _predictions(decoded: Model, info: BlockInfo, frame: Any, wanted: list[str]) -> tuple[list[Any], list[list[Any]]]:
    """Header and answer columns for PREDICT; the network runs once per kind of output."""
    header: list[Any] = []
    columns: list[list[Any]] = []
    if "probabilities" in wanted and decoded.task == "regression":
        raise SettingError("this model predicts numbers, so it has no class probabilities; use output value or interval")
    wants_value = "value" in wanted or ("probabilities" not in wanted and "interval" not in wanted)
    probabilities = decoded.predict_proba(frame) if decoded.task != "regression" and (wants_value or "probabilities" in wanted) else None
    if wants_value:
        header.append(f"predicted {info.target}")
        columns.append(as_cells(decoded.predict(frame) if probabilities is None else decoded.classes_of(probabilities)))
    if probabilities is not None and "probabilities" in wanted:
        for j, label in enumerate(decoded.classes):
            header.append(f"P({label})")
            columns.append(as_cells(probabilities[:, j]))
    if "interval" in wanted:
        if len(decoded.members) < 2:
            raise SettingError("an interval needs several networks; train with the setting repeats=5 (or more)")
        if decoded.task != "regression":
            raise SettingError("an interval is for models that predict numbers; for classes use output probabilities")
        spread = decoded.predict_spread(frame)
        header += [f"{info.target} lowest network", f"{info.target} highest network"]
        columns += [as_cells(spread["low"]), as_cells(spread["high"])]
    if "flag" in wanted:
        header.append("outside training range")
        columns.append([bool(v) for v in decoded.out_of_range(frame)])
    return header, columns


def _scored_rows(decoded: Model, info: BlockInfo, sheet: SheetTable, split: Any, skip: bool) -> np.ndarray:
    rows = _rows_used(sheet, [*decoded.input_names, info.target], skip)
    sheet.column(info.target)
    if split is not None and not is_blank(split):
        rows &= _read_split(split, sheet)
    if not rows.any():
        raise InputError("no rows to score; check the split marks some rows 'holdout'")
    return rows


@cell_function
def score(model: Any, table: Any, split: Any = None) -> Cells:
    """A two-column table of metrics, on the split's holdout rows when a split is given."""
    decoded, info, options = _decode(model)
    sheet = read_sheet_table(table)
    rows = _scored_rows(decoded, info, sheet, split, options["skip_blanks"])
    actual = numeric_frame(sheet.frame.loc[rows, [info.target]])[info.target].to_numpy()
    frame = _inputs_frame(sheet, decoded.input_names, rows)
    metrics = _in_sheet_rows(sheet.data_rows[rows], info.target, lambda: score_model(decoded, frame, actual))
    answer: Cells = [["metric", "value"], ["rows", int(rows.sum())]]
    answer += [[name, value] for name, value in metrics.items() if isinstance(value, float) or value is None and name == "mape"]
    for label, per in metrics.get("per_class", {}).items():
        answer += [[f"{kind} {label}", per[kind]] for kind in ("precision", "recall", "f1")]
    return [[name, "" if value is None else value] for name, value in answer]


@cell_function
def explain(model: Any, table: Any) -> Cells:
    """Permutation importance of each input on the table's rows, largest first."""
    decoded, info, options = _decode(model)
    sheet = read_sheet_table(table)
    rows = _scored_rows(decoded, info, sheet, None, options["skip_blanks"])
    actual = numeric_frame(sheet.frame.loc[rows, [info.target]])[info.target].to_numpy()
    frame = _inputs_frame(sheet, decoded.input_names, rows)
    found = _in_sheet_rows(sheet.data_rows[rows], info.target, lambda: permutation_importance(decoded, frame, actual, repeats=5, seed=0))
    loss = "RMSE" if decoded.task == "regression" else "log-loss"
    return [["input", f"{loss} increase when shuffled", "spread"]] + [[name, mean, spread] for name, mean, spread in found]


@cell_function
def about(model: Any, table: Any = None) -> Cells:
    """A two-column summary of the model; given the table, whether its data changed since training."""
    decoded, info, options = _decode(model)
    member = decoded.members[0]
    rows: list[list[Any]] = [
        ["target", info.target],
        ["task", decoded.task],
        ["inputs", ", ".join(decoded.input_names)],
        ["layers", "-".join(str(s) for s in decoded.sizes)],
        ["activation", decoded.activation],
        ["algorithm", decoded.algorithm],
        ["networks", len(decoded.members)],
        ["stopped by", member.stopped_by],
        ["epochs", member.epochs],
        ["trained at", info.trained_at],
        ["written by", info.written_by],
        ["training rows", info.training_rows],
        ["holdout rows", info.holdout_rows],
    ]
    if decoded.classes:
        rows.append(["classes", ", ".join(map(str, decoded.classes))])
    rows += [[f"holdout {name}", value] for name, value in info.holdout_metrics.items()]
    if table is not None and not is_blank(table):
        sheet = read_sheet_table(table)
        columns = [*decoded.input_names, info.target]
        used = _rows_used(sheet, columns, options["skip_blanks"])
        for name in columns:
            sheet.column(name)
        same = _fingerprint(sheet, columns, used) == info.fingerprint
        rows.append(["data since training", "unchanged" if same else "changed: retrain to use the new rows"])
    rows.append(["caution", CAUTION])
    return [["about", "value"]] + rows


@cell_function
def lags(series: Any, lags: Any = None) -> Cells:
    """Lagged copies of a one-column series (with its header), as input columns for time-series models.

    ``lags`` is a count k (lags 1..k) or a list like ``1,2,52``. The first rows,
    which have no history yet, are blank: train with the setting blank_rows=skip.
    """
    name, values = column_of(series, "series", len(as_grid(series, "series")) - 1)
    if is_blank(lags):
        steps = [1]
    elif isinstance(lags, (int, float)) and not isinstance(lags, bool):
        if lags != int(lags) or lags < 1:
            raise SettingError(f"lags is {lags!r}; give a whole number of 1 or more, or a list like 1,2,52")
        steps = list(range(1, int(lags) + 1))
    else:
        try:
            steps = [int(p) for p in str(lags).replace(";", ",").split(",") if p.strip()]
        except ValueError:
            raise SettingError(f"lags {lags!r} are not whole numbers; write a count like 4 or a list like 1,2,52") from None
        if not steps or min(steps) < 1:
            raise SettingError("every lag must be 1 or more")
    numbers: list[float | None] = []
    for i, value in enumerate(values):
        if is_blank(value):
            numbers.append(None)
        elif isinstance(value, bool) or not isinstance(value, (int, float)):
            raise BadValueError(name, i + 1, value, "text in a numeric series", "type a number or clear the cell")
        else:
            numbers.append(float(value))
    answer: Cells = [[f"{name} lag {k}" for k in steps]]
    for i in range(len(numbers)):
        answer.append([numbers[i - k] if i - k >= 0 and numbers[i - k] is not None else "" for k in steps])
    return answer
