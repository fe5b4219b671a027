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
import threading
from collections import OrderedDict
from datetime import datetime, timezone
from types import SimpleNamespace
from typing import Any, Callable

import numpy as np
import pandas as pd

from . import __version__
from .block import BlockInfo, _canonical, decode_block, encode_block
from .cell_text import cell_in_words, label_in_words, labels_in_words, number_in_words
from .cells import (
    NUMBERS_IN_TEXT,
    Cells,
    SheetTable,
    as_cells,
    as_grid,
    column_of,
    content_key,
    fingerprint,
    fingerprint_matches,
    is_blank,
    message_cell,
    numeric_frame,
    one_value,
    parse_hidden,
    parse_settings,
    range_row,
    read_numbers_in_text,
    read_sheet_table,
    row_label,
)
from .defaults import DEFAULT_HIDDEN
from .errors import BadValueError, CellError, InputError, ModelError, SettingError, SheetnetError
from .evaluation import permutation_importance
from .evaluation import score as score_model
from .labels import metric_label, percent_in_words, value_in_words
from .limits import MAX_NUMBER, check_answer_size, check_lag_count, check_network_size, check_ranges, range_shape
from .metrics import ROC_AUC_LEFT_OUT, mape_left_out_reason
from .model import Model
from .preparation import NumericInput, fit_target, numbers_of, planned_width, read_table, read_target, task_choice_in_words
from .settings import resolve_settings
from .splits import holdout_mask
from .stopping import ProgressCallback
from .training import fit
from .uncertainty import (
    BOOTSTRAP_METHOD,
    BOOTSTRAP_RESAMPLES,
    BOOTSTRAP_SEED,
    Conformal,
    calibrate,
    metric_error_bars,
    model_reliability,
    prediction_sets,
    read_bins,
    read_level,
    rows_needed,
)

CAUTION = "a decision aid, not a decision: check it for bias and follow local law and licensed practice"
# settings the cell layer reads itself (interval_level: of the conformal interval and the error bars; intended_use: for the
# model card; group: a column whose groups' holdout metrics the block records)
CELL_OPTIONS = ("seed", "ignore", "inputs", "categories", "blank_rows", "numbers_in_text", "interval_level", "intended_use", "group")
TRAIN_NUMBER_TEXT_FIX = (
    "convert the column to numbers in the sheet, or add the setting numbers_in_text=point (reads 1,234.5 and 12% as numbers) "
    "or numbers_in_text=comma (reads 1.234,5 as numbers)"
)
PREDICT_NUMBER_TEXT_FIX = (
    "convert the column to numbers in the sheet (the model was trained on numbers), "
    "or retrain the model with the setting numbers_in_text=point or numbers_in_text=comma"
)
TRAIN_CACHE_SIZE = 32
MAX_GROUPS = 50  # more groups than this is a numeric column or an identifier, not groups to compare
_train_cache: OrderedDict[str, Cells] = OrderedDict()
_train_cache_lock = threading.Lock()
_decoded_cache: OrderedDict[str, tuple[Model, BlockInfo]] = OrderedDict()


def cell_function(fn: Callable[..., Cells]) -> Callable[..., Cells]:
    """Turn every failure into one readable cell; nothing raises into the spreadsheet."""

    @functools.wraps(fn)
    def guarded(*args: Any, **kwargs: Any) -> Cells:
        try:
            return fn(*args, **kwargs)
        except SheetnetError as error:
            return message_cell(str(error))
        except Exception as error:  # a bug: still no crash in the cell, and a message to report
            return message_cell(f"unexpected {type(error).__name__}: {error}. Please report this with the workbook")

    return guarded


def raising(fn: Callable[..., Cells]) -> Callable[..., Cells]:
    """A cell function without its message cell: raises `SheetnetError`, for bridges that report errors their own way."""
    return fn.__wrapped__  # type: ignore[attr-defined]


# --- shared steps -------------------------------------------------------------------------

def _in_sheet_rows(data_rows: np.ndarray, target: str | None, call: Callable[[], Any]) -> Any:
    """Run ``call``; a bad cell it finds (counted among ``data_rows``) is reported at its row in the user's range."""
    try:
        return call()
    except CellError as error:
        if error.range_row is not None:
            raise
        column = target if error.column == "target" and target else error.column
        raise error.seen_at(range_row(int(data_rows[error.row - 1])), column) from None


def _rows_used(table: SheetTable, columns: list[str], skip_blanks: bool) -> np.ndarray:
    """Mask over the table's data rows: rows with every needed column filled (or all, without skipping)."""
    for name in columns:
        table.values(name)  # a missing column is named before any row is looked at
    if not skip_blanks:
        return np.ones(len(table.data_rows), dtype=bool)
    filled = np.ones(len(table.data_rows), dtype=bool)
    for name in columns:
        filled &= table.filled(name)
    return filled


def _inputs_frame(table: SheetTable, names: tuple[str, ...] | list[str], rows: np.ndarray) -> pd.DataFrame:
    for name in names:
        table.column(name)
    frame = table.frame.loc[rows, list(names)].reset_index(drop=True)
    return numeric_frame(frame)


