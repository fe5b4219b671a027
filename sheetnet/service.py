"""How a model lives in a workbook, decided once for every door.

The command line on files, the xlwings macros, the local server with the task
pane, and the Calc extension all ask this module: which sheet and which
defined names a model gets, where its block and native-formula constants go
(as `Placements`), what "auto" holdout mode means, how a seed is used, and how
a stored model is refreshed or checked. The doors only read ranges and apply
placements. Nothing here touches a file.

Names: model names and sheet names are compared case-insensitively, as
spreadsheets compare them. A model's hidden sheet is ``sheetnet_NAME``; a name
too long for a sheet title (31 characters) gets a stable short form, its
first characters plus ``~`` and six hex digits of the name's SHA-256, so two
long names never share a sheet.
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from typing import Any, Callable, Iterable

from .block import WIDTH, decode_block
from .cells import parse_settings
from .errors import InputError, SettingError, SheetnetError
from .formulas import formula_constants
from .placements import OWNED_MARKS, CellBlock, ColumnWidth, FormulaBlock, NamePlacement, SheetPlan, Shown, block_formats, quote_sheet
from .placements import Placements as Placements  # re-exported: doors build placements through the service
from .placements import cell_block as cell_block
from .placements import column_letters as column_letters
from .placements import not_ours_message as not_ours_message
from .placements import same_title as same_title
from .stopping import ProgressCallback

MODEL_SHEET_PREFIX = "sheetnet_"
RESULTS_SHEET_PREFIX = "sn "
SHEET_TITLE_LIMIT = 31  # characters, a spreadsheet's limit for a sheet name
CONSTANTS_COLUMN = WIDTH + 2  # native-formula constants start two columns right of the block
OWNED_MARK = OWNED_MARKS[1]  # first cell of every visible sheet sheetnet writes
WIDEST_COLUMN = 48  # characters; a longer text runs on into the empty cells to its right
NARROWEST_COLUMN = 6
NAME_PATTERN = re.compile(r"^[A-Za-z_][A-Za-z0-9_.]{0,200}$")
ADDRESS_LIKE = re.compile(r"^([A-Za-z]{1,3}[0-9]+|[Rr][0-9]*[Cc]?[0-9]*|[Cc][0-9]*)$")
# what follows a model's prefix in its constants' names (see `formulas.formula_constants`)
CONSTANT_SUFFIX = re.compile(r"_(m\d+_(W\d+n|W\d+c\d+|W\d+|b\d+)|cats\d+|target|interval|classes|threshold)$", re.IGNORECASE)


def check_model_name(name: str) -> str:
    """The name itself, or an `InputError` saying what a model name may be."""
    if not isinstance(name, str) or not NAME_PATTERN.match(name) or ADDRESS_LIKE.match(name):
        raise InputError(
            f"'{name}' cannot be a model name; use letters, digits, '_' and '.', start with a letter, "
            "and avoid names that look like cell addresses (such as AB12)"
        )
    return name


def _sheet_title(prefix: str, name: str) -> str:
    full = prefix + name
    if len(full) <= SHEET_TITLE_LIMIT:
        return full
    digest = hashlib.sha256(name.casefold().encode("utf-8")).hexdigest()[:6]
    return f"{prefix}{name[:SHEET_TITLE_LIMIT - len(prefix) - 7]}~{digest}"


def model_sheet_name(name: str) -> str:
    """The very hidden sheet holding a model's block and constants.

    >>> model_sheet_name("grades")
    'sheetnet_grades'
    """
    return _sheet_title(MODEL_SHEET_PREFIX, name)


def results_sheet_name(name: str, kind: str = "") -> str:
    """A visible sheet of ours: ``sn NAME`` (training results), ``sn predict NAME``, ``sn formulas NAME``."""
    return _sheet_title(RESULTS_SHEET_PREFIX + (f"{kind} " if kind else ""), name)


def constant_owner(defined_name: str) -> str | None:
    """The model (case-folded) whose native-formula constant this defined name is, if any."""
    if not defined_name.lower().startswith("snf_"):
        return None
    match = CONSTANT_SUFFIX.search(defined_name)
    if match is None:
        return None
    return defined_name[4:match.start()].casefold() or None


def names_of_model(name: str, existing_names: Iterable[str]) -> list[str]:
    """The workbook's defined names that belong to a model: its own and its constants'."""
    folded = name.casefold()
    return [n for n in existing_names if n.casefold() == folded or constant_owner(n) == folded]


def card_sheet_name(name: str) -> str:
    """The visible sheet holding a model's card (`sheetnet.model_card`): ``sn card NAME``."""
    return results_sheet_name(name, "card")


