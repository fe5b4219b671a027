"""`sheetnet refresh` and model names on workbook files: stale models retrained, fresh ones untouched,
long and differently cased names kept apart."""

import numpy as np
import openpyxl
import sheetnet_demo

from sheetnet import cli, functions
from sheetnet.block import decode_block
from sheetnet.workbook import open_book, read_model


def _write_book(path, rows=120):
    table = sheetnet_demo.coffee_lot_grades(rows=rows, seed=8)
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Lots"
    sheet.append(list(table.columns))
    for row in table.itertuples(index=False):
        sheet.append(list(row))
    book.save(path)
    return f"Lots!A1:G{rows + 1}"


def _train(path, table, name="grades", *extra):
    return cli.main(["train", str(path), "--table", table, "--target", "grade", "--name", name, "--hidden", "3",
                     "--set", "ignore=lot", "--set", "algorithm=gd", "--set", "rate=0.5", "--set", "momentum=0.5",
                     "--set", "epochs=60", "--seed", "5", *extra])


def test_refresh_on_unchanged_data_changes_nothing(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    table = _write_book(path)
    assert _train(path, table) == 0
    before = path.read_bytes()
    capsys.readouterr()
    assert cli.main(["refresh", str(path)]) == 0
    assert capsys.readouterr().out.splitlines() == ["unchanged grades"]
    assert path.read_bytes() == before


def test_a_stale_model_is_retrained_with_its_given_settings_and_its_constants_follow(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    table = _write_book(path)
    assert _train(path, table) == 0
    old_model, old_info = decode_block(read_model(open_book(path), "grades"))
    book = openpyxl.load_workbook(path)
    book["Lots"]["B3"] = float(book["Lots"]["B3"].value) + 1.25  # a corrected moisture reading
    book.save(path)
    capsys.readouterr()
    assert cli.main(["refresh", str(path), "--dry-run"]) == 0
    assert capsys.readouterr().out.startswith("stale")
    assert cli.main(["refresh", str(path)]) == 0
    out = capsys.readouterr().out
    assert out.startswith(f"retrained grades: from {table}")
    new_model, new_info = decode_block(read_model(open_book(path), "grades"))
    assert dict(new_model.settings) == dict(old_model.settings) and new_model.settings["rate"] == 0.5 and new_model.settings["momentum"] == 0.5
    assert new_info.given == old_info.given and new_model.seed == 5
    assert not np.array_equal(new_model.members[0].theta, old_model.members[0].theta)
    assert cli.main(["check", str(path)]) == 0  # the native-formula constants were rewritten with the block
    assert "ok      grades" in capsys.readouterr().out
    assert cli.main(["refresh", str(path)]) == 0
    assert capsys.readouterr().out.splitlines() == ["unchanged grades"]


def test_long_names_that_share_their_first_characters_stay_apart(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    table = _write_book(path)
    north, south = "grading_model_for_region_north", "grading_model_for_region_south"
    assert _train(path, table, north) == 0
    assert cli.main(["train", str(path), "--table", table, "--target", "grade", "--name", south, "--hidden", "2",
                     "--set", "ignore=lot", "--set", "epochs=30"]) == 0
    book = open_book(path)
    model_north, _ = decode_block(read_model(book, north))
    model_south, _ = decode_block(read_model(book, south))
    assert model_north.sizes != model_south.sizes
    capsys.readouterr()
    assert cli.main(["check", str(path)]) == 0
    assert "2 of 2 models verified" in capsys.readouterr().out


def test_names_differing_only_in_case_are_one_model(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    table = _write_book(path)
    assert _train(path, table) == 0
    capsys.readouterr()
    assert _train(path, table, "GRADES") == 1
    assert "already has a model 'grades'" in capsys.readouterr().err
    assert cli.main(["predict", str(path), "--model", "Grades", "--table", table]) == 0
    grid = [list(r) for r in openpyxl.load_workbook(path)["Lots"].iter_rows(values_only=True)]
    direct = functions.raising(functions.predict)(read_model(open_book(path), "grades"), grid)
    predicted = openpyxl.load_workbook(path)["sn predict grades"]
    assert [predicted.cell(4 + i, 1).value for i in range(3)] == [row[0] for row in direct[1:4]]


def test_piping_a_listing_into_a_reader_that_stops_early_is_quiet():
    import subprocess
    import sys

    # the reader closes the pipe before sheetnet writes a line (as `head` does once it has read enough)
    run = subprocess.run(f"'{sys.executable}' -m sheetnet.cli settings | (exec 0<&-; sleep 0)", shell=True, capture_output=True, text=True, timeout=60)
    assert run.stderr == ""


def test_check_and_formulas_evaluate_the_native_formulas_they_write(tmp_path, capsys, monkeypatch):
    from sheetnet import formulas

    path = tmp_path / "lots.xlsx"
    table = _write_book(path)
    assert _train(path, table) == 0
    assert cli.main(["check", str(path)]) == 0
    honest = formulas.native_formula
    monkeypatch.setattr(formulas, "native_formula", lambda *args, **kwargs: honest(*args, **kwargs).replace("TANH(", "-TANH(", 1))
    capsys.readouterr()
    assert cli.main(["check", str(path)]) == 1
    assert "native formulas do not give the model's answers" in capsys.readouterr().out
    before = path.read_bytes()
    assert cli.main(["formulas", str(path), "--model", "grades", "--table", table]) == 1
    assert "nothing was written" in capsys.readouterr().err and path.read_bytes() == before


def test_a_users_own_sheet_with_a_model_sheets_name_is_never_replaced(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    table = _write_book(path)
    book = openpyxl.load_workbook(path)
    book.create_sheet("sheetnet_grades")["A1"] = "my notes"
    book.save(path)
    before = path.read_bytes()
    capsys.readouterr()
    assert _train(path, table) == 1
    assert "sheet 'sheetnet_grades' that sheetnet did not write" in capsys.readouterr().err
    assert path.read_bytes() == before
