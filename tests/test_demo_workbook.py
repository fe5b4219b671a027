"""The demo workbook, checked with openpyxl: scenarios, hidden models, predictions, charts."""

import re
import zipfile

import numpy as np
import openpyxl
import pytest
import sheetnet_demo

from sheetnet.block import decode_block
from sheetnet.demo_workbook import build_demo_workbook
from sheetnet.workbook import open_book, read_model


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    path = tmp_path_factory.mktemp("demo") / "demo.xlsx"
    written, results = build_demo_workbook(path, seed=0)
    return written, results


def test_every_scenario_has_a_sheet_and_a_very_hidden_model(demo):
    path, results = demo
    book = openpyxl.load_workbook(path)
    assert book.sheetnames[:4] == ["Read me", "Shipments", "Parcels", "Coffee"]
    assert "decision aid" in book["Read me"]["A2"].value
    for name in ("shipments_model", "parcels_model", "coffee_model"):
        sheet, cells = list(book.defined_names[name].destinations)[0]
        assert book[sheet].sheet_state == "veryHidden"
    opened = open_book(path)
    for result in results:
        model, info = decode_block(read_model(opened, result.scenario.model_name))
        assert info.target == result.scenario.target
        assert info.holdout_rows == result.metrics["rows"] > 0


def test_predictions_sit_beside_the_data_rows(demo):
    path, results = demo
    book = openpyxl.load_workbook(path)
    opened = open_book(path)
    for result in results:
        scenario = result.scenario
        sheet = book[scenario.sheet]
        width = len(scenario.table.columns)
        assert sheet.cell(1, width + 1).value == "split"
        assert sheet.cell(1, width + 2).value == f"predicted {scenario.target}"
        model, _ = decode_block(read_model(opened, scenario.model_name))
        inputs = scenario.table[list(model.input_names)]
        expected = model.predict(inputs)
        written = [sheet.cell(r, width + 2).value for r in range(2, len(scenario.table) + 2)]
        if model.task == "regression":
            np.testing.assert_allclose(np.array(written, dtype=float), expected, rtol=1e-12)
        else:
            assert written == expected.tolist()
        marks = [sheet.cell(r, width + 1).value for r in range(2, len(scenario.table) + 2)]
        assert marks.count("holdout") == result.metrics["rows"]


def test_the_time_series_is_held_out_at_its_end_and_beats_the_naive_forecast(demo):
    path, results = demo
    parcels = next(r for r in results if r.scenario.sheet == "Parcels")
    sheet = openpyxl.load_workbook(path)["Parcels"]
    width = len(parcels.scenario.table.columns)
    marks = [sheet.cell(r, width + 1).value for r in range(2, len(parcels.scenario.table) + 2)]
    first_holdout = marks.index("holdout")
    assert set(marks[first_holdout:]) == {"holdout"} and set(marks[:first_holdout]) == {"train"}
    assert parcels.metrics["forecast RMSE (parcels next week)"] < parcels.metrics["naive RMSE (same as this week)"]


def test_charts_are_in_the_workbook(demo):
    path, _ = demo
    with zipfile.ZipFile(path) as package:
        charts = [n for n in package.namelist() if n.startswith("xl/charts/chart")]
    # per scenario a training curve, importance bars, partial dependence and residuals or calibration;
    # predicted against actual for the forecast
    assert len(charts) == 3 * 4 + 1
    with zipfile.ZipFile(path) as package:
        scatter = [package.read(n).decode() for n in charts if b"scatterChart" in package.read(n)]
    # markers LibreOffice draws: a circle with its own fill (without one, the points are invisible there)
    with_points = [x for x in scatter if re.search(r'symbol val="circle"', x)]
    assert len(with_points) == 4  # predicted against actual, residuals, two calibration curves
    for chart in with_points:
        assert re.search(r'symbol val="circle"\s*/><(c:)?size val="6"\s*/><(c:)?spPr><a:solidFill>', chart), chart[:200]


