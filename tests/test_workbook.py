"""The command line on workbook files, checked with openpyxl."""

import zipfile

import numpy as np
import openpyxl
import sheetnet_demo
from openpyxl.chart import BarChart, Reference

from sheetnet import cli, file_guard
from sheetnet.block import MAGIC, decode_block
from sheetnet.workbook import open_book, read_model, unread_parts


def _write_book(path, rows=160, chart=False, suffix_note="keep me"):
    table = sheetnet_demo.coffee_lot_grades(rows=rows, seed=8)
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Lots"
    sheet.append(list(table.columns))
    for row in table.itertuples(index=False):
        sheet.append(list(row))
    sheet["J2"] = suffix_note
    sheet["J3"] = "=SUM(B2:B5)"
    other = book.create_sheet("Notes")
    other["A1"] = "the analyst's own sheet"
    if chart:
        bars = BarChart()
        bars.add_data(Reference(sheet, min_col=2, min_row=1, max_row=10), titles_from_data=True)
        sheet.add_chart(bars, "L2")
    book.save(path)
    return len(table)


def _train(path, rows, *extra):
    return cli.main(["train", str(path), "--table", f"Lots!A1:G{rows + 1}", "--target", "grade", "--name", "grades",
                     "--hidden", "5", "--set", "ignore=lot", "--set", "epochs=200", *extra])


