"""The xlwings bridge on Linux: the UDF wrappers against the direct calls, the macros against a stand-in.

No Excel runs here. The UDF module is imported and every wrapper called with the argument shapes xlwings
passes (lists of lists; 2-D NumPy arrays with NaN for blanks). The macro layer is driven against
tests/xlwings_standin.py, whose docstring states what it does not do.
"""

import inspect
import math

import numpy as np
import openpyxl
import pytest
import sheetnet_demo
import xlwings_standin as standin

from sheetnet import cli, functions, service, xl_macros, xl_udfs
from sheetnet.block import decode_block
from sheetnet.cells import MARKER
from sheetnet.formulas import native_formula
from sheetnet.placements import not_ours_message
from sheetnet.registry import REGISTRY


@pytest.fixture(scope="module")
def table():
    frame = sheetnet_demo.coffee_lot_grades(rows=120, seed=4)
    return [list(frame.columns)] + frame.astype(object).values.tolist()


def _as_numpy(cells):
    """A range as xlwings hands it over with numpy conversion: an object array, NaN for blanks."""
    return np.array([[np.nan if v is None else v for v in row] for row in cells], dtype=object)


def _blanked(answer):
    return [["" if v is None else v for v in row] for row in answer]


def test_every_registry_function_has_a_wrapper_with_its_arguments():
    assert sorted(xl_udfs.UDFS) == sorted(f.bridge_name for f in REGISTRY)
    for entry in REGISTRY:
        wrapper = getattr(xl_udfs, entry.bridge_name)
        parameters = list(inspect.signature(wrapper).parameters.values())
        assert [p.name for p in parameters] == [a.name for a in entry.arguments]
        assert [p.default is None for p in parameters] == [a.optional for a in entry.arguments]
        declared = wrapper.sheetnet_udf["args"]
        assert [d["ndim"] == 2 for d in declared] == [a.kind == "range" for a in entry.arguments]
        assert "." not in entry.bridge_name and entry.bridge_name.startswith("SHEETNET_")


def test_wrappers_equal_the_direct_calls_with_lists_and_with_numpy(table):
    split = functions.split(table, 0.25, 1, "stratified grade")
    model = functions.train(table, "grade", "5", "ignore=lot; epochs=200", split)
    calls = {
        "SHEETNET_SPLIT": (table, 0.25, 1, "stratified grade"),
        "SHEETNET_TRAIN": (table, "grade", "5", "ignore=lot; epochs=200", split),
        "SHEETNET_PREDICT": (model, table, "value, probabilities"),
        "SHEETNET_SCORE": (model, table, split),
        "SHEETNET_EXPLAIN": (model, table),
        "SHEETNET_ABOUT": (model, table),
        "SHEETNET_LAGS": ([row[2:3] for row in table], "1,3"),
        "SHEETNET_GROUPS": (model, table, "process", split),
        "SHEETNET_SEARCH": (table, "grade", [["hidden"], [2], [4]], "ignore=lot; epochs=40", 2),
    }
    assert set(calls) == set(xl_udfs.UDFS)
    for name, args in calls.items():
        direct = _blanked(getattr(functions, name.split("_")[1].lower())(*args))
        assert getattr(xl_udfs, name)(*args) == direct, name
        as_numpy = [_as_numpy(a) if isinstance(a, list) else a for a in args]
        assert getattr(xl_udfs, name)(*as_numpy) == direct, name


def test_blank_cells_from_numpy_arrive_as_blanks(table):
    holey = [list(r) for r in table[:40]]
    holey[5][1] = None
    answer = xl_udfs.SHEETNET_TRAIN(_as_numpy(holey), "grade", 3, "ignore=lot")
    assert answer[0][0].startswith(MARKER) and "row 6 of the table" in answer[0][0] and "blank" in answer[0][0]
    assert all(not (isinstance(v, float) and math.isnan(v)) for row in xl_udfs.SHEETNET_LAGS([["x"], [1.0], [np.nan]], 1) for v in row)


def test_every_argument_reads_error_cells_as_their_codes():
    # xlwings turns error cells into None unless err_to_str is set (its Range.options docstring, 0.28+)
    for entry in REGISTRY:
        declared = getattr(xl_udfs, entry.bridge_name).sheetnet_udf["args"]
        assert [d.get("err_to_str") for d in declared] == [True] * len(entry.arguments), entry.name


