"""The Calc extension end to end in a real headless LibreOffice Calc: installed with `sheetnet calc
install` into a temporary profile, a real sheetnet server on loopback, every cell function in cells,
compared with the direct Python call; an edit, saving as .ods and .xlsx, the store command, and the
stored model's native formulas recalculated by LibreOffice. One office start for the module."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path
from typing import Any, Iterator

import pytest
from calc_office import office_missing
from calc_scenario import TOKEN, address, bakery_table, from_calc, install_extension, shown, start_office
from local_server import serving

from sheetnet import functions, service
from sheetnet.block import decode_block
from sheetnet.calc.build import STORE_COMMAND
from sheetnet.server import create_app
from sheetnet.server_file import write_server_file

MISSING = office_missing() or (None if shutil.which("unopkg") else "unopkg is missing (apt-get install libreoffice-calc-nogui)")
pytestmark = pytest.mark.skipif(MISSING is not None, reason=MISSING or "")
ROWS = 60
SHEET = "Data"
SETTINGS = "epochs=200"
SHEETNET_COMMAND = [sys.executable, "-c", "import sys; from sheetnet.cli import main; sys.exit(main(sys.argv[1:]))"]


class Book:
    """The live document with the formula areas, each sized from the direct call's answer."""

    def __init__(self, office: Any, table: list[list[Any]]) -> None:
        self.office, self.table = office, table
        self.doc = office.call("new")
        office.call("rename_sheet", doc=self.doc, index=0, name=SHEET)
        office.call("put", doc=self.doc, sheet=SHEET, address=address("A", 1, 4, len(table)), rows=table)
        n = len(table)
        self.split = functions.split(table, 0.25, 7)
        block = functions.train(table, "loaves", 4, SETTINGS, self.split)
        self.areas = {
            "split": (address("F", 1, 1, n), f"=SHEETNET.SPLIT(A1:D{n};0.25;7)"),
            "train": (address("H", 1, 9, len(block)), f'=SHEETNET.TRAIN(A1:D{n};"loaves";4;"{SETTINGS}";F1:F{n})'),
        }
        model = self.areas["train"][0]
        score = functions.score(block, table, self.split)
        explain = functions.explain(block, table)
        about = functions.about(block, table)
        lags = functions.lags([[r[3]] for r in table], 2)
        self.areas.update({
            "predict": (address("R", 1, 1, n), f"=SHEETNET.PREDICT({model};A1:C{n})"),
            "score": (address("T", 1, 2, len(score)), f"=SHEETNET.SCORE({model};A1:D{n};F1:F{n})"),
            "explain": (address("W", 1, 3, len(explain)), f"=SHEETNET.EXPLAIN({model};A1:D{n})"),
            "about": (address("AA", 1, 2, len(about)), f"=SHEETNET.ABOUT({model};A1:D{n})"),
            "lags": (address("AD", 1, len(lags[0]), len(lags)), f"=SHEETNET.LAGS(D1:D{n};2)"),
        })
        for where, formula in self.areas.values():
            office.call("array_formula", doc=self.doc, sheet=SHEET, address=where, formula=formula)

    def read(self, what: str, doc: int | None = None) -> list[list[Any]]:
        return self.office.call("read", doc=doc or self.doc, sheet=SHEET, address=self.areas[what][0])

    def direct(self, what: str, table: list[list[Any]], block: list[list[Any]]) -> list[list[Any]]:
        split = functions.split(table, 0.25, 7)
        calls = {
            "split": lambda: split,
            "predict": lambda: functions.predict(block, [r[:3] for r in table]),
            "score": lambda: functions.score(block, table, split),
            "explain": lambda: functions.explain(block, table),
            "about": lambda: functions.about(block, table),
            "lags": lambda: functions.lags([[r[3]] for r in table], 2),
        }
        return shown(calls[what]())


def without_time(block: list[list[Any]]) -> list[list[Any]]:
    """A block without its trained_at and checksum rows (the checksum covers the time)."""
    return [row for row in block if row[0] not in ("trained_at", "checksum")]