def model_placements(name: str, block: list[list[Any]], existing_names: Iterable[str] = ()) -> Placements:
    """Everything a stored model writes: its very hidden sheet with the block at A1 and the
    native-formula constants from column K, the defined name of the block, one name per constant,
    and its model card on the visible sheet ``sn card NAME`` (our mark in A1, the card from A2).
    ``existing_names`` are the workbook's defined names now (the model's old ones are dropped)."""
    from .model_card import model_card

    check_model_name(name)
    model, info = decode_block(block)
    sheet = model_sheet_name(name)
    cells: list[CellBlock] = [cell_block(sheet, 1, 1, block)]
    names = [NamePlacement(name, sheet, 1, 1, len(block), WIDTH)]
    row = 1
    for constant in formula_constants(model, name, info.conformal):
        height, width = constant.shape
        cells.append(cell_block(sheet, row, CONSTANTS_COLUMN, constant.values))
        names.append(NamePlacement(constant.name, sheet, row, CONSTANTS_COLUMN, row + height - 1, CONSTANTS_COLUMN + width - 1))
        row += height + 1
    card = card_sheet_name(name)
    rows = model_card(name, block)
    cells += [cell_block(card, 1, 1, [[OWNED_MARK]]), cell_block(card, 2, 1, rows)]
    return Placements(
        drop_names=tuple(names_of_model(name, existing_names)),
        drop_sheets=(sheet, card),
        sheets=(SheetPlan(sheet, "veryHidden"), SheetPlan(card, "visible")),
        cells=tuple(cells),
        names=tuple(names),
        formats=block_formats(card, 2, 1, rows),
        widths=column_widths(card, [(2, 1, rows)]),
    )


def removal_placements(name: str, existing_names: Iterable[str]) -> Placements:
    """What removing a stored model drops: its names, its hidden sheet and its card."""
    return Placements(drop_names=tuple(names_of_model(name, existing_names)), drop_sheets=(model_sheet_name(name), card_sheet_name(name)))


# --- visible sheets of ours and native formulas -------------------------------------------

def check_owned_sheet(title: str, first_cell: Any, exists: bool | None = None) -> None:
    """A sheet named ``title`` may be replaced only if sheetnet wrote it (its A1 holds one of
    `placements.OWNED_MARKS`); ``first_cell`` is that sheet's A1 now. ``exists`` says whether there is
    such a sheet (by default: when ``first_cell`` is not None). The message is the one every door gives."""
    if (first_cell is not None if exists is None else exists) and first_cell not in OWNED_MARKS:
        raise InputError(not_ours_message(title))


def column_widths(title: str, blocks: Iterable[tuple[int, int, list[list[Any]]]]) -> tuple[ColumnWidth, ...]:
    """Widths that show each column's headers and values: its longest text up to `WIDEST_COLUMN`
    characters, numbers as their format shows them. Longer texts, and a row's only text (a title or
    a caption), run on into the empty cells to their right, so they do not widen a column."""
    widest: dict[int, int] = {}
    for _top, left, rows in blocks:
        for row in rows:
            if sum(v is not None and v != "" for v in row) <= 1:
                continue
            for j, value in enumerate(row):
                shown = _shown_length(value)
                if shown <= WIDEST_COLUMN:
                    widest[left + j] = max(widest.get(left + j, NARROWEST_COLUMN), shown)
    return tuple(ColumnWidth(title, column, float(width + 2)) for column, width in sorted(widest.items()))


def _shown_length(value: Any) -> int:
    if isinstance(value, Shown):
        return 8
    if isinstance(value, bool) or value is None:
        return 5 if value is not None else 0
    if isinstance(value, (int, float)):
        return min(len(f"{value:.10g}"), 12)
    return len(str(value))