def test_an_error_cell_is_named_not_taken_for_a_blank(table):
    holey = [list(r) for r in table[:40]]
    holey[6][1] = "#N/A"  # what xlwings hands over for an error cell with err_to_str
    answer = xl_udfs.SHEETNET_TRAIN(holey, "grade", 3, "ignore=lot; blank_rows=skip")
    assert answer[0][0].startswith(MARKER) and "#N/A" in answer[0][0] and "row 7 of the table" in answer[0][0]


# --- the macro layer against the stand-in ------------------------------------------------

def _book(table):
    book = standin.Book()
    book.selection = book.table("Lots", table)
    return book


def test_train_selection_stores_a_very_hidden_model_under_a_defined_name(table):
    book = _book(table)
    report = xl_macros.train_selection("grade", "grades", "5", "ignore=lot; epochs=200", book=book)
    assert report.startswith("sheetnet: model grades trained") and book.app.status_bar == report
    sheet = book.sheets["sheetnet_grades"]
    assert sheet.api.Visible == xl_macros.VERY_HIDDEN
    block = book.names["grades"].refers_to_range.options(ndim=2).value
    model, info = decode_block(block)
    assert info.source == ("'Lots'!$A$1:$G$121", 0.2, "auto", 0)  # the mode as given: a refresh resolves it again
    assert "snf_grades_m1_b1" in book.names
    expected = functions.train_block(table, "grade", "5", "ignore=lot; epochs=200", functions.split(table, 0.2, 0, "stratified grade"))
    assert decode_block(expected)[0].members[0].theta.tolist() == model.members[0].theta.tolist()


def test_refresh_retrains_on_the_changed_range(table):
    book = _book(table)
    xl_macros.train_selection("grade", "grades", "5", "ignore=lot; epochs=200", book=book)
    before, _ = decode_block(book.names["grades"].refers_to_range.options(ndim=2).value)
    book.sheets["Lots"].range("B2").value = 14.5  # a changed moisture reading
    report = xl_macros.refresh_models(book=book)
    assert report == "sheetnet: retrained: grades"
    assert xl_macros.refresh_models(book=book) == "sheetnet: unchanged: grades"
    after, info = decode_block(book.names["grades"].refers_to_range.options(ndim=2).value)
    assert after.input_names == before.input_names and after.sizes == before.sizes
    assert not np.array_equal(after.members[0].theta, before.members[0].theta)
    assert info.source == ("'Lots'!$A$1:$G$121", 0.2, "auto", 0)  # the mode as given: a refresh resolves it again


def test_remove_model_deletes_its_sheet_and_names(table):
    book = _book(table)
    xl_macros.train_selection("grade", "grades", "5", "ignore=lot; epochs=50", book=book)
    assert xl_macros.remove_model("grades", book=book) == "sheetnet: model grades removed"
    assert "sheetnet_grades" not in [s.name for s in book.sheets]
    assert not [n for n in book.names if n.name.startswith(("grades", "snf_grades_"))]
    assert xl_macros.remove_model("grades", book=book).startswith(MARKER)


def test_export_formulas_writes_one_native_formula_per_row(table):
    book = _book(table)
    xl_macros.train_selection("grade", "grades", "5", "ignore=lot; epochs=50", book=book)
    report = xl_macros.export_formulas("grades", "Lots!J1", "class", book=book)
    assert report == "sheetnet: 120 native formulas for model grades written from Lots!J1"
    sheet = book.sheets["Lots"]
    model, _ = decode_block(book.names["grades"].refers_to_range.options(ndim=2).value)
    refs = {n: f"'Lots'!${'ABCDEFG'[table[0].index(n)]}3" for n in model.input_names}
    assert sheet.array_formulas[(3, 10)] == native_formula(model, "grades", refs, "class")
    assert len(sheet.array_formulas) == 120


def test_macros_report_bad_input_instead_of_raising(table):
    book = _book(table)
    assert xl_macros.train_selection("grade", "B2", book=book).startswith(f"{MARKER} 'B2' cannot be a model name")
    assert "no column named 'flavour'" in xl_macros.train_selection("flavour", "grades", book=book)


