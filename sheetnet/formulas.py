"""Native spreadsheet formulas that compute a model's predictions with no Python.

Pure text building, no I/O. `formula_constants` lays a model's weights and
preparation constants out as named rectangular ranges; `native_formula`
writes one formula per output cell that reads them through those
workbook-level names, so retraining a model into the same names updates
every native prediction without rewriting a formula.

Only functions that Excel 2010 and later and LibreOffice 7.4 and later both
evaluate are used (`ALLOWED_FUNCTIONS`). Each formula is entered as a single-cell array formula (so MMULT and the
element-wise arithmetic work the same everywhere); no LET, LAMBDA, SEQUENCE
or spilled arrays.

The first layer reads the input cells one by one, so the table's columns may
be in any order: ``b1' + x_1 * W1'[1, :] + ... `` with the input scaling
folded into ``W1'`` and ``b1'``; each category input adds the row of its
category.

How a cell finds its category. The engine turns a cell into a category key
with `preparation.category_text`: text loses the whitespace at its ends, a
whole number reads without decimals (``3.0`` is ``'3'``), any other number as
Python writes it (``2.5``, ``1e-07``), TRUE and FALSE as those words; blanks
and error values are refused. Number-to-text conversion differs between
spreadsheet engines (digits, decimal separator), so the formula never turns
numbers into text. Instead a ``cats<i>`` constant is one row
(`category_lookup`): every key as a spreadsheet's TRIM leaves a text (runs of
inner spaces made one), always written as text so ``'=1+1'`` or ``'3'`` stay
texts; then, for each key the engine reads from a number (``'3'`` from 3,
``'2.5'`` from 2.5; `category_number`), that number. ``W1c<i>`` holds the
first-layer row of each of those cells' categories, so a key with a number
has its row twice.

The formula turns the cell into something comparable: a logical becomes the
word TRUE or FALSE (only where a key could match a logical), a number stays a number (a number never equals a text),
a text is TRIMmed; ``MATCH(1, --(that = cats), 0)`` finds the cell, and
``INDEX`` takes its row of ``W1c``. No match (a category the model never saw,
a blank, an error value) gives #N/A, where the engine refuses the row. (The
error travels on through MMULT and MATCH, which LibreOffice turns into
#VALUE! in places; the whole formula is inside ``IFERROR(..., NA())`` so every
refused row shows #N/A in every engine.)

Numeric inputs: the engine refuses blanks, text and error values there,
while a spreadsheet reads a blank as 0; so the whole formula is
``IF(COUNT(x_1, ..., x_n)<n, NA(), ...)`` over the numeric input cells, and
any cell that is not a number gives #N/A. (Excel does not count TRUE and
FALSE, which the engine reads as 1 and 0, so those give #N/A there; a date
is a number to a spreadsheet but refused by the engine.)

Limits, because a spreadsheet compares its own way: texts compare ignoring
case, TRIM shrinks inner runs of spaces, and numbers compare equal to about
15 significant digits. Keys that collide so are all made unmatchable (a
leading space, which no TRIMmed text has; no number cell), so a cell
reading as one of them gives #N/A instead of a wrong category; a cell
differing from a known category only in case or inner spaces reads as it.
TRIM keeps tabs, line breaks and non-breaking spaces at a text's ends (the
engine strips them), so such cells give #N/A. A date is a number to a
spreadsheet, so it never matches the text the engine makes of a date.
"""

from __future__ import annotations

import math
import re
from collections import Counter
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .cell_text import cell_in_words
from .errors import ModelError
from .model import Model
from .network import unpack
from .preparation import CategoryInput, NumericInput, category_text
from .uncertainty import Conformal

FORMULA_LIMIT = 8192  # characters, Excel's limit for one formula
OUTPUTS = ("value", "class", "probabilities", "interval")  # interval: column 0 the low end, 1 the high end
ALLOWED_FUNCTIONS = frozenset(
    {"MMULT", "INDEX", "TANH", "EXP", "ABS", "SUM", "MAX", "MATCH", "IF", "NA", "ISLOGICAL", "ISNUMBER", "TRIM", "COUNT", "IFERROR"}
)


class FormulaError(ModelError):
    """A model cannot be written as native formulas as asked."""


@dataclass(frozen=True)
class Constant:
    """A named range of numbers (or texts) the formulas read."""

    name: str  # workbook-level defined name
    values: tuple[tuple[float | str, ...], ...]  # rows of cells

    @property
    def shape(self) -> tuple[int, int]:
        return len(self.values), len(self.values[0])


def name_prefix(model_name: str) -> str:
    """Our prefix for a model's formula names: never a cell address, never a user's name."""
    return f"snf_{model_name}_"


def category_number(key: str) -> float | None:
    """The number a cell holds when the engine reads it as the category ``key``, if any.

    >>> category_number("3"), category_number("2.5"), category_number("3.0"), category_number("north")
    (3.0, 2.5, None, None)
    """
    try:
        number = float(key)
    except ValueError:
        return None
    if not math.isfinite(number) or category_text(number) != key:
        return None  # '3.0', '007', '1e3', '3_000' and 'nan' are texts only: no number reads as them
    return number