def test_train_stores_the_block_very_hidden_under_a_defined_name(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    rows = _write_book(path)
    assert _train(path, rows) == 0
    out = capsys.readouterr().out
    assert "holdout accuracy" in out and "decision aid" in out
    book = openpyxl.load_workbook(path)
    assert book["sheetnet_grades"].sheet_state == "veryHidden"
    destinations = list(book.defined_names["grades"].destinations)
    assert destinations[0][0] == "sheetnet_grades"
    assert book["sheetnet_grades"]["A1"].value == MAGIC
    # the user's sheets and cells are untouched, formulas included
    assert book.sheetnames[:2] == ["Lots", "Notes"]
    assert book["Lots"]["J2"].value == "keep me" and book["Lots"]["J3"].value == "=SUM(B2:B5)"
    assert book["Notes"]["A1"].value == "the analyst's own sheet"
    assert book["Lots"].max_column == 10
    # results on a sheet of ours: split, actual and predicted beside each table row
    results = book["sn grades"]
    assert results["A1"].value == "sheetnet results"
    assert [c.value for c in results[4][:5]] == ["table row", "split", "actual grade", "predicted grade", None]
    marks = [results.cell(r, 2).value for r in range(5, 5 + rows)]
    assert set(marks) == {"train", "holdout"} and marks.count("holdout") == round(0.2 * rows)
    assert file_guard.backup_path(path, 1).exists() and not path.with_name("lots.xlsx.bak").exists()


def test_the_stored_block_round_trips_and_predicts_identically(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    rows = _write_book(path)
    _train(path, rows)
    book = open_book(path)
    model, info = decode_block(read_model(book, "grades"))
    assert info.target == "grade" and info.training_rows + info.holdout_rows == rows
    assert cli.main(["predict", str(path), "--model", "grades", "--table", f"Lots!A1:G{rows + 1}", "--to", "Notes!C1", "--output", "value,probabilities"]) == 0
    notes = openpyxl.load_workbook(path)["Notes"]
    assert [notes.cell(1, c).value for c in range(3, 7)] == ["predicted grade", "P(A)", "P(B)", "P(C)"]
    table = sheetnet_demo.coffee_lot_grades(rows=rows, seed=8)
    expected = model.predict_proba(table.drop(columns=["lot", "grade"]))
    written = [[notes.cell(r, c).value for c in range(4, 7)] for r in range(2, rows + 2)]
    np.testing.assert_allclose(np.array(written, dtype=float), expected, rtol=1e-14, atol=1e-300)


def test_a_model_of_the_same_name_is_replaced_only_on_request(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    rows = _write_book(path)
    _train(path, rows)
    assert _train(path, rows) == 1
    assert "already has a model 'grades'" in capsys.readouterr().err
    assert _train(path, rows, "--replace", "--seed", "3") == 0
    assert openpyxl.load_workbook(path).sheetnames.count("sheetnet_grades") == 1


def test_predict_refuses_a_range_that_is_not_empty(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    rows = _write_book(path)
    _train(path, rows)
    before = path.read_bytes()
    assert cli.main(["predict", str(path), "--model", "grades", "--table", f"Lots!A1:G{rows + 1}", "--to", "Lots!J1"]) == 1
    assert "Lots!J2 is not empty" in capsys.readouterr().err
    assert path.read_bytes() == before


def test_a_workbook_with_a_chart_is_saved_in_place_with_the_chart_kept(tmp_path, capsys):
    path = tmp_path / "charted.xlsx"
    rows = _write_book(path, chart=True)
    assert unread_parts(path) == ["charts", "drawings"]
    with zipfile.ZipFile(path) as before:
        kept = {name: before.read(name) for name in before.namelist() if name.startswith(("xl/charts/", "xl/drawings/", "xl/worksheets/"))}
    assert _train(path, rows) == 0
    out = capsys.readouterr().out
    assert f"saved {path}" in out and "note:" not in out
    assert not (tmp_path / "charted-sheetnet.xlsx").exists()
    with zipfile.ZipFile(path) as after:
        assert {name: after.read(name) for name in kept} == kept
    assert "grades" in openpyxl.load_workbook(path).defined_names


def test_macros_in_xlsm_are_kept(tmp_path, capsys):
    path = tmp_path / "macros.xlsm"
    rows = _write_book(tmp_path / "plain.xlsx")
    # an .xlsm is a workbook package with a VBA project part; openpyxl keeps it with keep_vba
    with zipfile.ZipFile(tmp_path / "plain.xlsx") as source, zipfile.ZipFile(path, "w") as target:
        for item in source.infolist():
            data = source.read(item.filename)
            if item.filename == "[Content_Types].xml":
                data = data.replace(
                    b"application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml",
                    b"application/vnd.ms-excel.sheet.macroEnabled.main+xml",
                ).replace(
                    b"<Default Extension=\"xml\"",
                    b"<Default Extension=\"bin\" ContentType=\"application/vnd.ms-office.vbaProject\"/><Default Extension=\"xml\"",
                )
            target.writestr(item, data)
        target.writestr("xl/vbaProject.bin", b"stand-in VBA project bytes")
    assert _train(path, rows) == 0
    with zipfile.ZipFile(path) as saved:
        assert saved.read("xl/vbaProject.bin") == b"stand-in VBA project bytes"


def test_check_names_the_damaged_model_and_exits_1(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    rows = _write_book(path)
    _train(path, rows)
    assert cli.main(["check", str(path)]) == 0
    book = openpyxl.load_workbook(path)
    hidden = book["sheetnet_grades"]
    row = next(r for r in range(1, hidden.max_row + 1) if hidden.cell(r, 1).value is None and isinstance(hidden.cell(r, 2).value, float))
    hidden.cell(row, 2).value += 0.001
    book.save(path)
    capsys.readouterr()
    assert cli.main(["check", str(path)]) == 1
    out = capsys.readouterr().out
    assert "FAILED  grades: the model block was changed after training" in out


def test_models_lists_every_stored_model(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    rows = _write_book(path)
    _train(path, rows)
    capsys.readouterr()
    assert cli.main(["models", str(path)]) == 0
    out = capsys.readouterr().out
    assert out.startswith("grades\n") and "holdout accuracy" in out


def test_bad_input_gives_a_one_line_error(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    _write_book(path)
    assert cli.main(["train", str(path), "--table", "Lots!A1:G9", "--target", "grade", "--name", "A1"]) == 1
    assert "look like cell addresses" in capsys.readouterr().err
    assert cli.main(["train", str(path), "--table", "Nowhere!A1:G9", "--target", "grade", "--name", "g"]) == 1
    assert "no sheet named 'Nowhere'" in capsys.readouterr().err
    assert cli.main(["train", str(tmp_path / "missing.xlsx"), "--table", "Lots!A1:G9", "--target", "grade", "--name", "g"]) == 1
    assert "there is no workbook" in capsys.readouterr().err


def test_a_saved_workbook_keeps_its_file_permissions(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    rows = _write_book(path)
    path.chmod(0o640)
    assert _train(path, rows) == 0
    assert path.stat().st_mode & 0o777 == 0o640


def test_check_notices_edited_native_formula_constants(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    rows = _write_book(path)
    _train(path, rows)
    book = openpyxl.load_workbook(path)
    sheet, cells = list(book.defined_names["snf_grades_m1_b1"].destinations)[0]
    first = cells.replace("$", "").split(":")[0]
    book[sheet][first].value += 0.5
    book.save(path)
    capsys.readouterr()
    assert cli.main(["check", str(path)]) == 1
    assert "snf_grades_m1_b1 differ from the model block" in capsys.readouterr().out