def _check_no_identifiers(frame: pd.DataFrame) -> None:
    for name in frame.columns:
        values = frame[name]
        if values.dtype.kind == "f":
            continue  # numbers: no texts to look at
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
            raise InputError(
                f"the split has {cell_in_words(value)} in {row_label(int(row))}; each data row needs 'train' or 'holdout' (use SHEETNET.SPLIT)"
            )
        held[k] = text == "holdout"
    return held


def _options(settings: dict[str, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
    cell = {k: settings.pop(k) for k in list(settings) if k in CELL_OPTIONS}
    blank_rows = str(cell.get("blank_rows", "error")).strip().lower()
    if blank_rows not in ("error", "skip"):
        raise SettingError(
            f"setting 'blank_rows' got {cell_in_words(cell['blank_rows'])}; choose error (a blank cell is a mistake) or skip (leave such rows out)"
        )
    cell["blank_rows"] = blank_rows
    cell["numbers_in_text"] = _numbers_in_text_mode(cell.get("numbers_in_text"))
    return cell, settings


def _numbers_in_text_mode(value: Any) -> str:
    mode = "error" if value is None or is_blank(value) else str(value).strip().lower()
    if mode not in NUMBERS_IN_TEXT:
        raise SettingError(
            f"setting 'numbers_in_text' got {cell_in_words(value)}; choose error (numbers typed as text are refused), "
            "point (read 1,234.5 and 12% as numbers) or comma (read 1.234,5 as numbers)"
        )
    return mode


def _name_list(value: Any) -> list[str]:
    if value is None or is_blank(value):
        return []
    return [part.strip() for part in str(value).replace(";", ",").split(",") if part.strip()]


def _model_inputs(sheet: SheetTable, model: Model, rows: np.ndarray) -> Any:
    """The model's input columns for these rows: a float array in model order when all are numbers
    (the engine's fast path, no pandas on the way), else a DataFrame."""
    columns = [sheet.values(name) for name in model.input_names]
    if model.preparation.all_numeric and all(c.dtype.kind == "f" for c in columns):
        matrix = sheet.number_matrix(model.input_names, rows) if columns else np.empty((int(rows.sum()), 0))
        if matrix is None:
            matrix = np.column_stack([c[rows] for c in columns])
        if (np.abs(matrix) <= MAX_NUMBER).all():  # blanks (NaN) and huge numbers take the path that names the cell
            return matrix
    return _inputs_frame(sheet, model.input_names, rows)


def _scalar_metrics(metrics: dict[str, Any]) -> dict[str, float]:
    return {k: float(v) for k, v in metrics.items() if isinstance(v, float)}


def _decode(model: Any) -> tuple[Model, BlockInfo, dict[str, Any]]:
    if isinstance(model, str) and not model.strip():
        raise ModelError("no model given; pass the block SHEETNET.TRAIN returned (or its defined name)")
    # decoded models are immutable, so a block seen before (every cell the same) is not decoded again
    key = content_key(model)
    found = None if key is None else _decoded_cache.get(key)
    if found is None:
        grid = as_grid(model, "model")
        key = key or hashlib.sha256(repr(grid).encode("utf-8")).hexdigest()
        found = _decoded_cache[key] = decode_block(grid)
        while len(_decoded_cache) > TRAIN_CACHE_SIZE:
            _decoded_cache.popitem(last=False)
    decoded, info = found
    given = getattr(info, "given", None) or {}  # the arguments TRAIN was given, where the block records them
    return decoded, info, {"skip_blanks": info.blank_rows == "skip", "numbers_in_text": _numbers_in_text_mode(given.get("numbers_in_text"))}


def _numbers_for_model(sheet: SheetTable, decoded: Model, info: BlockInfo, options: dict[str, Any], with_target: bool) -> SheetTable:
    """The table with numbers typed as text in the model's numeric columns read the way TRAIN read them (or refused)."""
    columns = [spec.name for spec in decoded.preparation.inputs if isinstance(spec, NumericInput)]
    if with_target and (decoded.task == "regression" or all(isinstance(c, (int, float)) for c in decoded.classes)):
        columns.append(info.target)
    return read_numbers_in_text(sheet, [c for c in columns if c in sheet.columns], options["numbers_in_text"], PREDICT_NUMBER_TEXT_FIX)


def _fingerprint(table: SheetTable, columns: list[str], rows: np.ndarray) -> str:
    return fingerprint(table, columns, rows)  # the byte scheme (`cells.fingerprint`): number columns in one C pass


def _same_data(table: SheetTable, columns: list[str], rows: np.ndarray, info: BlockInfo) -> bool:
    return fingerprint_matches(table, columns, rows, info.fingerprint)  # in the scheme the block was written with


# --- the cell functions -------------------------------------------------------------------

@cell_function
def split(table: Any, holdout_share: Any = None, seed: Any = None, mode: Any = None) -> Cells:
    """A column as tall as the table: a header, then 'train' or 'holdout' for each data row."""
    check_ranges(table=table)
    sheet = read_sheet_table(table)
    holdout_share, seed, mode = one_value(holdout_share, "holdout share"), one_value(seed, "seed"), one_value(mode, "split mode")
    share = 0.2 if is_blank(holdout_share) else _number_setting(holdout_share, "holdout share")
    chosen_seed = 0 if is_blank(seed) else _whole_number(seed, "seed")
    text = "random" if is_blank(mode) else str(mode).strip()
    labels = None
    lowered = text.lower()
    if lowered.startswith("stratified"):
        column = text[len("stratified"):].strip(" :")
        if not column:
            raise SettingError("a stratified split needs the column to stratify by: write the mode as 'stratified grade'")
        labels = [label_in_words(v) for v in sheet.values(column).tolist()]  # blanks and 3.0 read as the sheet shows them
        lowered = "stratified"
    elif lowered not in ("random", "ordered"):
        raise SettingError(f"split mode {cell_in_words(text)} is not known; use random, ordered, or 'stratified COLUMN'")
    held = holdout_mask(len(sheet.data_rows), share, chosen_seed, lowered, labels)
    answer: Cells = [["split"]]
    answer += [[""] for _ in range(sheet.n_rows)]
    for k, row in enumerate(sheet.data_rows):
        answer[row + 1][0] = "holdout" if held[k] else "train"
    return answer


def _number_setting(value: Any, what: str) -> float:
    if isinstance(value, bool):
        raise SettingError(f"the {what} is {cell_in_words(value)}; give a number")
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise SettingError(f"the {what} is {cell_in_words(value)}; give a number") from None
    if not np.isfinite(number):
        raise SettingError(f"the {what} is {cell_in_words(value)}; give a finite number")
    return number


def _whole_number(value: Any, what: str, low: int = 0) -> int:
    number = _number_setting(value, what)
    if number != int(number) or number < low or number >= 2**63:
        raise SettingError(f"the {what} is {cell_in_words(value)}; give a whole number of {low} or more")
    return int(number)


def _cache_key(*parts: Any) -> str:
    def canonical(value: Any, depth: int) -> Any:
        if isinstance(value, np.ndarray):
            value = value.tolist()
        if isinstance(value, (list, tuple)):
            if depth > 3:  # arguments, rows, cells: a list any deeper is a list inside a cell, which as_grid names
                return repr(type(value))
            return [canonical(v, depth + 1) for v in value]
        return _canonical(value)

    return hashlib.sha256(json.dumps(canonical(list(parts), 0)).encode("utf-8")).hexdigest()


@cell_function
def train(table: Any, target: Any, hidden: Any = None, settings: Any = None, split: Any = None) -> Cells:
    """The model block: trains on the table's rows (holdout rows of the split left out)."""
    check_ranges(table=table, split=split, settings=settings)
    return cached_train_block(table, target, hidden, settings, split)


def cached_train_block(
    table: Any,
    target: Any,
    hidden: Any = None,
    settings: Any = None,
    split: Any = None,
    progress: ProgressCallback | None = None,
    source: tuple[str, float, str, int] | None = None,
) -> Cells:
    """`train_block` through TRAIN's content cache (the cell, server jobs and `service.train_model` share it): the
    same table and arguments (and recorded source) answer at once with a copy of the block trained before, with no
    progress reported."""
    parts = (table, target, hidden, settings, split) if source is None else (table, target, hidden, settings, split, list(source))
    key = content_key(*parts) or _cache_key(*parts)
    with _train_cache_lock:
        found = _train_cache.get(key)
        if found is not None:
            _train_cache.move_to_end(key)
    if found is not None:
        return [list(row) for row in found]
    block = train_block(table, target, hidden, settings, split, progress=progress, source=source)
    with _train_cache_lock:  # cell calls and jobs train in threads of their own
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
    target, hidden = one_value(target, "target"), one_value(hidden, "hidden layers")
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
    if "inner_folds" not in engine_settings and held_out_last(training, used & held):
        engine_settings["inner_folds"] = "ordered"  # a time-ordered holdout: the folds that tune the network keep the order too
    seed = _whole_number(options.get("seed", 0), "seed")
    layers = parse_hidden(hidden)
    categories = _name_list(options.get("categories"))
    readable = _numbers_for_training(sheet, inputs, target_name, categories, options["numbers_in_text"], engine_settings)
    frame = _inputs_frame(readable, inputs, training)
    _check_no_identifiers(frame)
    y = numeric_frame(readable.frame.loc[training, [target_name]])[target_name].to_numpy()

    def checked_fit() -> Model:
        _check_sizes(frame, y, layers, categories, engine_settings)
        return fit(frame, y, layers, seed, categories=categories, progress=progress, **engine_settings)

    model = _in_sheet_rows(sheet.data_rows[training], target_name, checked_fit)

    metrics: dict[str, float] = {}
    intervals: dict[str, tuple[float, float]] = {}
    conformal: Conformal | None = None
    level = read_level(options.get("interval_level"))
    holdout = used & held
    if holdout.any():
        actual = numeric_frame(readable.frame.loc[holdout, [target_name]])[target_name].to_numpy()
        holdout_frame = _inputs_frame(readable, inputs, holdout)
        metrics = _scalar_metrics(_in_sheet_rows(sheet.data_rows[holdout], target_name, lambda: score_model(model, holdout_frame, actual)))
        if holdout.sum() >= 2:
            intervals = metric_error_bars(model, holdout_frame, actual, level)
        if holdout.sum() >= rows_needed(level):  # the holdout rows are rows the network did not train on: they calibrate
            conformal = calibrate(model, holdout_frame, actual, level)
    group_column, by_group = _training_groups(sheet, options.get("group"), holdout, model, readable, inputs, target_name)
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
        given=_given_arguments(hidden, settings),
        conformal=conformal,
        metric_intervals={k: v for k, v in intervals.items() if k in metrics},
        error_bars=(level, BOOTSTRAP_RESAMPLES, BOOTSTRAP_SEED) if intervals else None,
        group_column=group_column,
        group_metrics=by_group,
    )
    return encode_block(model, info)


def _training_groups(
    sheet: SheetTable, group: Any, holdout: np.ndarray, model: Model, readable: SheetTable, inputs: list[str], target: str
) -> tuple[str | None, dict[str, dict[str, float]]]:
    """The setting group=COLUMN: metrics by that column's groups over the holdout rows, for the block and the model card."""
    if group is None or is_blank(group):
        return None, {}
    name = str(group).strip()
    sheet.column(name)
    rows = holdout & _rows_used(sheet, [name], True)
    if not rows.any():
        raise SettingError(f"the setting group={name} needs holdout rows with a group: train with a split (SHEETNET.SPLIT) that holds out rows")
    labels = _group_labels(sheet, name, rows)
    actual = numeric_frame(readable.frame.loc[rows, [target]])[target].to_numpy()
    frame = _inputs_frame(readable, inputs, rows)
    report = _in_sheet_rows(sheet.data_rows[rows], target, lambda: _group_report(model, labels, actual, frame))
    by_group = {
        str(label): {"rows": float(count), **{m: float(v) for m, v in values.items() if v is not None}}
        for label, count, values in zip(report.groups, report.rows, report.values)
    }
    return name, by_group


def _group_labels(sheet: SheetTable, name: str, rows: np.ndarray) -> list[str]:
    labels = [label_in_words(v) for v in sheet.frame.loc[rows, name]]
    if len(set(labels)) > MAX_GROUPS:
        raise InputError(
            f"column '{name}' holds {len(set(labels)):,} different values; metrics by group compare up to {MAX_GROUPS} groups: "
            "name a column of categories (such as region), or make one that bands the values"
        )
    return labels


def _group_report(decoded: Model, labels: list[str], actual: np.ndarray, frame: Any) -> Any:
    from .groups import group_metrics

    if decoded.task == "regression":
        return group_metrics("regression", labels, numbers_of("target", actual), decoded.predict(frame))
    index = decoded.target.class_indices(actual)
    probabilities = decoded.predict_proba(frame)
    decided = (probabilities[:, 1] >= decoded.threshold).astype(np.int64) if decoded.task == "binary" else probabilities.argmax(axis=1)
    return group_metrics(decoded.task, labels, index, decided)


def _given_arguments(hidden: Any, settings: Any) -> dict[str, Any]:
    """TRAIN's hidden layers and settings exactly as the user gave them, so a refresh can repeat the request."""
    def plain(value: Any) -> Any:
        if isinstance(value, np.generic):
            value = value.item()
        return value if value is None or isinstance(value, (str, int, float, bool)) else str(value)

    return {"hidden": plain(hidden), **{name: plain(value) for name, value in parse_settings(settings).items()}}


def _numbers_for_training(
    sheet: SheetTable, inputs: list[str], target: str, categories: list[str], mode: str, engine_settings: dict[str, Any]
) -> SheetTable:
    """The table with numbers typed as text read or refused (inputs listed as categories and class targets keep their text)."""
    fix = f"{TRAIN_NUMBER_TEXT_FIX}; if the column holds codes rather than amounts, add the setting categories={{column}}"
    readable = read_numbers_in_text(sheet, [c for c in inputs if c not in categories], mode, fix)
    if str(engine_settings.get("task", "auto")).strip().lower() in ("binary", "multiclass"):
        return readable
    return read_numbers_in_text(readable, [target], mode, f"{TRAIN_NUMBER_TEXT_FIX}; if the column holds classes, add the setting task=multiclass")


def held_out_last(training: np.ndarray, holdout: np.ndarray) -> bool:
    """Whether the holdout rows are the table's last rows, after every training row (an ordered split).

    >>> held_out_last(np.array([True, True, False, False]), np.array([False, False, True, True]))
    True
    >>> held_out_last(np.array([True, False, True, False]), np.array([False, True, False, True]))
    False
    """
    if not training.any() or not holdout.any():
        return False
    return int(np.flatnonzero(training)[-1]) < int(np.flatnonzero(holdout)[0])


def _check_sizes(
    frame: pd.DataFrame, y: np.ndarray, layers: tuple[int, ...] | None, categories: list[str], engine_settings: dict[str, Any]
) -> None:
    """Refuse a network or table beyond `sheetnet.limits` before `fit` allocates anything (None: fit's default layers)."""
    target = fit_target(read_target(y), resolve_settings(engine_settings)["task"])
    widths = DEFAULT_HIDDEN if layers is None else layers
    check_network_size(len(frame), planned_width(read_table(frame), categories), widths, target.outputs)


# interval: the split-conformal prediction interval (numbers); set: the conformal prediction set (classes);
# spread: the lowest and highest of the repeated networks, which shows their disagreement and is no coverage interval
PREDICT_OUTPUTS = ("value", "probabilities", "interval", "set", "spread", "flag")
NO_CALIBRATION = (
    "this model has no {what}: it was trained without enough holdout rows to calibrate one ({needed} or more at {level}); "
    "train it with a split (SHEETNET.SPLIT) that holds out rows"
)


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
    shape = range_shape(table)  # counted once: the range's limits and the answer's
    check_ranges(model=model, table=SimpleNamespace(shape=shape))
    decoded, info, options = _decode(model)
    wanted = _parse_output(one_value(output, "output"))
    check_answer_size(shape[0], 2 * len(wanted) + len(decoded.classes), "SHEETNET.PREDICT")  # an output takes at most 2 columns, or 1 a class
    sheet = read_sheet_table(table)
    sheet = _numbers_for_model(sheet, decoded, info, options, with_target=False)
    rows = _rows_used(sheet, list(decoded.input_names), options["skip_blanks"])
    frame = _model_inputs(sheet, decoded, rows)
    header, columns = _in_sheet_rows(sheet.data_rows[rows], None, lambda: _predictions(decoded, info, frame, wanted))
    answered = sheet.data_rows[rows]
    if len(answered) == sheet.n_rows:  # no blank rows: the answer rows are the columns zipped
        return [header, *([value] for value in columns[0])] if len(columns) == 1 else [header, *map(list, zip(*columns))]
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
    wants_value = "value" in wanted or not {"probabilities", "interval", "set", "spread"} & set(wanted)
    needs_probabilities = wants_value or "probabilities" in wanted or "set" in wanted
    probabilities = decoded.predict_proba(frame) if decoded.task != "regression" and needs_probabilities else None
    if probabilities is not None:
        _check_finite(decoded, frame, probabilities)
    if wants_value:
        header.append(f"predicted {info.target}")
        if probabilities is None:
            values = decoded.predict(frame)
            _check_finite(decoded, frame, values)
            columns.append(as_cells(values))
        else:
            columns.append(as_cells(decoded.classes_of(probabilities)))
    if probabilities is not None and "probabilities" in wanted:
        for j, label in enumerate(decoded.classes):
            header.append(f"P({label})")
            columns.append(as_cells(probabilities[:, j]))
    if "interval" in wanted:
        if decoded.task != "regression":
            raise SettingError("an interval is for models that predict numbers; for classes use output set (the classes the row may be)")
        conformal = _calibration(info, "prediction interval")
        values = decoded.predict(frame)
        _check_finite(decoded, frame, values)
        shown = percent_in_words(conformal.level)
        header += [f"{info.target} low ({shown} interval)", f"{info.target} high ({shown} interval)"]
        columns += [as_cells(values - conformal.quantile), as_cells(values + conformal.quantile)]
    if "set" in wanted:
        if probabilities is None:
            raise SettingError("a prediction set is for models that predict classes; for numbers use output interval")
        conformal = _calibration(info, "prediction set")
        members = prediction_sets(probabilities, conformal)
        header.append(f"{info.target} may be ({percent_in_words(conformal.level)} set)")
        columns.append([", ".join(label_in_words(c) for c, inside in zip(decoded.classes, row) if inside) or "none" for row in members])
    if "spread" in wanted:
        if len(decoded.members) < 2:
            raise SettingError("the networks' spread needs several networks; train with the setting repeats=5 (or more)")
        if decoded.task != "regression":
            raise SettingError("the networks' spread is for models that predict numbers; for classes use output probabilities or set")
        spread = decoded.predict_spread(frame)
        _check_finite(decoded, frame, np.column_stack([spread["low"], spread["high"]]))
        header += [f"{info.target} lowest network", f"{info.target} highest network"]
        columns += [as_cells(spread["low"]), as_cells(spread["high"])]
    if "flag" in wanted:
        header.append("outside training range")
        columns.append([bool(v) for v in decoded.out_of_range(frame)])
    return header, columns


def _calibration(info: BlockInfo, what: str) -> Conformal:
    conformal = getattr(info, "conformal", None)
    if conformal is None:
        level = read_level(dict(info.given).get("interval_level"))
        raise SettingError(NO_CALIBRATION.format(what=what, needed=rows_needed(level), level=percent_in_words(level)))
    return conformal


def _check_finite(decoded: Model, frame: Any, answers: np.ndarray) -> None:
    """Name the input behind a row the network cannot answer with a finite number (a blank answer would hide it)."""
    finite = np.isfinite(np.asarray(answers, dtype=np.float64)).reshape(len(answers), -1).all(axis=1)
    if finite.all():
        return
    k = int(np.argmin(finite))
    farthest: tuple[float, NumericInput, Any] | None = None
    for spec, values in zip(decoded.preparation.inputs, decoded.preparation.columns_in_order(frame)):
        if isinstance(spec, NumericInput):
            distance = abs((float(values[k]) - spec.mean) / spec.scale)
            if farthest is None or distance > farthest[0]:
                farthest = (distance, spec, values[k])
    if farthest is None:
        raise ModelError("the model gives no finite answer for one of the rows; retrain it, and report this with the workbook if it persists")
    _, spec, value = farthest
    raise BadValueError(
        spec.name, k + 1, value, "the model gives no finite answer for this row, as this value lies far outside the training rows",
        f"check the cell (the training rows held {number_in_words(spec.low)} to {number_in_words(spec.high)}), or retrain with rows that cover such values",
    )


def _scored_rows(decoded: Model, info: BlockInfo, sheet: SheetTable, split: Any, skip: bool) -> np.ndarray:
    rows = _rows_used(sheet, [*decoded.input_names, info.target], skip)
    sheet.column(info.target)
    if split is not None and not is_blank(split):
        rows &= _read_split(split, sheet)
    if not rows.any():
        raise InputError("no rows to score; check the split marks some rows 'holdout'")
    return rows


@cell_function
def score(model: Any, table: Any, split: Any = None, error_bars: Any = None, reliability: Any = None) -> Cells:
    """A two-column table of metrics, on the split's holdout rows when a split is given.

    With ``error_bars`` (a level like 90%, or TRUE for 90 %) each metric also gets a
    percentile-bootstrap interval over the scored rows and a label in words, and the
    last rows state the method, resamples and seed. With ``reliability`` (a number of
    bins, or TRUE for 10) a classifier's reliability table follows, after a blank row:
    per bin of predicted probability its rows, mean predicted probability and observed share.
    """
    check_ranges(model=model, table=table, split=split)
    decoded, info, options = _decode(model)
    error_bars = one_value(error_bars, "error bars")
    level = None if is_blank(error_bars) or error_bars is False else read_level(None if error_bars is True else error_bars, "error-bar level")
    bins = read_bins(one_value(reliability, "reliability bins"))
    raw = read_sheet_table(table)
    sheet = _numbers_for_model(raw, decoded, info, options, with_target=True)
    split_given = split is not None and not is_blank(split)
    rows = _scored_rows(decoded, info, sheet, split, options["skip_blanks"])
    actual = numeric_frame(sheet.frame.loc[rows, [info.target]])[info.target].to_numpy()
    frame = _inputs_frame(sheet, decoded.input_names, rows)
    metrics = _in_sheet_rows(sheet.data_rows[rows], info.target, lambda: score_model(decoded, frame, actual))
    answer: Cells = [["metric", "value"], ["rows", int(rows.sum())], ["rows scored", _rows_scored(decoded, info, raw, options, split_given)]]
    answer += [[name, value] for name, value in metrics.items() if isinstance(value, float)]
    if "mape" in metrics and metrics["mape"] is None:
        answer.append(["mape left out", mape_left_out_reason(numbers_of("target", actual)) or ""])
    if "roc_auc" in metrics and metrics["roc_auc"] is None:
        answer.append(["roc_auc left out", ROC_AUC_LEFT_OUT])
    for label, per in metrics.get("per_class", {}).items():
        answer += [[f"{kind} {label_in_words(label)}", per[kind]] for kind in ("precision", "recall", "f1")]
    if level is not None:
        bars = _in_sheet_rows(sheet.data_rows[rows], info.target, lambda: metric_error_bars(decoded, frame, actual, level))
        answer = _with_error_bars(answer, bars, level)
    if bins is None:
        return answer
    kind, table_rows = _in_sheet_rows(sheet.data_rows[rows], info.target, lambda: model_reliability(decoded, frame, actual, bins))
    return _with_reliability(answer, kind, table_rows, decoded)


def _with_reliability(answer: Cells, kind: str, table_rows: list[tuple[float, float, int, float, float]], model: Model) -> Cells:
    """SCORE's rows, a blank row, then the reliability table (four columns; the metrics' rows widened to match)."""
    width = max(4, len(answer[0]))
    if kind == "positive":
        title, observed = f"predicted P({label_in_words(model.classes[1])})", f"share {label_in_words(model.classes[1])}"
    else:
        title, observed = "probability of the picked class", "share picked right"
    part: Cells = [["reliability: " + title, "rows", "mean predicted", observed]]
    part += [[f"{low:.3g} to {high:.3g}", count, mean, share] for low, high, count, mean, share in table_rows]
    rows: list[list[Any]] = [*answer, [""], *part]
    return [row + [""] * (width - len(row)) for row in rows]


def _with_error_bars(answer: Cells, bars: dict[str, tuple[float, float]], level: float) -> Cells:
    """SCORE's rows with a low, a high and a label in words; the method stated below."""
    shown = percent_in_words(level)
    wide: Cells = [["metric", "value", f"low ({shown})", f"high ({shown})", "in words"]]
    for name, value, *_ in answer[1:]:
        low, high = bars.get(str(name), ("", ""))
        words = f"{metric_label(str(name))} {value_in_words(str(name), value)}" if isinstance(value, float) else ""
        if words and str(name) in bars:
            words += f" ({value_in_words(str(name), low)} to {value_in_words(str(name), high)})"
        wide.append([name, value, low, high, words])
    wide.append(["error bars", f"{BOOTSTRAP_METHOD}, {shown} level, {BOOTSTRAP_RESAMPLES} resamples, seed {BOOTSTRAP_SEED}", "", "", ""])
    return wide


@cell_function
def groups(model: Any, table: Any, group: Any, split: Any = None) -> Cells:
    """Metrics by group: one row per value of the group column, then the largest gap of each metric."""
    check_ranges(model=model, table=table, split=split)
    from .groups import GAP_CAUTION

    decoded, info, options = _decode(model)
    group = one_value(group, "group column")
    if is_blank(group):
        raise InputError("no group column given; name the column whose groups to compare, such as region")
    raw = read_sheet_table(table)
    sheet = _numbers_for_model(raw, decoded, info, options, with_target=True)
    group_name = str(group).strip()
    sheet.column(group_name)
    rows = _scored_rows(decoded, info, sheet, split, options["skip_blanks"]) & _rows_used(sheet, [group_name], True)
    if not rows.any():
        raise InputError(f"no rows with a group in column '{group_name}'; fill the column or name another")
    labels = _group_labels(sheet, group_name, rows)
    actual = numeric_frame(sheet.frame.loc[rows, [info.target]])[info.target].to_numpy()
    frame = _inputs_frame(sheet, decoded.input_names, rows)
    report = _in_sheet_rows(sheet.data_rows[rows], info.target, lambda: _group_report(decoded, labels, actual, frame))
    header: list[Any] = [group_name, "rows", *(metric_label(m) for m in report.metrics)]
    answer: Cells = [header]
    for label, count, values in zip(report.groups, report.rows, report.values):
        answer.append([label, count, *("" if values[m] is None else values[m] for m in report.metrics)])
    gaps = {gap.metric: gap for gap in report.gaps}
    answer.append(["largest gap", "", *(gaps[m].size if m in gaps else "" for m in report.metrics)])
    answer.append(["between", "", *(f"{gaps[m].highest} and {gaps[m].lowest}" if m in gaps else "" for m in report.metrics)])
    if decoded.task == "binary":
        answer.append(["positive class", label_in_words(decoded.classes[1]), *[""] * len(report.metrics)])
    answer.append(["caution", GAP_CAUTION, *[""] * len(report.metrics)])
    return answer


ROWS_SCORED_HOLDOUT = "holdout rows"
ROWS_SCORED_TRAINING = "training rows: optimistic, score a holdout instead"
ROWS_SCORED_UNSPLIT = "every row given, with no split: optimistic if the model was trained on them; score a holdout instead"


def _rows_scored(decoded: Model, info: BlockInfo, raw: SheetTable, options: dict[str, Any], split_given: bool) -> str:
    """Which rows SCORE measured, in words: a score on training rows flatters the model, so it says so."""
    columns = [*decoded.input_names, info.target]
    same_table = _same_data(raw, columns, _rows_used(raw, columns, options["skip_blanks"]), info)
    if split_given:
        # a model trained on every row of this table has no holdout rows, whatever the split says now
        return ROWS_SCORED_TRAINING if same_table and info.holdout_rows == 0 else ROWS_SCORED_HOLDOUT
    return ROWS_SCORED_TRAINING if same_table else ROWS_SCORED_UNSPLIT


@cell_function
def explain(model: Any, table: Any) -> Cells:
    """Permutation importance of each input on the table's rows, largest first."""
    check_ranges(model=model, table=table)
    decoded, info, options = _decode(model)
    sheet = _numbers_for_model(read_sheet_table(table), decoded, info, options, with_target=True)
    rows = _scored_rows(decoded, info, sheet, None, options["skip_blanks"])
    actual = numeric_frame(sheet.frame.loc[rows, [info.target]])[info.target].to_numpy()
    frame = _inputs_frame(sheet, decoded.input_names, rows)
    found = _in_sheet_rows(sheet.data_rows[rows], info.target, lambda: permutation_importance(decoded, frame, actual, repeats=5, seed=0))
    loss = "RMSE" if decoded.task == "regression" else "log-loss"
    return [["input", f"{loss} increase when shuffled", "spread"]] + [[name, mean, spread] for name, mean, spread in found]


def data_unchanged(model: Any, table: Any) -> bool:
    """Whether the columns and rows a model was trained on read the same in this table (its fingerprint).
    Raises `SheetnetError` (a missing column, a damaged block)."""
    decoded, info, options = _decode(model)
    sheet = read_sheet_table(table)
    columns = [*decoded.input_names, info.target]
    for name in columns:
        sheet.values(name)  # a missing column named (no DataFrame built for it)
    used = _rows_used(sheet, columns, options["skip_blanks"])
    return _same_data(sheet, columns, used, info)


@cell_function
def about(model: Any, table: Any = None) -> Cells:
    """A two-column summary of the model; given the table, whether its data changed since training."""
    check_ranges(model=model, table=table)
    decoded, info, options = _decode(model)
    member = decoded.members[0]
    rows: list[list[Any]] = [
        ["target", info.target],
        ["task", decoded.task],
        ["task chosen", task_choice_in_words(decoded.task, str(decoded.settings.get("task", "auto")), decoded.classes)],
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
        rows.append(["classes", labels_in_words(decoded.classes, most=len(decoded.classes))])
    intervals = getattr(info, "metric_intervals", None) or {}
    bars = getattr(info, "error_bars", None)
    for name, value in info.holdout_metrics.items():
        rows.append([f"holdout {name}", value])
        if name in intervals and bars is not None:
            low, high = intervals[name]
            rows.append([f"holdout {name} {percent_in_words(bars[0])} interval", f"{value_in_words(name, low)} to {value_in_words(name, high)}"])
    if bars is not None:
        rows.append(["holdout error bars", f"{BOOTSTRAP_METHOD}, {bars[1]} resamples, seed {bars[2]}"])
    conformal = getattr(info, "conformal", None)
    if conformal is not None:
        rows.append(["prediction interval" if decoded.task == "regression" else "prediction set", _conformal_in_words(decoded, conformal)])
    if table is not None and not is_blank(table):
        same = data_unchanged(model, table)
        rows.append(["data since training", "unchanged" if same else "changed: retrain to use the new rows"])
    from .signing import signature_in_words  # who signed it; whom you trust is sheetnet check's to say

    rows.append(["signature", signature_in_words(as_grid(model, "model"))])
    rows.append(["caution", CAUTION])
    return [["about", "value"]] + rows


def _conformal_in_words(decoded: Model, conformal: Conformal) -> str:
    level, rows = percent_in_words(conformal.level), conformal.rows
    if decoded.task == "regression":
        return f"predicted value ± {conformal.quantile:.4g}, covering {level} of new rows (split-conformal on {rows} holdout rows)"
    return (
        f"every class with probability {1 - conformal.quantile:.3g} or more, holding the true class for {level} of new rows "
        f"(split-conformal on {rows} holdout rows)"
    )


@cell_function
def lags(series: Any, lags: Any = None) -> Cells:
    """Lagged copies of a one-column series (with its header), as input columns for time-series models.

    ``lags`` is a count k (lags 1..k) or a list like ``1,2,52``. The first rows,
    which have no history yet, are blank: train with the setting blank_rows=skip.
    """
    check_ranges(series=series)
    name, values = column_of(series, "series", len(as_grid(series, "series")) - 1)
    steps = _lag_steps(one_value(lags, "lags"), len(values))
    check_answer_size(len(values) + 1, len(steps), "SHEETNET.LAGS")
    numbers: list[float | None] = []
    for i, value in enumerate(values):
        if is_blank(value):
            numbers.append(None)
        elif isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.number)):
            raise BadValueError(name, i + 1, value, "not a number in a numeric series", "type a number or clear the cell", range_row(i))
        elif not np.isfinite(float(value)) or abs(float(value)) > MAX_NUMBER:
            raise BadValueError(name, i + 1, value, "the number is infinite or too large", "type a finite number or clear the cell", range_row(i))
        else:
            numbers.append(float(value))
    answer: Cells = [[f"{name} lag {k}" for k in steps]]
    for i in range(len(numbers)):
        answer.append([numbers[i - k] if i - k >= 0 and numbers[i - k] is not None else "" for k in steps])
    return answer