def category_lookup(categories: Sequence[str]) -> tuple[tuple[float | str, ...], tuple[int, ...]]:
    """The one row of a ``cats<i>`` constant, and the category each of its cells stands for.

    First every key as a spreadsheet's TRIM leaves a text (always written as
    text), then the number of each key the engine reads from a number. Keys a
    spreadsheet cannot tell apart (differing only in case or inner spaces, or
    numbers equal to 15 digits) are made unmatchable: a leading space, which
    no TRIMmed text has, or no number at all.

    >>> category_lookup(["3", "North", "a  b", "north"])
    (('3', ' North', 'a b', ' north', 3.0), (0, 1, 2, 3, 0))
    """
    texts = [re.sub(" +", " ", key) for key in categories]
    folded = Counter(text.lower() for text in texts)
    cells: list[float | str] = [" " + text if folded[text.lower()] > 1 else text for text in texts]
    rows = list(range(len(categories)))
    numbers = [(i, n) for i, n in enumerate(category_number(key) for key in categories) if n is not None]
    close = Counter(float(f"{n:.15g}") for _, n in numbers)
    for i, number in numbers:
        if close[float(f"{number:.15g}")] == 1:
            cells.append(number)
            rows.append(i)
    return tuple(cells), tuple(rows)


def _rows(array: np.ndarray) -> tuple[tuple[float, ...], ...]:
    matrix = np.atleast_2d(np.asarray(array, dtype=np.float64))
    return tuple(tuple(float(v) for v in row) for row in matrix)


def formula_constants(model: Model, model_name: str, conformal: Conformal | None = None) -> list[Constant]:
    """Every named range the native formulas of this model read; with a regression model's
    conformal calibration also ``interval`` (level, half-width), which the interval formulas read."""
    prefix = name_prefix(model_name)
    specs = model.preparation.inputs
    constants: list[Constant] = []
    numeric_rows: list[int] = []
    category_rows: list[tuple[int, CategoryInput]] = []
    at = 0
    for index, spec in enumerate(specs):
        if isinstance(spec, NumericInput):
            numeric_rows.append(at)
        else:
            category_rows.append((index, spec))
            constants.append(Constant(f"{prefix}cats{index + 1}", (category_lookup(spec.categories)[0],)))
        at += spec.width
    means = np.array([s.mean for s in specs if isinstance(s, NumericInput)])
    scales = np.array([s.scale for s in specs if isinstance(s, NumericInput)])
    for m, member in enumerate(model.members, start=1):
        layers = unpack(member.theta, model.sizes)
        w1, b1 = layers[0]
        if numeric_rows:
            folded = w1[numeric_rows] / scales[:, None]
            constants.append(Constant(f"{prefix}m{m}_W1n", _rows(folded)))
            b1 = b1 - (means / scales) @ w1[numeric_rows]
        constants.append(Constant(f"{prefix}m{m}_b1", _rows(b1)))
        at = 0
        for index, spec in enumerate(specs):
            if isinstance(spec, CategoryInput):
                rows = list(category_lookup(spec.categories)[1])
                constants.append(Constant(f"{prefix}m{m}_W1c{index + 1}", _rows(w1[at:at + spec.width][rows])))
            at += spec.width
        for layer, (w, b) in enumerate(layers[1:], start=2):
            constants.append(Constant(f"{prefix}m{m}_W{layer}", _rows(w)))
            constants.append(Constant(f"{prefix}m{m}_b{layer}", _rows(b)))
    if model.task == "regression":
        constants.append(Constant(f"{prefix}target", ((float(model.target.mean), float(model.target.scale)),)))
        if conformal is not None:
            constants.append(Constant(f"{prefix}interval", ((float(conformal.level), float(conformal.quantile)),)))
    else:
        constants.append(Constant(f"{prefix}classes", (tuple(_label_cell(c) for c in model.classes),)))
        constants.append(Constant(f"{prefix}threshold", ((float(model.threshold),),)))
    return constants


def _label_cell(label: object) -> float | str:
    if isinstance(label, bool):
        return "TRUE" if label else "FALSE"
    if isinstance(label, (int, float, np.integer, np.floating)):
        return float(label)
    return str(label)


def _activate(activation: str, x: str) -> str:
    if activation == "tanh":
        return f"TANH({x})"
    if activation == "logistic":
        return f"1/(1+EXP(-({x})))"
    if activation == "relu":
        return f"(({x})+ABS({x}))/2"  # max(x, 0) element by element, without an aggregating MAX
    raise FormulaError(f"the activation {cell_in_words(activation)} has no native formula")


def _category_row(cell: str, cats: str, weights: str, spec: CategoryInput) -> str:
    """The first-layer row of the category the cell reads as, #N/A for none (see the module docstring)."""
    comparable = f"IF(ISNUMBER({cell}),{cell},TRIM({cell}))"
    if _logicals_matter(spec.categories):
        comparable = f'IF(ISLOGICAL({cell}),IF({cell},"TRUE","FALSE"),{comparable})'
    return f"INDEX({weights},MATCH(1,--({comparable}={cats}),0),0)"


