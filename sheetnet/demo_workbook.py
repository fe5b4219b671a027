"""The demo workbook: three invented scenarios, each trained and checked with the
cell functions and laid out as an analyst would see it.

Each scenario sheet holds the data with its holdout split and the predictions
beside it, the holdout metrics with bootstrap error bars and in words, the model
summary, and native charts: the training curve, predicted against actual (or
the confusion matrix, a colour-scaled table), what the model relies on
(permutation importance), the partial dependence on its top input, and residuals
against predicted (or a calibration curve for classes). Each model is stored
on a very hidden sheet under a defined name with its model card, exactly as
`sheetnet train` stores it. `draw_pictures` draws the same as PNG files.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np
import openpyxl
import pandas as pd
from openpyxl.chart import BarChart, LineChart, Reference, ScatterChart, Series
from openpyxl.chart.axis import NumericAxis
from openpyxl.chart.data_source import NumFmt
from openpyxl.formatting.rule import ColorScaleRule
from openpyxl.styles import Font, PatternFill
from openpyxl.utils.cell import get_column_letter
from openpyxl.worksheet.formula import ArrayFormula
from sheetnet_demo import Scenario, scenarios

from . import functions
from .block import decode_block
from .dependence import partial_dependence
from .errors import InputError
from .formulas import native_formula
from .labels import PERCENT_METRICS, PROBABILITY_FORMAT
from .model import Model
from .preparation import NumericInput
from .service import model_placements
from .sheet_writer import apply_to_workbook, write_text_safe
from .stopping import ProgressCallback
from .uncertainty import reliability_table
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
    importance: list[tuple[str, float, float]]  # permutation importance on the holdout rows, largest first
    dependence: list[tuple[str, np.ndarray, np.ndarray]]  # partial dependence on the top numeric inputs (holdout rows)
    residual_pairs: list[tuple[float, float]]  # (actual, predicted) of the model's own target, for regression
    reliability: list[tuple[float, float, int, float, float]]  # for classes: see `uncertainty.reliability_table`
    half_width: float | None  # the conformal interval's half-width, for regression


def _cells(frame: pd.DataFrame) -> list[list[Any]]:
    rows = frame.astype(object).where(frame.notna(), None).values.tolist()
    return [list(frame.columns)] + rows


FONT = "Calibri"  # the workbook's own font (openpyxl's default style); LibreOffice shows its metric twin, Carlito


def _bold(size: float = 11) -> Font:
    """A bold face of the workbook's font: a Font naming none is drawn by LibreOffice in a serif fallback."""
    return Font(name=FONT, bold=True, size=size)