def assert_matches_direct(book: Book, table: list[list[Any]], doc: int | None = None) -> list[list[Any]]:
    """Every area equals the direct call; returns the block Calc holds."""
    block = from_calc(book.read("train", doc))
    decode_block(block)  # Calc's copy is whole: its checksum holds
    expected = functions.train(table, "loaves", 4, SETTINGS, functions.split(table, 0.25, 7))
    assert without_time(shown(block)) == without_time(shown(expected))
    for what in ("split", "predict", "score", "explain", "about", "lags"):
        assert book.read(what, doc) == book.direct(what, table, block), what
    return block


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, Any]]:
    home = tmp_path_factory.mktemp("calc-home")
    profile = home / "profile"
    installed = install_extension(home, profile)
    assert installed.returncode == 0, installed.stderr
    with serving(create_app(TOKEN)) as base:
        write_server_file(int(base.rsplit(":", 1)[1]), TOKEN, path=home / ".sheetnet" / "server.json")
        office = start_office(home, profile)
        try:
            table = bakery_table(ROWS)
            book = Book(office, table)
            office.call("calculate_all", doc=book.doc)
            yield {"home": home, "office": office, "book": book, "table": table, "installed": installed}
        finally:
            office.close()


def test_install_builds_the_extension_and_says_how_to_start_the_office(live: dict[str, Any]) -> None:
    oxt = live["home"] / ".sheetnet" / "calc" / "sheetnet.oxt"
    assert oxt.exists()
    said = live["installed"].stdout
    assert f"sheetnet's Calc extension installed ({oxt})" in said and "run sheetnet serve before using the functions" in said
    if os.geteuid() == 0:  # unopkg refuses per-user installs as root: a shared one beside the profile
        assert "start LibreOffice with: soffice -env:UserInstallation=" in said and "-env:UNO_SHARED_PACKAGES_CACHE=" in said
    formulas = live["office"].call("formulas", doc=live["book"].doc, sheet=SHEET, address="R1:R1")
    assert formulas == [["{=SHEETNET.PREDICT(H1:P%d;A1:C%d)}" % (len(live["book"].read("train")), ROWS + 1)]]


def test_function_wizard_shows_the_registry_texts(live: dict[str, Any]) -> None:
    from sheetnet.registry import REGISTRY

    texts = live["office"].call("wizard_texts")
    assert sorted(texts) == sorted(entry.name for entry in REGISTRY)
    for entry in REGISTRY:
        shown_entry = texts[entry.name]
        assert shown_entry["help"] == f"{entry.help} Returns {entry.returns}."
        assert [a["name"] for a in shown_entry["arguments"]] == [a.name for a in entry.arguments]
        assert [a["help"] for a in shown_entry["arguments"]] == [a.help + (" (optional)" if a.optional else "") for a in entry.arguments]


def test_every_function_equals_the_direct_call(live: dict[str, Any]) -> None:
    book = live["book"]
    block = assert_matches_direct(book, live["table"])
    assert book.read("predict")[0] == ["predicted loaves"]
    assert isinstance(book.read("predict")[5][0], float)
    live["first_block"] = block


def test_an_edit_retrains_and_repredicts(live: dict[str, Any]) -> None:
    book, office = live["book"], live["office"]
    before = book.read("predict")
    edited = [row[:] for row in live["table"]]
    edited[5][0] = 31.5  # one temperature: an input of PREDICT and of TRAIN's table
    office.call("put_cell", doc=book.doc, sheet=SHEET, address="A6", value=31.5)
    office.call("calculate", doc=book.doc)
    block = assert_matches_direct(book, edited)
    after = book.read("predict")
    assert after[5] != before[5]
    assert without_time(block) != without_time(live["first_block"])  # trained again on the changed table: other weights
    live["table"] = edited


@pytest.mark.parametrize("kind, filter_name", [("ods", "calc8"), ("xlsx", "Calc Office Open XML")])
def test_saved_and_reopened_books_compute_the_same(live: dict[str, Any], kind: str, filter_name: str, tmp_path: Path) -> None:
    book, office = live["book"], live["office"]
    saved = tmp_path / f"bakery.{kind}"
    office.call("save", doc=book.doc, path=str(saved), filter=filter_name)
    reopened = office.call("load", path=str(saved))
    try:
        formula = office.call("formulas", doc=reopened, sheet=SHEET, address="R1:R1")[0][0]
        assert formula.startswith("{=SHEETNET.PREDICT(")
        office.call("calculate_all", doc=reopened)
        assert_matches_direct(book, live["table"], reopened)
        assert book.read("predict", reopened) == book.read("predict")
    finally:
        office.call("close", doc=reopened)