def test_xl_setup_points_the_workbook_at_the_udf_module(tmp_path, capsys):
    path = tmp_path / "live.xlsx"
    book = openpyxl.Workbook()
    conf = book.create_sheet("xlwings.conf")
    conf.append(["SHOW CONSOLE", "FALSE"])
    book.save(path)
    assert cli.main(["xl", "setup", str(path), "--interpreter-win", r"C:\Python311\pythonw.exe"]) == 0
    assert "Import Functions" in capsys.readouterr().out
    rows = list(openpyxl.load_workbook(path)["xlwings.conf"].iter_rows(values_only=True))
    assert rows == [("SHOW CONSOLE", "FALSE"), ("UDF MODULES", "sheetnet.xl_udfs"), ("INTERPRETER_WIN", r"C:\Python311\pythonw.exe")]


def test_the_bridge_uses_only_open_source_xlwings_parts():
    # the paid parts must never be imported by sheetnet (licence constraint of this bridge);
    # xlwings' own __init__ loads a helper of its own, which is xlwings' business, not a use of the parts
    from pathlib import Path

    import sheetnet

    for path in Path(sheetnet.__file__).parent.glob("*.py"):
        source = path.read_text()
        for forbidden in ("xlwings.pro", "xlwings.server", "from xlwings import pro", "xlwings.reports", "xlwings import server"):
            assert forbidden not in source, (path.name, forbidden)


def test_macros_read_error_cells_as_their_codes(table):
    holey = [list(r) for r in table]
    holey[6][1] = standin.CellError("#N/A")  # a =NA() left in the moisture column
    book = standin.Book()
    book.selection = book.table("Lots", holey)
    assert book.selection.options(ndim=2).value[6][1] is None  # xlwings' default, which the macros must not use
    report = xl_macros.train_selection("grade", "grades", "5", "ignore=lot; blank_rows=skip; epochs=50", book=book)
    assert report.startswith(MARKER) and "#N/A" in report and "row 7 of the table" in report
    assert "grades" not in book.names  # nothing stored from a table with an error in it


def test_train_selection_applies_the_cards_number_formats_and_column_widths(table):
    book = _book(table)
    xl_macros.train_selection("grade", "grades", "5", "ignore=lot; epochs=50", book=book)
    card = book.sheets["sn card grades"]
    rows = {card.cells.get((r, 1)): r for r in range(1, 200)}
    accuracy = rows["Accuracy"]
    assert isinstance(card.cells[(accuracy, 2)], float) and card.range(f"B{accuracy}").number_format == "0.0%"  # a number shown as a percentage
    assert card.range(f"B{rows['Log-loss']}").number_format == "0.000"
    assert card.range(f"B{rows['training rows']}").number_format == "General"
    placements = service.model_placements("grades", book.names["grades"].refers_to_range.options(ndim=2).value)
    assert {(r, f.left) for f in placements.formats for r in range(f.top, f.bottom + 1)} == set(card.number_formats)
    assert card.column_widths == {w.column: w.characters for w in placements.widths} and card.column_widths[1] > len("Balanced accuracy")


def test_no_macro_replaces_a_sheet_sheetnet_did_not_write(table):
    book = _book(table)
    mine = book.sheets.add("SN card grades", after=book.sheets[0])
    mine.range("A1").value = "my own notes"
    report = xl_macros.train_selection("grade", "grades", "5", "ignore=lot; epochs=50", book=book)
    assert report == f"{MARKER} " + not_ours_message("SN card grades")  # the file door's words
    assert report.endswith("the workbook has a sheet 'SN card grades' that sheetnet did not write; rename that sheet or choose another model name")
    assert "grades" not in book.names and mine.cells[(1, 1)] == "my own notes"
    # a model stored under another name, whose card the user then takes over: removal is refused, nothing dropped
    xl_macros.train_selection("grade", "lots", "5", "ignore=lot; epochs=50", book=book)
    book.sheets["sn card lots"].range("A1").value = "I wrote over this card"
    assert xl_macros.remove_model("lots", book=book) == f"{MARKER} " + not_ours_message("sn card lots")
    assert "lots" in book.names and "sheetnet_lots" in [s.name for s in book.sheets]