def results_placements(title: str, blocks: Iterable[tuple[int, int, list[list[Any]]]]) -> Placements:
    """A visible sheet of ours, made afresh: our mark in A1, then each (top, left, rows) block; a
    `Shown` value is written as its number with its number format; columns as wide as `column_widths`."""
    blocks = list(blocks)
    cells = [cell_block(title, 1, 1, [[OWNED_MARK]])] + [cell_block(title, top, left, rows) for top, left, rows in blocks]
    formats = tuple(f for top, left, rows in blocks for f in block_formats(title, top, left, rows))
    return Placements(
        drop_sheets=(title,), sheets=(SheetPlan(title, "visible"),), cells=tuple(cells), formats=formats, widths=column_widths(title, blocks)
    )


def native_formula_placements(
    name: str, block: list[list[Any]], header: list[Any], data_rows: list[int], source: tuple[str, int, int],
    to: tuple[str, int, int], output: str = "value",
) -> tuple[Placements, int]:
    """Titles and one native formula per output cell for each data row of a table.

    ``header`` is the table's first row; ``data_rows`` the offsets below it of rows holding data;
    ``source`` (sheet, first column, header row) locates the table; ``to`` (sheet, top, left) the
    first title cell. Returns the placements and the number of rows written.
    """
    from .formulas import native_formula

    model, info = decode_block(block)
    names = [str(v).strip() if v is not None else "" for v in header]
    missing = [n for n in model.input_names if n not in names]
    if missing:
        raise InputError(f"the table has no column named {', '.join(repr(m) for m in missing)}; the model needs {', '.join(model.input_names)}")
    if output == "probabilities" and model.task != "regression":
        titles = [f"native P({c})" for c in model.classes]
    elif output == "interval":
        if info.conformal is None or model.task != "regression":
            raise InputError("this model has no prediction interval (it needs a regression model trained with holdout rows); write output value")
        shown = f"{info.conformal.level * 100:.3g} %"
        titles = [f"native {info.target} low ({shown} interval)", f"native {info.target} high ({shown} interval)"]
    else:
        titles = [f"native {'class' if output == 'class' else 'predicted'} {info.target}"]
    sheet, first_column, header_row = source
    to_sheet, top, left = to
    columns = {n: column_letters(first_column + names.index(n)) for n in model.input_names}
    quoted = quote_sheet(sheet)
    formulas: list[FormulaBlock] = []
    for offset in data_rows:
        refs = {n: f"{quoted}!${col}{header_row + offset}" for n, col in columns.items()}
        row = tuple(native_formula(model, name, refs, output, j) for j in range(len(titles)))
        formulas.append(FormulaBlock(to_sheet, top + offset, left, (row,)))
    return Placements(cells=(cell_block(to_sheet, top, left, [titles]),), formulas=tuple(formulas)), len(data_rows)


# --- training from a range, and refreshing ------------------------------------------------

HOLDOUT_MODES = ("auto", "random", "stratified", "ordered")
DEFAULT_HIDDEN = ""  # blank at every door: fit's default, one layer of 16 (16, 4 or none as a small table's folds prefer)
DEFAULT_HOLDOUT = 0.2


@dataclass(frozen=True)
class TrainRequest:
    """One training request as every door receives it.

    ``seed`` seeds both the holdout split and the training; ``mode`` is one of `HOLDOUT_MODES`
    (auto: stratified by the target when it is learned as classes, else random; stratified
    means stratified by the target); ``address`` is where the table lives, recorded in the block
    so the model can be refreshed from it."""

    table: list[list[Any]]
    target: str
    hidden: Any = DEFAULT_HIDDEN
    settings: Any = None
    holdout: float = DEFAULT_HOLDOUT
    mode: str = "auto"
    seed: int | None = None  # None: the settings' seed, else 0
    address: str | None = None


@dataclass(frozen=True)
class Trained:
    block: list[list[Any]]
    split: list[list[Any]] | None  # the split column (header first), when rows were held out


def _seeded(settings: Any, seed: int | None) -> tuple[int, list[list[Any]]]:
    """One seed for the split and the training: the door's seed, else the settings' seed, else 0."""
    given = parse_settings(settings)
    written = given.get("seed")
    if written is not None and seed is not None and _number_or_none(written) != seed:
        raise SettingError(f"the seed is given twice ({seed} and {written}); give it once")
    chosen = seed if seed is not None else (0 if written is None else _whole_seed(written))
    given["seed"] = chosen
    return chosen, [[name, value] for name, value in given.items()]