def _lag_steps(lags: Any, length: int) -> list[int]:
    """The lags asked for, each shorter than the series (a longer one would make a column of blanks)."""
    fix = "give a count like 4 (lags 1 to 4) or a list like 1,2,12"
    if is_blank(lags):
        steps = [1]
    elif isinstance(lags, (int, float, np.number)) and not isinstance(lags, bool):
        count = _whole_number(lags, "number of lags", low=1)
        _refuse_long_lag(count, length)  # before the list of lags is made: a count may be huge
        check_lag_count(count)
        steps = list(range(1, count + 1))
    else:
        try:
            steps = [int(p) for p in str(lags).replace(";", ",").split(",") if p.strip()]
        except ValueError:
            raise SettingError(f"the lags {cell_in_words(lags)} are not whole numbers; {fix}") from None
        if not steps or min(steps) < 1:
            raise SettingError(f"every lag must be 1 or more; {fix}")
        check_lag_count(len(steps))
    _refuse_long_lag(max(steps), length)
    return steps


def _refuse_long_lag(longest: int, length: int) -> None:
    if longest >= length:
        raise SettingError(
            f"a lag of {longest:,} is as long as the series or longer (it has {length} values below its header), so its column would be blank; "
            f"use lags up to {length - 1}, or select a longer series"
        )


@cell_function
def search(table: Any, target: Any, candidates: Any = None, settings: Any = None, folds: Any = None) -> Cells:
    """Candidate networks ranked by cross-validated score, and which one to use (see `sheetnet.search_cells`)."""
    check_ranges(table=table, candidates=candidates, settings=settings)
    from .search_cells import search_table

    return search_table(table, target, candidates, settings, folds)
