"""Native spreadsheet formulas that compute a model's predictions with no Python.

Pure text building, no I/O. `formula_constants` lays a model's weights and
preparation constants out as named rectangular ranges; `native_formula`
writes one formula per output cell that reads them through those
workbook-level names, so retraining a model into the same names updates
every native prediction without rewriting a formula.

Only functions that Excel 2010 and later and LibreOffice 7.4 and later both
evaluate are used: MMULT, INDEX, TANH, EXP, ABS, SUM, MAX, MATCH, IF, NA.
Each formula is entered as a single-cell array formula (so MMULT and the
element-wise arithmetic work the same everywhere); no LET, LAMBDA, SEQUENCE
or spilled arrays.

The first layer reads the input cells one by one, so the table's columns may
be in any order: ``b1' + x_1 * W1'[1, :] + ... `` with the input scaling
folded into ``W1'`` and ``b1'``; each text input adds the row of its category,
found by comparing the cell with the model's categories (a category the
model never saw gives #N/A, as the engine refuses it). Text comparison in
spreadsheets ignores case, so categories that differ only in case cannot be
told apart by a native formula.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .errors import ModelError
from .model import Model
from .network import unpack
from .preparation import CategoryInput, NumericInput

FORMULA_LIMIT = 8192  # characters, Excel's limit for one formula
OUTPUTS = ("value", "class", "probabilities")
ALLOWED_FUNCTIONS = frozenset({"MMULT", "INDEX", "TANH", "EXP", "ABS", "SUM", "MAX", "MATCH", "IF", "NA"})


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


def _rows(array: np.ndarray) -> tuple[tuple[float, ...], ...]:
    matrix = np.atleast_2d(np.asarray(array, dtype=np.float64))
    return tuple(tuple(float(v) for v in row) for row in matrix)


def formula_constants(model: Model, model_name: str) -> list[Constant]:
    """Every named range the native formulas of this model read."""
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
            constants.append(Constant(f"{prefix}cats{index + 1}", (tuple(spec.categories),)))
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
                constants.append(Constant(f"{prefix}m{m}_W1c{index + 1}", _rows(w1[at:at + spec.width])))
            at += spec.width
        for layer, (w, b) in enumerate(layers[1:], start=2):
            constants.append(Constant(f"{prefix}m{m}_W{layer}", _rows(w)))
            constants.append(Constant(f"{prefix}m{m}_b{layer}", _rows(b)))
    if model.task == "regression":
        constants.append(Constant(f"{prefix}target", ((float(model.target.mean), float(model.target.scale)),)))
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
    raise FormulaError(f"the activation {activation!r} has no native formula")


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
            hits = f"--({cell}={prefix}cats{index + 1})"
            terms.append(f"IF(SUM({hits})=0,NA(),MMULT({hits},{prefix}m{member}_W1c{index + 1}))")
    x = "+".join(terms)
    for layer in range(2, len(model.sizes)):
        x = f"MMULT({_activate(model.activation, x)},{prefix}m{member}_W{layer})+{prefix}m{member}_b{layer}"
    return x


def _mean(parts: Sequence[str]) -> str:
    return parts[0] if len(parts) == 1 else f"(({')+('.join(parts)}))/{len(parts)}"


def native_formula(model: Model, model_name: str, cells: dict[str, str], output: str = "value", column: int = 0) -> str:
    """One output cell's formula (with its leading '='); ``cells`` maps each input name to its cell.

    ``output``: ``value`` (the number, or the class label for classifiers),
    ``class`` (the label) or ``probabilities`` (``column`` picks the class, from 0).
    """
    if output not in OUTPUTS:
        raise FormulaError(f"output {output!r} is not known; choose value, class or probabilities")
    missing = [name for name in model.input_names if name not in cells]
    if missing:
        raise FormulaError(f"no cell given for the inputs {', '.join(missing)}")
    prefix = name_prefix(model_name)
    outputs = [_member_output(model, prefix, m, cells) for m in range(1, len(model.members) + 1)]
    if model.task == "regression":
        if output != "value":
            raise FormulaError("this model predicts numbers; its only native output is value")
        text = f"INDEX({prefix}target,1,1)+INDEX({prefix}target,1,2)*({_mean(outputs)})"
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
    formula = "=" + text
    if len(formula) > FORMULA_LIMIT:
        raise FormulaError(
            f"this model needs a formula of {len(formula):,} characters per cell, beyond the spreadsheet limit of {FORMULA_LIMIT:,}; "
            "train a smaller network (fewer inputs, hidden units, layers or repeats) or keep using SHEETNET.PREDICT"
        )
    return formula


def functions_used(formula: str) -> set[str]:
    """The spreadsheet functions a formula calls."""
    return set(re.findall(r"([A-Z][A-Z0-9.]*)\(", formula))