def test_metrics_carry_error_bars_words_and_number_formats(demo):
    path, results = demo
    book = openpyxl.load_workbook(path)
    sheet = book["Shipments"]
    found = {sheet.cell(r, c).value: (r, c) for r in range(1, 60) for c in range(1, sheet.max_column + 1) if sheet.cell(r, c).value == "holdout metric"}
    row, column = found["holdout metric"]
    assert [sheet.cell(row, column + j).value for j in range(5)] == ["holdout metric", "value", "low (90 %)", "high (90 %)", "in words"]
    metrics = {sheet.cell(r, column).value: r for r in range(row + 1, row + 20)}
    accuracy = metrics["accuracy"]
    assert sheet.cell(accuracy, column + 1).number_format == "0.0%" and sheet.cell(metrics["log_loss"], column + 1).number_format == "0.000"
    low, value, high = (sheet.cell(accuracy, column + j).value for j in (2, 1, 3))
    assert low <= value <= high and sheet.cell(accuracy, column + 4).value.startswith("Accuracy ")
    assert "percentile bootstrap" in sheet.cell(metrics["error bars"], column + 1).value
    for scenario in ("shipments_model", "parcels_model", "coffee_model"):
        card = book[f"sn card {scenario}"]
        assert card.sheet_state == "visible" and card["A2"].value == f"Model card: {scenario}"
    parcels = next(r for r in results if r.scenario.sheet == "Parcels")
    assert parcels.half_width is not None and parcels.half_width > 0 and parcels.residual_pairs
    coffee = next(r for r in results if r.scenario.sheet == "Coffee")
    assert coffee.reliability and sum(b[2] for b in coffee.reliability) == coffee.metrics["rows"]


def test_pictures_of_every_scenario(demo, tmp_path):
    from sheetnet.demo_workbook import draw_pictures

    _, results = demo
    drawn = [p.name for result in results for p in draw_pictures(result, tmp_path / result.scenario.sheet.lower())]
    assert "parcels-residuals.png" in drawn and "coffee-calibration.png" in drawn and "shipments-importance.png" in drawn
    assert sum(name.endswith("-dependence.png") for name in drawn) == 3


def test_the_demo_data_come_from_the_seeded_generators():
    first = sheetnet_demo.scenarios(seed=3)
    again = sheetnet_demo.scenarios(seed=3)
    other = sheetnet_demo.scenarios(seed=4)
    for a, b, c in zip(first, again, other):
        assert a.table.equals(b.table)
        assert not a.table.equals(c.table)


def _rendering_missing():
    from render_sheets import render_missing

    return render_missing()


def test_the_demo_and_a_trained_files_sheets_render_in_libreoffice(demo, tmp_path):
    """Rendered by LibreOffice headless (tests/render_sheets.py): the pictures are real and the predicted-against-actual
    points show (filled markers)."""
    missing = _rendering_missing()
    if missing:
        pytest.skip(f"cannot render sheets: {missing}")
    from matplotlib.image import imread
    from openpyxl.utils import get_column_letter
    from render_demo import demo_regions, trained_book
    from render_sheets import render

    path, _ = demo
    book = openpyxl.load_workbook(path)
    charts = {(chart.anchor._from.row + 1, chart.anchor._from.col + 1): chart for chart in book["Parcels"]._charts}
    row, column = next(where for where, chart in charts.items() if "Predicted against actual" in str(chart.title.tx.rich.p[0].r[0].t))
    scatter = f"Parcels!{get_column_letter(column)}{row}:{get_column_letter(column + 5)}{row + 19}"  # the chart alone
    folder = tmp_path / "trained"
    folder.mkdir()
    trained, trained_regions = trained_book(folder)
    pictures = render(path, [scatter, *demo_regions(path)[:2]], tmp_path / "png") + render(trained, trained_regions, tmp_path / "png")
    for picture in pictures:
        image = imread(picture)[..., :3]
        assert image.shape[0] > 100 and image.shape[1] > 300, picture
        assert (image.mean(axis=-1) < 0.5).mean() > 0.01, picture  # text, grid and charts, not a blank page
    image = (imread(pictures[0])[..., :3] * 255).round()
    blue = np.all(np.abs(image - np.array([21, 101, 192])) < 40, axis=-1)  # the markers' #1565C0
    assert blue.sum() > 200, blue.sum()  # 51 filled points (an unfilled marker draws nothing in LibreOffice)
