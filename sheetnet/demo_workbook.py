"""The demo workbook: three invented scenarios, each trained and checked with the
cell functions and laid out as an analyst would see it.

Each scenario sheet holds the data with its holdout split and the predictions
beside it, the holdout metrics and the model summary, the training curve as a
chart, and predicted against actual (a chart) or the confusion matrix (a
colour-scaled table). Each model is stored on a very hidden sheet under a
defined name, exactly as `sheetnet train` stores it.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np
import openpyxl
import pandas as pd
from openpyxl.chart import LineChart, Reference, ScatterChart, Series
from openpyxl.formatting.rule import ColorScaleRule
from openpyxl.styles import Font, PatternFill
from openpyxl.utils.cell import get_column_letter
from openpyxl.worksheet.formula import ArrayFormula
from sheetnet_demo import Scenario, scenarios

from . import functions
from .block import decode_block
from .errors import InputError
from .formulas import native_formula
from .model import Model
from .service import model_placements
from .sheet_writer import apply_to_workbook, write_text_safe
from .stopping import ProgressCallback
from .workbook import save_new

README_MARK = "sheetnet demo workbook"
HEADER_FILL = PatternFill("solid", fgColor="DCE6F0")
CAUTION = (
    "These scenarios and their data are invented. A model is a decision aid, not a decision: where its output affects people "
    "(credit, hiring, medical or safety decisions), check it for bias across groups, keep a person accountable, "
    "and follow local law and licensed practice."
)


@dataclass(frozen=True)
class ScenarioResult:
    scenario: Scenario
    model: Model
    metrics: dict[str, Any]
    pairs: list[tuple[float, float]]  # (actual, predicted) on holdout rows, for regression
    confusion: np.ndarray | None  # holdout counts, rows actual, columns predicted, for classes
    block: list[list[Any]]


def _cells(frame: pd.DataFrame) -> list[list[Any]]:
    rows = frame.astype(object).where(frame.notna(), None).values.tolist()
    return [list(frame.columns)] + rows


def _header(sheet: Any, row: int, column: int, values: list[Any]) -> None:
    for j, value in enumerate(values):
        write_text_safe(sheet, row, column + j, value)
        cell = sheet.cell(row, column + j)
        cell.font = Font(bold=True)
        cell.fill = HEADER_FILL


def _put(sheet: Any, row: int, column: int, rows: list[list[Any]]) -> None:
    for i, values in enumerate(rows):
        for j, value in enumerate(values):
            write_text_safe(sheet, row + i, column + j, None if value == "" else value)


def write_scenario(workbook: Any, scenario: Scenario, progress: ProgressCallback | None) -> ScenarioResult:
    """Train, check and lay out one scenario; returns its holdout metrics."""
    table = _cells(scenario.table)
    split = functions.raising(functions.split)(table, scenario.holdout_share, 0, scenario.split_mode)
    block = functions.train_block(table, scenario.target, scenario.hidden, scenario.settings, split, progress)
    outputs = "value" if scenario.table[scenario.target].dtype.kind == "f" else "value, probabilities"
    predicted: list[list[Any]] = functions.raising(functions.predict)(block, table, outputs + ", flag")
    scored: list[list[Any]] = functions.raising(functions.score)(block, table, split)
    if scenario.level_column:
        predicted, extra = _level_forecast(scenario, table, split, predicted)
        # the model's own metrics are about the change; the level forecast's follow them
        scored = [scored[0]] + [[r[0] if r[0] == "rows" or isinstance(r[1], str) else f"{scenario.target} {r[0]}", r[1]] for r in scored[1:]] + extra
    about = functions.raising(functions.about)(block, table)

    sheet = workbook.create_sheet(scenario.sheet)
    width = len(table[0])
    sheet.freeze_panes = "A2"
    _put(sheet, 1, 1, table)
    _header(sheet, 1, 1, table[0])
    _put(sheet, 2, width + 1, split[1:])
    _header(sheet, 1, width + 1, split[0])
    _put(sheet, 2, width + 2, predicted[1:])
    _header(sheet, 1, width + 2, predicted[0])
    model, _ = decode_block(block)
    native = width + 2 + len(predicted[0])  # the native-formula column, beside the live answers
    _header(sheet, 1, native, [f"native predicted {scenario.target}"])
    for row in range(2, len(table) + 1):
        refs = {name: f"${get_column_letter(table[0].index(name) + 1)}{row}" for name in model.input_names}
        target = f"{get_column_letter(native)}{row}"
        sheet[target] = ArrayFormula(target, native_formula(model, scenario.model_name, refs, "value"))
    for j in range(1, native + 1):
        sheet.column_dimensions[get_column_letter(j)].width = 14

    side = native + 2  # first column right of the answers
    sheet.cell(1, side, scenario.title).font = Font(bold=True, size=13)
    sheet.cell(2, side, f"model stored as the defined name {scenario.model_name}; holdout rows are marked in column {get_column_letter(width + 1)}")
    _header(sheet, 4, side, ["holdout metric", "value"])
    _put(sheet, 5, side, scored[1:])
    for r in range(5, 5 + len(scored)):
        sheet.cell(r, side + 1).number_format = "0.0000"
    about_row = 6 + len(scored)
    _header(sheet, about_row, side, ["about the model", ""])
    _put(sheet, about_row + 1, side, about[1:])
    sheet.column_dimensions[get_column_letter(side)].width = 22
    sheet.column_dimensions[get_column_letter(side + 1)].width = 18

    chart_column = side + 3
    curve_row = 4
    _loss_curve(sheet, model, curve_row, chart_column)
    if model.task == "regression":
        held = _holdout_indices(split)
        target_index = table[0].index(scenario.target)
        if scenario.level_column:
            level = table[0].index(scenario.level_column)
            label = scenario.level_column.replace("this week", "next week")
            pairs = [(table[k][level] + table[k][target_index], predicted[k][-1]) for k in held]
        else:
            label = scenario.target
            pairs = [(table[k][target_index], predicted[k][0]) for k in held]
        _predicted_vs_actual(sheet, pairs, label, curve_row + 22, chart_column)
        confusion = None
    else:
        pairs = []
        confusion = _confusion(sheet, split, table, predicted, scenario.target, list(model.classes), curve_row + 22, chart_column)

    return ScenarioResult(scenario, model, {row[0]: row[1] for row in scored[1:]}, pairs, confusion, block)


def _level_forecast(scenario: Scenario, table: list[list[Any]], split: list[list[Any]], predicted: list[list[Any]]) -> tuple[list[list[Any]], list[list[Any]]]:
    """Add the level forecast (this week plus the predicted change) and score it against the naive forecast."""
    assert scenario.level_column is not None
    level = table[0].index(scenario.level_column)
    change = table[0].index(scenario.target)
    name = scenario.level_column.replace("this week", "next week")
    rows = [predicted[0] + [f"forecast {name}"]] + [r + [t[level] + r[0]] for r, t in zip(predicted[1:], table[1:])]
    held = _holdout_indices(split)
    actual = np.array([table[k][level] + table[k][change] for k in held])
    forecast = np.array([rows[k][-1] for k in held])
    naive = np.array([table[k][level] for k in held])
    extra = [
        [f"forecast RMSE ({name})", float(np.sqrt(np.mean((forecast - actual) ** 2)))],
        [f"forecast MAPE ({name})", float(np.mean(np.abs(forecast - actual) / np.abs(actual)))],
        ["naive RMSE (same as this week)", float(np.sqrt(np.mean((naive - actual) ** 2)))],
    ]
    return rows, extra


def _loss_curve(sheet: Any, model: Any, row: int, column: int) -> None:
    member = model.members[0]
    data_column = column + 12
    _header(sheet, row, data_column, ["epoch (sampled)", "training loss", "validation loss"])
    epochs = [int(e) for e in member.training_epochs]  # the epochs the curve's points were taken at
    n = len(epochs)
    for i, (epoch, loss) in enumerate(zip(epochs, member.training_curve)):
        sheet.cell(row + 1 + i, data_column, int(epoch))
        sheet.cell(row + 1 + i, data_column + 1, loss)
        if i < len(member.validation_curve):
            sheet.cell(row + 1 + i, data_column + 2, member.validation_curve[i])
    chart = LineChart()
    chart.title = f"Training curve: stopped by '{member.stopped_by}' after {member.epochs} epochs"
    chart.x_axis.title = "epoch"
    chart.y_axis.title = "loss"
    last = row + max(n, 1)
    columns = 2 if member.validation_curve else 1
    chart.add_data(Reference(sheet, min_col=data_column + 1, max_col=data_column + columns, min_row=row, max_row=last), titles_from_data=True)
    chart.set_categories(Reference(sheet, min_col=data_column, min_row=row + 1, max_row=last))
    chart.height, chart.width = 7.5, 15
    sheet.add_chart(chart, f"{get_column_letter(column)}{row}")


def _holdout_indices(split: list[list[Any]]) -> list[int]:
    return [i for i, row in enumerate(split[1:], start=1) if row[0] == "holdout"]


def _predicted_vs_actual(sheet: Any, pairs: list[tuple[float, float]], label: str, row: int, column: int) -> None:
    data_column = column + 16
    _header(sheet, row, data_column, [f"actual {label} (holdout)", f"predicted {label}"])
    for i, (actual, predicted) in enumerate(pairs):
        sheet.cell(row + 1 + i, data_column, actual)
        sheet.cell(row + 1 + i, data_column + 1, predicted)
    held = pairs
    chart = ScatterChart()
    chart.title = f"Predicted against actual, {len(held)} holdout rows"
    chart.style = 13
    chart.x_axis.title = "actual"
    chart.y_axis.title = "predicted"
    xs = Reference(sheet, min_col=data_column, min_row=row + 1, max_row=row + len(held))
    ys = Reference(sheet, min_col=data_column + 1, min_row=row + 1, max_row=row + len(held))
    series = Series(ys, xs, title="holdout rows")
    series.marker.symbol = "circle"
    series.marker.size = 5
    series.graphicalProperties.line.noFill = True
    chart.series.append(series)
    values = [v for pair in pairs for v in pair]
    low, high = float(min(values)), float(max(values))
    margin = 0.05 * (high - low or 1.0)
    for axis in (chart.x_axis, chart.y_axis):  # both axes over the data's range, so the points spread out
        axis.scaling.min = round(low - margin)
        axis.scaling.max = round(high + margin)
    chart.height, chart.width = 9, 11
    sheet.add_chart(chart, f"{get_column_letter(column)}{row}")


def _confusion(
    sheet: Any, split: list[list[Any]], table: list[list[Any]], predicted: list[list[Any]], target: str, classes: list[Any], row: int, column: int
) -> np.ndarray:
    target_index = table[0].index(target)
    counts = np.zeros((len(classes), len(classes)), dtype=int)
    position = {str(c): i for i, c in enumerate(classes)}
    for k in _holdout_indices(split):
        counts[position[str(table[k][target_index])], position[str(predicted[k][0])]] += 1
    sheet.cell(row, column, "Confusion matrix on the holdout rows (rows: actual, columns: predicted)").font = Font(bold=True)
    _header(sheet, row + 1, column, ["actual \\ predicted", *map(str, classes)])
    for i, label in enumerate(classes):
        cell = sheet.cell(row + 2 + i, column, str(label))
        cell.font = Font(bold=True)
        cell.fill = HEADER_FILL
        for j in range(len(classes)):
            sheet.cell(row + 2 + i, column + 1 + j, int(counts[i, j]))
    first = f"{get_column_letter(column + 1)}{row + 2}"
    last = f"{get_column_letter(column + len(classes))}{row + 1 + len(classes)}"
    sheet.conditional_formatting.add(f"{first}:{last}", ColorScaleRule(start_type="min", start_color="FFFFFF", end_type="max", end_color="2E75B6"))
    return counts


def build_demo_workbook(
    path: str | Path, seed: int = 0, progress_for: Callable[[str], ProgressCallback | None] | None = None
) -> tuple[Path, list[ScenarioResult]]:
    """Write the demo workbook; refuses to overwrite a file that is not a sheetnet demo workbook."""
    path = Path(path)
    if path.suffix.lower() != ".xlsx":
        raise InputError(f"the demo workbook must be an .xlsx file; got {path.name}")
    if path.exists():
        existing = openpyxl.load_workbook(path, read_only=True)
        first = existing.worksheets[0]["A1"].value if existing.worksheets else None
        existing.close()
        if first != README_MARK:
            raise InputError(f"{path} exists and is not a sheetnet demo workbook; choose another file with --out")
    workbook = openpyxl.Workbook()
    readme = workbook.active
    readme.title = "Read me"
    readme["A1"] = README_MARK
    readme["A1"].font = Font(bold=True, size=14)
    readme["A2"] = CAUTION
    readme["A4"] = "sheet"
    readme["B4"] = "what it shows"
    readme["C4"] = "the same steps as cell formulas"
    for cell in ("A4", "B4", "C4"):
        readme[cell].font = Font(bold=True)
        readme[cell].fill = HEADER_FILL
    results = []
    for i, scenario in enumerate(scenarios(seed)):
        progress = progress_for(scenario.sheet) if progress_for else None
        results.append(write_scenario(workbook, scenario, progress))
        rows, columns = len(scenario.table) + 1, len(scenario.table.columns)
        data = f"{scenario.sheet}!A1:{get_column_letter(columns)}{rows}"
        split_range = f"{scenario.sheet}!{get_column_letter(columns + 1)}1:{get_column_letter(columns + 1)}{rows}"
        readme.cell(5 + i, 1, scenario.sheet)
        readme.cell(5 + i, 2, scenario.title)
        write_text_safe(readme, 5 + i, 3, (
            f'=SHEETNET.SPLIT({data}, {scenario.holdout_share}, 0, "{scenario.split_mode}")  then  '
            f'=SHEETNET.TRAIN({data}, "{scenario.target}", {scenario.hidden}, "{scenario.settings}", {split_range})  then  '
            f"=SHEETNET.PREDICT({scenario.model_name}, {data})"
        ))
    for result in results:  # hidden model sheets after every visible one
        apply_to_workbook(workbook, model_placements(result.scenario.model_name, result.block, list(workbook.defined_names)))
    readme.column_dimensions["A"].width = 12
    readme.column_dimensions["B"].width = 60
    readme.column_dimensions["C"].width = 120
    return save_new(workbook, path), results