def _whole_seed(value: Any) -> int:
    number = _number_or_none(value)
    if number is None or not number.is_integer() or number < 0:
        raise SettingError(f"the seed is {value}; give a whole number of 0 or more")
    return int(number)


def _number_or_none(value: Any) -> float | None:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if number == number and abs(number) != float("inf") else None


def split_mode(table: list[list[Any]], target: str, mode: str, settings: Any) -> str:
    """The split mode SPLIT is called with: `HOLDOUT_MODES` resolved against the table's target."""
    from .cells import numeric_frame, read_sheet_table
    from .evaluation import auto_split_mode

    if mode not in HOLDOUT_MODES:
        raise SettingError(f"holdout mode '{mode}' is not known; choose one of: {', '.join(HOLDOUT_MODES)}")
    if mode == "auto":
        sheet = read_sheet_table(table)
        values = numeric_frame(sheet.frame[[sheet.column(target).name]])[target].to_numpy()
        task = str(parse_settings(settings).get("task") or "auto").strip().lower()
        try:
            mode = auto_split_mode(values, task if task in ("regression", "binary", "multiclass") else "auto")
        except SheetnetError:
            mode = "random"  # the target is unusable as it is: training names the bad cell
    return f"stratified {target}" if mode == "stratified" else mode


def train_model(request: TrainRequest, progress: ProgressCallback | None = None) -> Trained:
    """Split (when ``holdout`` > 0) and train, exactly as every door does it; a request trained before in this
    process (the server's, for the task pane and Calc) answers from TRAIN's cache."""
    from . import functions

    seed, settings = _seeded(request.settings, request.seed)
    split = None
    if request.holdout > 0:
        mode = split_mode(request.table, request.target, request.mode, settings)
        split = functions.raising(functions.split)(request.table, request.holdout, seed, mode)
    source = None if request.address is None else (request.address, float(request.holdout), request.mode, seed)
    block = functions.cached_train_block(request.table, request.target, request.hidden, settings, split, progress, source=source)
    return Trained(block, split)


def retrain_request(block: list[list[Any]], table: list[list[Any]]) -> TrainRequest:
    """The request that trained a stored model, over the table as it is now: the settings as the
    user gave them (not as resolved), the same hidden layers, holdout, mode and seed."""
    model, info = decode_block(block)
    if info.source is None:
        raise InputError("this model does not record the range it was trained from, so it cannot be refreshed; train it from a workbook range")
    address, holdout, mode, seed = info.source
    given = dict(info.given)
    if given:
        hidden = given.pop("hidden", DEFAULT_HIDDEN)
        settings = [[k, v] for k, v in given.items() if k != "seed"]
    else:  # a format-1 block: rebuild the request from the settings as used (its mode was recorded resolved)
        hidden = ",".join(map(str, model.hidden)) or "0"
        settings = [[k, v] for k, v in model.settings.items() if v is not None]
        settings += [["inputs", ", ".join(model.input_names)], ["blank_rows", info.blank_rows]]
        categories = [spec.name for spec in model.preparation.inputs if not hasattr(spec, "mean")]
        if categories:
            settings.append(["categories", ", ".join(categories)])
    return TrainRequest(table, info.target, hidden, settings, holdout, mode if mode in HOLDOUT_MODES else "auto", seed, address)


@dataclass(frozen=True)
class RefreshOutcome:
    name: str
    state: str  # retrained, stale (a dry run), unchanged, no-source, failed
    message: str = ""
    trained: Trained | None = None
    table: list[list[Any]] | None = None  # the source range as it was read, when retrained


def refresh_model(name: str, block: list[list[Any]], read_table: Callable[[str], list[list[Any]]], dry_run: bool = False) -> RefreshOutcome:
    """Retrain a stored model when its source range changed since training; the door stores the new block."""
    from . import functions

    try:
        _, info = decode_block(block)
        if info.source is None:
            return RefreshOutcome(name, "no-source", "it does not record the range it was trained from")
        table = read_table(info.source[0])
        if functions.data_unchanged(block, table):
            return RefreshOutcome(name, "unchanged")
        if dry_run:
            return RefreshOutcome(name, "stale", f"its data in {info.source[0]} changed since training")
        return RefreshOutcome(name, "retrained", f"from {info.source[0]}", train_model(retrain_request(block, table)), table)
    except SheetnetError as error:
        return RefreshOutcome(name, "failed", str(error))