def _header(sheet: Any, row: int, column: int, values: list[Any]) -> None:
    for j, value in enumerate(values):
        write_text_safe(sheet, row, column + j, value)
        cell = sheet.cell(row, column + j)
        cell.font = _bold()
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
    scored: list[list[Any]] = functions.raising(functions.score)(block, table, split, "90%")
    own_predictions = [row[0] for row in predicted[1:]]
    if scenario.level_column:
        predicted, extra = _level_forecast(scenario, table, split, predicted)
        # the model's own metrics are about the change; the level forecast's follow them
        scored = [scored[0]] + [[r[0] if r[0] == "rows" or isinstance(r[1], str) else f"{scenario.target} {r[0]}", *r[1:]] for r in scored[1:]] + extra
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
    sheet.cell(1, side, scenario.title).font = _bold(13)
    sheet.cell(2, side, f"model stored as the defined name {scenario.model_name}; holdout rows are marked in column {get_column_letter(width + 1)}")
    _header(sheet, 4, side, ["holdout metric", *scored[0][1:]])
    _put(sheet, 5, side, scored[1:])
    for r, metric in enumerate(scored[1:], start=5):
        for c in range(1, 4):
            sheet.cell(r, side + c).number_format = _metric_format(str(metric[0]), metric[1])
    about_row = 6 + len(scored)
    _header(sheet, about_row, side, ["about the model", ""])
    _put(sheet, about_row + 1, side, about[1:])
    for r, item in enumerate(about[1:], start=about_row + 1):
        sheet.cell(r, side + 1).number_format = _metric_format(str(item[0]).removeprefix("holdout "), item[1])
    _number_formats(sheet, predicted[0], width + 2)
    _widths(sheet, table[0] + split[0] + predicted[0] + [f"native predicted {scenario.target}"], 1)
    sheet.column_dimensions[get_column_letter(side)].width = 40  # shows 'holdout balanced_accuracy 90 % interval'
    for j, width_of in enumerate((12, 12, 12, 44), start=1):
        sheet.column_dimensions[get_column_letter(side + j)].width = width_of

    chart_column = side + 6  # right of the metrics' words (side + 4) and a gap: a chart never covers a cell that shows something
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
        sheet.column_dimensions[get_column_letter(chart_column)].width = len("actual \\ predicted") + 2

    held = _holdout_indices(split)
    holdout_table = [table[0]] + [table[k] for k in held]
    explained: list[list[Any]] = functions.raising(functions.explain)(block, holdout_table)
    importance = [(str(r[0]), float(r[1]), float(r[2])) for r in explained[1:]]
    frame = scenario.table.iloc[[k - 1 for k in held]][list(model.input_names)]
    numeric = [name for name, _, _ in importance if isinstance(model.preparation.inputs[model.input_names.index(name)], NumericInput)]
    dependence = [(name, *partial_dependence(model, frame, name)) for name in numeric[:3]]
    _, info = decode_block(block)
    residual_pairs: list[tuple[float, float]] = []
    reliability: list[tuple[float, float, int, float, float]] = []
    target_index = table[0].index(scenario.target)
    if model.task == "regression":
        residual_pairs = [(float(table[k][target_index]), float(own_predictions[k - 1])) for k in held]
    else:
        probabilities = model.predict_proba(scenario.table.iloc[[k - 1 for k in held]][list(model.input_names)])
        index = model.target.class_indices(np.array([table[k][target_index] for k in held], dtype=object))
        if model.task == "binary":
            reliability = reliability_table(index == 1, probabilities[:, 1], bins=5)
        else:
            reliability = reliability_table(probabilities.argmax(axis=1) == index, probabilities.max(axis=1), bins=5)
    chart_row = curve_row + 44
    _importance_chart(sheet, importance, "RMSE" if model.task == "regression" else "log-loss", chart_row, chart_column)
    if dependence:
        _dependence_chart(sheet, dependence[0], model, scenario.target, chart_row + 22, chart_column)
    if model.task == "regression":
        _residuals_chart(sheet, residual_pairs, chart_row + 44, chart_column)
    else:
        _calibration_chart(sheet, reliability, model, chart_row + 44, chart_column)
    half_width = info.conformal.quantile if info.conformal is not None and model.task == "regression" else None
    return ScenarioResult(
        scenario, model, {row[0]: row[1] for row in scored[1:]}, pairs, confusion, block, importance, dependence, residual_pairs, reliability, half_width
    )


def _metric_format(name: str, value: Any = None) -> str:
    """Shares as percentages, other metrics at three decimals, counts (rows, epochs, networks) as whole numbers."""
    if isinstance(value, int) and not isinstance(value, bool):
        return "0"
    key = name.split(" ")[-1] if " " in name else name
    return "0.0%" if key in PERCENT_METRICS or "MAPE" in name else "0.000"


def _number_formats(sheet: Any, header: list[Any], first_column: int) -> None:
    """Probabilities with three decimals; the rest as the engine gave them."""
    for j, title in enumerate(header):
        if str(title).startswith("P("):
            for r in range(2, sheet.max_row + 1):
                sheet.cell(r, first_column + j).number_format = PROBABILITY_FORMAT


def _widths(sheet: Any, header: list[Any], first_column: int) -> None:
    """Columns wide enough to show their headers (a spreadsheet cuts a header at the next filled cell)."""
    for j, title in enumerate(header):
        sheet.column_dimensions[get_column_letter(first_column + j)].width = max(10, min(40, len(str(title)) + 3))


def _place(sheet: Any, chart: Any, row: int, column: int) -> None:
    """Anchor a chart at (row, column) with axes that show: kept (openpyxl 3.1 leaves an axis' delete
    flag unset, and Excel then hides the axis; from memory of openpyxl's issue reports), value labels in
    the General format (not the three decimals of the cells they come from) and at the low edge of the
    plot (not across the points where an axis crosses zero)."""
    for axis in (chart.x_axis, chart.y_axis):
        axis.delete = False
        axis.tickLblPos = "low"
        if isinstance(axis, NumericAxis):
            axis.numFmt = NumFmt(formatCode="General", sourceLinked=False)
    sheet.add_chart(chart, f"{get_column_letter(column)}{row}")


def _visible_markers(series: Series, colour: str = "1565C0") -> None:
    """Filled markers with no line: LibreOffice draws a marker only when its fill is given (Excel takes the style's)."""
    series.marker.symbol = "circle"
    series.marker.size = 6
    series.marker.graphicalProperties.solidFill = colour
    series.marker.graphicalProperties.line.solidFill = colour
    series.graphicalProperties.line.noFill = True