def _logicals_matter(categories: Sequence[str]) -> bool:
    """Whether a logical cell needs its own reading: a TRUE or FALSE key, or a key read from 0 or 1
    (LibreOffice holds logicals as the numbers 1 and 0). Without one, a logical cell matches nothing."""
    return any(c.lower() in ("true", "false") or category_number(c) in (0.0, 1.0) for c in categories)


def _member_output(model: Model, prefix: str, member: int, cells: dict[str, str]) -> str:
    """The output layer's pre-activation, a 1 x outputs array, as formula text."""
    terms = [f"{prefix}m{member}_b1"]
    numeric = 0
    for index, spec in enumerate(model.preparation.inputs):
        cell = cells[spec.name]
        if isinstance(spec, NumericInput):
            numeric += 1
            terms.append(f"{cell}*INDEX({prefix}m{member}_W1n,{numeric},0)")
        else:
            terms.append(_category_row(cell, f"{prefix}cats{index + 1}", f"{prefix}m{member}_W1c{index + 1}", spec))
    x = "+".join(terms)
    for layer in range(2, len(model.sizes)):
        x = f"MMULT({_activate(model.activation, x)},{prefix}m{member}_W{layer})+{prefix}m{member}_b{layer}"
    return x


def _mean(parts: Sequence[str]) -> str:
    return parts[0] if len(parts) == 1 else f"(({')+('.join(parts)}))/{len(parts)}"


def native_formula(model: Model, model_name: str, cells: dict[str, str], output: str = "value", column: int = 0) -> str:
    """One output cell's formula (with its leading '='); ``cells`` maps each input name to its cell.

    ``output``: ``value`` (the number, or the class label for classifiers),
    ``class`` (the label), ``probabilities`` (``column`` picks the class, from 0) or, for
    numbers, ``interval`` (column 0 the low end, 1 the high end: the value minus or plus the
    half-width in the ``interval`` constant, which needs the model's conformal calibration).
    """
    if output not in OUTPUTS:
        raise FormulaError(f"output {cell_in_words(output)} is not known; choose value, class, probabilities or interval")
    missing = [name for name in model.input_names if name not in cells]
    if missing:
        raise FormulaError(f"no cell given for the inputs {', '.join(missing)}")
    prefix = name_prefix(model_name)
    outputs = [_member_output(model, prefix, m, cells) for m in range(1, len(model.members) + 1)]
    if model.task == "regression":
        if output not in ("value", "interval"):
            raise FormulaError("this model predicts numbers; its native outputs are value and interval")
        text = f"INDEX({prefix}target,1,1)+INDEX({prefix}target,1,2)*({_mean(outputs)})"
        if output == "interval":
            if column not in (0, 1):
                raise FormulaError(f"an interval has 2 ends; column {column} does not exist")
            text = f"{text}{'-' if column == 0 else '+'}INDEX({prefix}interval,1,2)"
    elif output == "interval":
        raise FormulaError("an interval is for models that predict numbers; for classes write the probabilities")
    elif model.task == "binary":
        positive = _mean([f"1/(1+EXP(-({o})))" for o in outputs])
        if output == "probabilities":
            if column not in (0, 1):
                raise FormulaError(f"a binary model has 2 class probabilities; column {column} does not exist")
            text = positive if column == 1 else f"1-({positive})"
        else:
            text = f"IF({positive}>={prefix}threshold,INDEX({prefix}classes,1,2),INDEX({prefix}classes,1,1))"
    else:
        vector = _mean([f"EXP(({o})-MAX({o}))/SUM(EXP(({o})-MAX({o})))" for o in outputs])
        if output == "probabilities":
            if not 0 <= column < len(model.classes):
                raise FormulaError(f"the model has {len(model.classes)} classes; column {column} does not exist")
            text = f"INDEX({vector},1,{column + 1})"
        elif len(outputs) == 1:  # softmax keeps the order, so the largest output names the class
            text = f"INDEX({prefix}classes,1,MATCH(MAX({outputs[0]}),{outputs[0]},0))"
        else:
            text = f"INDEX({prefix}classes,1,MATCH(MAX({vector}),{vector},0))"
    numeric_cells = [cells[s.name] for s in model.preparation.inputs if isinstance(s, NumericInput)]
    if numeric_cells:
        text = f"IF(COUNT({','.join(numeric_cells)})<{len(numeric_cells)},NA(),{text})"
    formula = f"=IFERROR({text},NA())"  # one error value for every refused row, whatever the engine makes of it
    if len(formula) > FORMULA_LIMIT:
        raise FormulaError(
            f"this model needs a formula of {len(formula):,} characters per cell, beyond the spreadsheet limit of {FORMULA_LIMIT:,}; "
            "train a smaller network (fewer inputs, hidden units, layers or repeats) or keep using SHEETNET.PREDICT"
        )
    return formula


def functions_used(formula: str) -> set[str]:
    """The spreadsheet functions a formula calls."""
    return set(re.findall(r"([A-Z][A-Z0-9.]*)\(", formula))