CAUTION = (
    "A model is a decision aid, not a decision. Where its output affects people "
    "(credit, hiring, medical or safety decisions), check it for bias across groups, "
    "keep a person accountable for each decision, and follow local law and licensed practice."
)


def training_results(
    name: str, address: str, table: list[list[Any]], trained: Trained, answer: list[list[Any]], about: list[list[Any]]
) -> list[tuple[int, int, list[list[Any]]]]:
    """The blocks of a model's results sheet: a caption, per table row its split, actual and predicted
    value (from A4), and the model's summary (from G4)."""
    _, info = decode_block(trained.block)
    split = trained.split if trained.split is not None else [["split"]] + [["train"] for _ in answer[1:]]
    target_index = [str(c).strip() for c in table[0]].index(info.target)
    actual = [table[i + 1][target_index] for i in range(len(answer) - 1)]
    answer_format = value_format(actual + [v for row in answer[1:] for v in row])
    rows = [[i + 2, split[i + 1][0], _shown(actual[i], answer_format), *(_shown(v, answer_format) for v in answer[i + 1])] for i in range(len(answer) - 1)]
    caption = f"model {name}: {info.target} predicted from {address}. {CAUTION}"
    return [(2, 1, [[caption]]), (4, 1, [["table row", split[0][0], f"actual {info.target}", *answer[0]], *rows]), (4, 7, about_shown(about))]


def value_format(values: Iterable[Any]) -> str:
    """The number format of predicted and actual values: whole numbers (class labels) as such, else
    about four significant digits at the values' typical size (the median of their sizes), at most four decimals."""
    import math

    numbers = [float(v) for v in values if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(float(v))]
    if numbers and all(v.is_integer() for v in numbers):
        return "integer"
    sizes = sorted(abs(v) for v in numbers if v != 0)
    if not sizes:
        return "decimal2"
    decimals = min(4, max(0, 3 - math.floor(math.log10(sizes[len(sizes) // 2]))))
    return "integer" if decimals == 0 else f"decimal{decimals}"


def predictions_shown(answer: list[list[Any]]) -> list[list[Any]]:
    """PREDICT's answer (a header row, then rows) with its numbers in number formats: probabilities
    (``P(...)`` columns) at three decimals, every other column of numbers as `value_format` chooses."""
    if len(answer) < 2:
        return answer
    formats = []
    for j, title in enumerate(answer[0]):
        column = [row[j] for row in answer[1:] if j < len(row)]
        formats.append("decimal3" if str(title).startswith("P(") else value_format(column))
    return [answer[0]] + [[_shown(v, formats[j]) for j, v in enumerate(row)] for row in answer[1:]]


def _shown(value: Any, name: str) -> Any:
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return Shown(value, name)
    return value


def about_shown(about: list[list[Any]]) -> list[list[Any]]:
    """ABOUT's rows with each holdout metric shown in its number format (shares as percentages)."""
    from .labels import METRIC_LABELS, number_format

    shown = []
    for row in about:
        key = str(row[0]).removeprefix("holdout ")
        if str(row[0]).startswith("holdout ") and key in METRIC_LABELS and isinstance(row[1], (int, float)):
            row = [row[0], Shown(row[1], number_format(key)), *row[2:]]
        shown.append(row)
    return shown


def refresh_summary(outcomes: Iterable[RefreshOutcome]) -> str:
    """One line for a status bar or a task pane: what each stored model's refresh did."""
    groups: dict[str, list[str]] = {}
    for outcome in outcomes:
        groups.setdefault(outcome.state, []).append(outcome.name + (f" ({outcome.message})" if outcome.state == "failed" else ""))
    if not groups:
        return "sheetnet: the workbook has no stored models"
    words = {"retrained": "retrained", "stale": "stale", "unchanged": "unchanged", "no-source": "not from a known range, left as they are",
             "failed": "FAILED"}
    return "sheetnet: " + "; ".join(f"{words[state]}: {', '.join(names)}" for state, names in groups.items())