def _line_series(series: Series, colour: str) -> None:
    series.marker.symbol = "none"
    series.graphicalProperties.line.solidFill = colour
    series.graphicalProperties.line.width = 19050  # EMU: 1.5 pt
    series.smooth = False


def _importance_chart(sheet: Any, importance: list[tuple[str, float, float]], loss: str, row: int, column: int) -> None:
    data_column = column + 20
    _header(sheet, row, data_column, ["input", f"{loss} increase when shuffled"])
    for i, (name, mean, _) in enumerate(importance):
        write_text_safe(sheet, row + 1 + i, data_column, name)
        sheet.cell(row + 1 + i, data_column + 1, mean).number_format = "0.000"
    chart = BarChart()
    chart.type = "bar"  # horizontal bars
    chart.title = "What the model relies on (holdout rows)"
    chart.x_axis.title = "input"
    chart.y_axis.title = f"{loss} increase when shuffled"
    chart.add_data(Reference(sheet, min_col=data_column + 1, min_row=row, max_row=row + len(importance)), titles_from_data=True)
    chart.set_categories(Reference(sheet, min_col=data_column, min_row=row + 1, max_row=row + len(importance)))
    chart.x_axis.scaling.orientation = "maxMin"  # the largest on top
    chart.legend = None
    chart.series[0].graphicalProperties.solidFill = "1565C0"
    chart.height, chart.width = 7.5, 15
    _place(sheet, chart, row, column)


def _dependence_chart(sheet: Any, curve: tuple[str, np.ndarray, np.ndarray], model: Model, target: str, row: int, column: int) -> None:
    name, grid, average = curve
    data_column = column + 20
    if average.ndim == 2:
        answers = [f"P({c})" for c in model.classes]
    else:
        answers = [f"average P({model.classes[1]})" if model.task == "binary" else f"average predicted {target}"]
    _header(sheet, row, data_column, [name, *answers])
    values = average if average.ndim == 2 else average[:, None]
    for i, x in enumerate(grid):
        sheet.cell(row + 1 + i, data_column, float(x))
        for j in range(values.shape[1]):
            sheet.cell(row + 1 + i, data_column + 1 + j, float(values[i, j])).number_format = "0.000"
    chart = ScatterChart()
    chart.title = f"Partial dependence on {name} (holdout rows)"
    chart.x_axis.title = name
    chart.y_axis.title = answers[0] if len(answers) == 1 else "average probability"
    xs = Reference(sheet, min_col=data_column, min_row=row + 1, max_row=row + len(grid))
    colours = ("1565C0", "EF6C00", "2E7D32", "6A1B9A", "C62828")
    for j in range(values.shape[1]):
        ys = Reference(sheet, min_col=data_column + 1 + j, min_row=row, max_row=row + len(grid))
        series = Series(ys, xs, title_from_data=True)
        _line_series(series, colours[j % len(colours)])
        chart.series.append(series)
    chart.x_axis.scaling.min, chart.x_axis.scaling.max = _axis_range([float(v) for v in grid])
    chart.height, chart.width = 7.5, 15
    _place(sheet, chart, row, column)


def _residuals_chart(sheet: Any, pairs: list[tuple[float, float]], row: int, column: int) -> None:
    data_column = column + 20
    _header(sheet, row, data_column, ["predicted (holdout)", "actual - predicted"])
    for i, (actual, predicted) in enumerate(pairs):
        sheet.cell(row + 1 + i, data_column, predicted)
        sheet.cell(row + 1 + i, data_column + 1, actual - predicted)
    chart = ScatterChart()
    chart.title = f"Residuals against predicted, {len(pairs)} holdout rows"
    chart.x_axis.title = "predicted"
    chart.y_axis.title = "actual - predicted"
    series = Series(
        Reference(sheet, min_col=data_column + 1, min_row=row + 1, max_row=row + len(pairs)),
        Reference(sheet, min_col=data_column, min_row=row + 1, max_row=row + len(pairs)),
        title="holdout rows",
    )
    _visible_markers(series)
    chart.series.append(series)
    chart.x_axis.scaling.min, chart.x_axis.scaling.max = _axis_range([p for _, p in pairs])
    chart.height, chart.width = 7.5, 15
    _place(sheet, chart, row, column)