def test_store_command_writes_a_hidden_model_sheet(live: dict[str, Any], tmp_path: Path) -> None:
    book, office, table = live["book"], live["office"], live["table"]
    n = len(table)
    url = f"{STORE_COMMAND}?name=bakery&target=loaves&hidden=4&settings=epochs%3D200"
    done = office.call("store_command", doc=book.doc, sheet=SHEET, address=f"A1:D{n}", url=url)
    assert done["result"].startswith("model bakery (loaves) stored on the hidden sheet sheetnet_bakery"), done
    assert ["sheetnet_bakery", False] in office.call("sheets", doc=book.doc)  # hidden (Calc has no very hidden)
    names = office.call("names", doc=book.doc)
    stored = from_calc(office.call("read", doc=book.doc, sheet="sheetnet_bakery", address=names["bakery"].split(".", 1)[1].replace("$", "")))
    assert names["bakery"] == f"$sheetnet_bakery.$A$1:$I${len(stored)}"
    assert any(name.startswith("snf_bakery_") for name in names)
    decode_block(stored)
    # the same training as every door's: the service's holdout split and seed, the address recorded (options arrive as text)
    request = service.TrainRequest(table, "loaves", "4", "epochs=200", service.DEFAULT_HOLDOUT, "auto", None, f"'Data'!$A$1:$D${n}")
    assert without_time(shown(stored)) == without_time(shown(service.train_model(request).block))
    assert [f"'Data'!$A$1:$D${n}", service.DEFAULT_HOLDOUT] == [r for r in stored if r[0] == "source"][0][1:3]
    assert any(r[0] == "holdout_metric" for r in stored)
    # the card: metrics as numbers in the service's number formats, columns as wide as it says
    placements = service.model_placements("bakery", stored, list(names))
    card = service.card_sheet_name("bakery")
    height = max(b.top + b.height - 1 for b in placements.cells if b.sheet == card)
    looks = office.call("looks", doc=book.doc, sheet=card, address=f"A1:C{height}")
    values = office.call("read", doc=book.doc, sheet=card, address=f"A1:C{height}")
    wanted = {(r, c): f.code("calc") for f in placements.formats for r in range(f.top, f.bottom + 1) for c in range(f.left, f.right + 1)}
    assert wanted and all(looks["codes"][r - 1][c - 1] == code for (r, c), code in wanted.items())
    others = [(values[r][c], looks["codes"][r][c]) for r in range(height) for c in range(3) if (r + 1, c + 1) not in wanted]
    assert all(code == "General" or (code == "@" and isinstance(value, str)) for value, code in others)  # Calc marks number-like text as text
    rows = {row[0]: row for row in values}
    assert isinstance(rows["MAPE"][1], float) and looks["codes"][[r[0] for r in values].index("MAPE")][1] == "0.0%"
    assert looks["codes"][[r[0] for r in values].index("RMSE")][1] == "0.000"
    assert looks["widths"] == [w.hundredths_mm for w in sorted(placements.widths, key=lambda w: w.column)]
    # text from the data stays text on the model sheet, even when it starts with '='
    cells = office.call("cells", doc=book.doc, sheet="sheetnet_bakery", address=f"A1:I{len(stored)}")
    holiday = [c for row in cells for c in row if c["string"] == "=holiday"]
    assert holiday and all(c["type"] == "TEXT" for c in holiday)
    assert all(c["type"] in ("TEXT", "VALUE", "EMPTY") for row in cells for c in row)

    # the defined name feeds PREDICT like the live block
    office.call("array_formula", doc=book.doc, sheet=SHEET, address=f"AG1:AG{n}", formula=f"=SHEETNET.PREDICT(bakery;A1:C{n})")
    office.call("calculate", doc=book.doc)
    live_predictions = office.call("read", doc=book.doc, sheet=SHEET, address=f"AG1:AG{n}")
    assert live_predictions == shown(functions.predict(stored, [r[:3] for r in table]))

    # saved as .xlsx it passes sheetnet check; native formulas over its constants compute the same in LibreOffice
    saved = tmp_path / "stored.xlsx"
    office.call("save", doc=book.doc, path=str(saved), filter="Calc Office Open XML")
    check = subprocess.run([*SHEETNET_COMMAND, "check", str(saved)], capture_output=True, text=True, timeout=120)
    assert check.returncode == 0 and "ok      bakery" in check.stdout, check.stdout + check.stderr
    native = subprocess.run([*SHEETNET_COMMAND, "formulas", str(saved), "--model", "bakery", "--table", f"Data!A1:C{n}", "--to", "Data!AI1"],
                            capture_output=True, text=True, timeout=120)
    assert native.returncode == 0, native.stderr
    reopened = office.call("load", path=str(saved))
    try:
        office.call("calculate_all", doc=reopened)
        natives = office.call("read", doc=reopened, sheet=SHEET, address=f"AI2:AI{n}")
        expected = [row[0] for row in live_predictions[1:]]
        assert all(abs(got[0] - want) <= 1e-9 * max(1.0, abs(want)) for got, want in zip(natives, expected)), (natives[:3], expected[:3])
        assert office.call("read", doc=reopened, sheet=SHEET, address=f"AG1:AG{n}") == live_predictions
    finally:
        office.call("close", doc=reopened)


