"""One request through every door gives one model and one message.

The same table, target, hidden layers, settings, holdout share, mode and seed go through the cell
functions, the command line on a file, the xlwings macros (against tests/xlwings_standin.py: no Excel
runs here) and a server training job with the placements the task pane writes. Every door must give
the same weights, the same stored names and native-formula constants, and the same words for the
same bad cell.
"""

import copy
import time

import numpy as np
import openpyxl
import pytest
import sheetnet_demo
import xlwings_standin as standin

from sheetnet import cli, functions, service, xl_macros
from sheetnet.block import decode_block
from sheetnet.cells import MARKER
from sheetnet.jobs import JobBoard, SplitRequest
from sheetnet.placements import placements_from_json
from sheetnet.workbook import open_book, read_model

HIDDEN, SETTINGS, HOLDOUT, MODE, SEED = "3", "ignore=lot; epochs=80", 0.25, "auto", 5


@pytest.fixture(scope="module")
def table():
    frame = sheetnet_demo.coffee_lot_grades(rows=80, seed=11)
    return [list(frame.columns)] + frame.astype(object).values.tolist()


def _theta(block):
    return decode_block(block)[0].members[0].theta


def _by_cells(table):
    """What an analyst types: SPLIT with the mode auto stands for, then TRAIN with the seed as a setting."""
    split = functions.split(table, HOLDOUT, SEED, service.split_mode(table, "grade", MODE, SETTINGS))
    return functions.train(table, "grade", HIDDEN, f"{SETTINGS}; seed={SEED}", split)


def _by_file(table, tmp_path):
    path = tmp_path / "lots.xlsx"
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Lots"
    for row in table:
        sheet.append(row)
    book.save(path)
    code = cli.main(["train", str(path), "--table", f"Lots!A1:G{len(table)}", "--target", "grade", "--name", "grades", "--hidden", HIDDEN,
                     "--holdout", str(HOLDOUT), "--mode", MODE, "--seed", str(SEED), *sum((["--set", s.strip()] for s in SETTINGS.split(";")), [])])
    return code, path


def _xl_book(table):
    book = standin.Book()
    book.selection = book.table("Lots", table)
    return book


def _by_job(table, existing_names=()):
    """What the task pane sends: TRAIN's arguments without a split, and the holdout request."""
    board = JobBoard()
    job = board.submit("grades", [table, "grade", HIDDEN, SETTINGS], list(existing_names), SplitRequest(HOLDOUT, MODE, SEED))
    assert job.finished.wait(120)
    return job


def _stored_constants_file(path):
    book = open_book(path)
    names = sorted(n for n in book.formulas.defined_names if service.constant_owner(n) == "grades")
    values = {}
    for name in names:
        sheet, cells = list(book.formulas.defined_names[name].destinations)[0]
        values[name] = [list(r) for r in book.values[sheet][cells.replace("$", "")]]
        values[name] = [[c.value for c in row] for row in values[name]]
    return values


def _same_cells(got, wanted):
    """Equal cell by cell; numbers to the 15 digits a file keeps."""
    flat_got, flat_wanted = [v for r in got for v in r], [v for r in wanted for v in r]
    return len(flat_got) == len(flat_wanted) and all(
        g == pytest.approx(w, rel=1e-14, abs=0) if isinstance(w, float) else g == w for g, w in zip(flat_got, flat_wanted)
    )


def _constants_of_placements(placements):
    values = {}
    for name in placements.names[1:]:
        block = next(c for c in placements.cells if (c.top, c.left) == (name.top, name.left))
        values[name.name] = [list(r) for r in block.values]
    return values


def test_one_request_gives_one_model_through_every_door(table, tmp_path):
    cells_block = _by_cells(table)
    code, path = _by_file(table, tmp_path)
    assert code == 0
    file_block = read_model(open_book(path), "grades")
    xl_book = _xl_book(table)
    assert xl_macros.train_selection("grade", "grades", HIDDEN, SETTINGS, HOLDOUT, MODE, SEED, book=xl_book).startswith("sheetnet: model grades")
    xl_block = xl_book.names["grades"].refers_to_range.options(ndim=2).value
    job = _by_job(table)
    assert job.state == "done", job.message
    for block in (file_block, xl_block, job.result):
        assert np.array_equal(_theta(block), _theta(cells_block))
        assert dict(decode_block(block)[0].settings) == dict(decode_block(cells_block)[0].settings)

    # the same names and constants wherever the model is stored
    expected = service.model_placements("grades", file_block)
    file_constants = _stored_constants_file(path)
    assert sorted(file_constants) == sorted(n.name for n in expected.names[1:])
    xl_names = sorted(n.name for n in xl_book.names if service.constant_owner(n.name) == "grades")
    assert xl_names == sorted(file_constants)
    pane = placements_from_json(_by_job(table, ["grades"]).placements)
    assert sorted(n.name for n in pane.names[1:]) == sorted(file_constants)
    pane_constants = _constants_of_placements(pane)
    for name, values in file_constants.items():
        assert _same_cells(values, pane_constants[name]), name
    assert pane.sheets[0].title == service.model_sheet_name("grades") and pane.names[0].name == "grades"


def test_the_same_bad_cell_reads_the_same_at_every_door(table, tmp_path, capsys):
    bad = copy.deepcopy(table)
    bad[3][1] = "dry"  # range row 4: a text in the numeric moisture column
    in_cell = _by_cells_message(bad)
    assert in_cell.startswith(MARKER)
    words = in_cell[len(MARKER):].strip()
    assert "row 4" in words
    code, _ = _by_file(bad, tmp_path)
    assert code == 1
    assert capsys.readouterr().err.strip().split(": ", 1)[1] == words
    xl_report = xl_macros.train_selection("grade", "grades", HIDDEN, SETTINGS, HOLDOUT, MODE, SEED, book=_xl_book(bad))
    assert xl_report == f"{MARKER} {words}"
    job = _by_job(bad)
    assert job.state == "failed" and job.message == f"{MARKER} {words}"


def _by_cells_message(table):
    started = time.monotonic()
    answer = _by_cells(table)
    assert time.monotonic() - started < 60
    return answer[0][0]