def _calibration_chart(sheet: Any, table: list[tuple[float, float, int, float, float]], model: Model, row: int, column: int) -> None:
    data_column = column + 20
    what = f"P({model.classes[1]})" if model.task == "binary" else "top class probability"
    _header(sheet, row, data_column, [f"mean predicted {what}", "observed share", "rows", "perfectly calibrated"])
    for i, (_, _, count, predicted, observed) in enumerate(table):
        sheet.cell(row + 1 + i, data_column, predicted).number_format = PROBABILITY_FORMAT
        sheet.cell(row + 1 + i, data_column + 1, observed).number_format = PROBABILITY_FORMAT
        sheet.cell(row + 1 + i, data_column + 2, count)
        sheet.cell(row + 1 + i, data_column + 3, predicted).number_format = PROBABILITY_FORMAT
    chart = ScatterChart()
    chart.title = f"Calibration on the holdout rows ({what})"
    chart.x_axis.title = f"mean predicted {what}"
    chart.y_axis.title = "observed share"
    xs = Reference(sheet, min_col=data_column, min_row=row + 1, max_row=row + len(table))
    diagonal = Series(Reference(sheet, min_col=data_column + 3, min_row=row, max_row=row + len(table)), xs, title_from_data=True)
    _line_series(diagonal, "263238")
    observed = Series(Reference(sheet, min_col=data_column + 1, min_row=row, max_row=row + len(table)), xs, title_from_data=True)
    _visible_markers(observed, "EF6C00")
    chart.series.extend([diagonal, observed])
    for axis in (chart.x_axis, chart.y_axis):
        axis.scaling.min, axis.scaling.max = 0, 1
    chart.height, chart.width = 7.5, 15
    _place(sheet, chart, row, column)


def _axis_range(values: list[float]) -> tuple[float, float]:
    low, high = min(values), max(values)
    margin = 0.05 * (high - low or 1.0)
    return float(f"{low - margin:.3g}"), float(f"{high + margin:.3g}")


def draw_pictures(result: ScenarioResult, stem: str | Path) -> list[Path]:
    """The scenario's pictures as PNG files named ``STEM-training.png`` and so on."""
    from . import pictures

    title = result.scenario.title
    drawn = [pictures.loss_curve_picture(result.model, f"{stem}-training.png", title)]
    if result.confusion is not None:
        drawn.append(pictures.confusion_picture(result.confusion, list(result.model.classes), f"{stem}-confusion.png", title))
    else:
        actual, predicted = zip(*result.pairs)
        drawn.append(pictures.predicted_vs_actual_picture(actual, predicted, f"{stem}-predicted.png", title))
    loss = "RMSE" if result.model.task == "regression" else "log-loss"
    drawn.append(pictures.importance_picture(result.importance, f"{stem}-importance.png", loss))
    if result.dependence:
        answer = "predicted value" if result.model.task == "regression" else "probability"
        drawn.append(pictures.partial_dependence_picture(result.dependence, f"{stem}-dependence.png", answer))
    if result.residual_pairs:
        actual, predicted = zip(*result.residual_pairs)
        drawn.append(pictures.residuals_picture(actual, predicted, f"{stem}-residuals.png", result.half_width))
    if result.reliability:
        positive = str(result.model.classes[1]) if result.model.task == "binary" else "the top class"
        drawn.append(pictures.calibration_picture(result.reliability, f"{stem}-calibration.png", positive))
    return drawn


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
    _place(sheet, chart, row, column)


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
    _visible_markers(series)
    chart.series.append(series)
    values = [v for pair in pairs for v in pair]
    low, high = float(min(values)), float(max(values))
    margin = 0.05 * (high - low or 1.0)
    for axis in (chart.x_axis, chart.y_axis):  # both axes over the data's range, so the points spread out
        axis.scaling.min = round(low - margin)
        axis.scaling.max = round(high + margin)
    chart.height, chart.width = 9, 11
    _place(sheet, chart, row, column)


def _confusion(
    sheet: Any, split: list[list[Any]], table: list[list[Any]], predicted: list[list[Any]], target: str, classes: list[Any], row: int, column: int
) -> np.ndarray:
    target_index = table[0].index(target)
    counts = np.zeros((len(classes), len(classes)), dtype=int)
    position = {str(c): i for i, c in enumerate(classes)}
    for k in _holdout_indices(split):
        counts[position[str(table[k][target_index])], position[str(predicted[k][0])]] += 1
    sheet.cell(row, column, "Confusion matrix on the holdout rows (rows: actual, columns: predicted)").font = _bold()
    _header(sheet, row + 1, column, ["actual \\ predicted", *map(str, classes)])
    for i, label in enumerate(classes):
        cell = sheet.cell(row + 2 + i, column, str(label))
        cell.font = _bold()
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
    readme["A1"].font = _bold(14)
    readme["A2"] = CAUTION
    readme["A4"] = "sheet"
    readme["B4"] = "what it shows"
    readme["C4"] = "the same steps as cell formulas"
    for cell in ("A4", "B4", "C4"):
        readme[cell].font = _bold()
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