def test_store_command_failure_is_a_message(live: dict[str, Any]) -> None:
    book, office = live["book"], live["office"]
    url = f"{STORE_COMMAND}?name=bakery2&target=no_such_column"
    done = office.call("store_command", doc=book.doc, sheet=SHEET, address="A1:D20", url=url)
    assert done["result"].startswith("#SHEETNET! ") and "no_such_column" in done["result"], done
    assert "sheetnet_bakery2" not in [s for s, _ in office.call("sheets", doc=book.doc)]


def test_server_file_is_private(live: dict[str, Any]) -> None:
    path = live["home"] / ".sheetnet" / "server.json"
    assert (path.stat().st_mode & 0o777) == 0o600



def test_an_oversized_model_area_works_through_iferror(live: dict[str, Any]) -> None:
    """Calc 7.4 pads an array formula larger than its answer with #N/A, and refuses ranges holding
    errors before any add-in runs (Err:504); IFERROR(area; "") turns the padding into blanks."""
    book, office, table = live["book"], live["office"], live["table"]
    n = len(table)
    office.call("array_formula", doc=book.doc, sheet=SHEET, address="AK1:AS150", formula=f'=SHEETNET.TRAIN(A1:D{n};"loaves";3)')
    office.call("array_formula", doc=book.doc, sheet=SHEET, address="AU1:AU3", formula='=SHEETNET.ABOUT(AK1:AS150)')
    office.call("array_formula", doc=book.doc, sheet=SHEET, address=f"AW1:AW{n}", formula=f'=SHEETNET.PREDICT(IFERROR(AK1:AS150;"");A1:C{n})')
    office.call("calculate", doc=book.doc)
    padded = book.office.call("read", doc=book.doc, sheet=SHEET, address="AK1:AS150")
    block = from_calc([row for row in padded if row[0] is not None])
    assert office.call("cells", doc=book.doc, sheet=SHEET, address="AU1:AU1")[0][0]["error"] == 504
    assert office.call("read", doc=book.doc, sheet=SHEET, address=f"AW1:AW{n}") == shown(functions.predict(block, [r[:3] for r in table]))


def test_store_command_without_options_takes_the_last_column_and_a_free_name(live: dict[str, Any]) -> None:
    book, office = live["book"], live["office"]
    done = office.call("store_command", doc=book.doc, sheet=SHEET, address="A1:D40", url=STORE_COMMAND)
    assert done["result"] == (
        "model model1 (loaves) stored on the hidden sheet sheetnet_model1 under the defined name model1; its card is on the sheet sn card model1"
    ), done
    assert ["sheetnet_model1", False] in office.call("sheets", doc=book.doc)


def test_store_command_refuses_to_replace_a_sheet_sheetnet_did_not_write(live: dict[str, Any]) -> None:
    from sheetnet.placements import not_ours_message

    book, office = live["book"], live["office"]
    office.call("add_sheet", doc=book.doc, name="SN card bakery3")
    office.call("put_cell", doc=book.doc, sheet="SN card bakery3", address="A1", value="my own notes")
    url = f"{STORE_COMMAND}?name=bakery3&target=loaves&settings=epochs%3D20"
    done = office.call("store_command", doc=book.doc, sheet=SHEET, address="A1:D40", url=url)
    assert done["result"] == "#SHEETNET! " + not_ours_message("SN card bakery3"), done  # the words of every door
    assert office.call("read", doc=book.doc, sheet="SN card bakery3", address="A1:A1") == [["my own notes"]]
    assert "sheetnet_bakery3" not in [s for s, _ in office.call("sheets", doc=book.doc)] and "bakery3" not in office.call("names", doc=book.doc)
