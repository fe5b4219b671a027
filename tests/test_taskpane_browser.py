"""The task pane page in headless Chromium (Debian's package, driven by Playwright) against a running server:
it loads, lists models, trains on a pasted table, shows progress and the finished metrics. A screenshot
is taken and checked for the loss curve's colour.

Inside Excel: the page runs against `office_standin.js`, a stand-in for Office.js written from Microsoft's
Excel JavaScript API reference (served in place of Office's script), never against Excel itself. The
workbook the stand-in ends with must be exactly what `sheetnet.service.model_placements` says."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import sheetnet_demo
from local_server import serving
from openpyxl.utils.cell import column_index_from_string

from sheetnet import server, service
from sheetnet.block import decode_block
from sheetnet.placements import column_letters, not_ours_message
from sheetnet.registry import REGISTRY

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
playwright = pytest.importorskip("playwright.sync_api", reason="Playwright is not installed (pip install playwright)")
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="Chromium is not installed (apt-get install chromium)")

TOKEN = "pane-token-0123456789abcdef"
FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking", "--disable-component-update", "--disable-sync"]
TRAINING_BLUE = np.array([21, 101, 192])  # the pane's training-loss line, #1565c0
OFFICE_SCRIPT = "https://appsforoffice.microsoft.com/lib/1/hosted/office.js"
STAND_IN = Path(__file__).with_name("office_standin.js")
LINK_LABEL = '=HYPERLINK("http://x","y")'  # a class label that a spreadsheet would run as a formula
FORMULA_LIKE_CATEGORY = "=1+1"  # a category of a text input, likewise
VISIBILITY = {"visible": "Visible", "hidden": "Hidden", "veryHidden": "VeryHidden"}  # Office.js's spelling


HOSTILE = '<img src=x onerror="window.sheetnetPwned = 1">'  # a column name that would run as markup


def _policy_refusals(page):
    """Console reports of the content policy refusing something, collected while the page runs."""
    seen = []
    page.on("console", lambda message: seen.append(message.text) if "Content Security Policy" in message.text else None)
    return seen


def same_title(a, b):
    return a.casefold() == b.casefold()  # as spreadsheets compare sheet titles and defined names


@pytest.fixture(scope="module")
def app():
    return server.create_app(TOKEN)


@pytest.fixture(scope="module")
def base_url(app):
    with serving(app) as address:
        yield address


def test_the_pane_trains_a_model_and_shows_its_metrics(app, base_url, tmp_path):
    from matplotlib.image import imread

    lots = sheetnet_demo.coffee_lot_grades(rows=200, seed=6).drop(columns="lot")
    csv = "\n".join([",".join(lots.columns)] + [",".join(str(v) for v in row) for row in lots.itertuples(index=False)])
    with playwright.sync_playwright() as driver:
        browser = driver.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
        page = browser.new_page(viewport={"width": 900, "height": 1300})
        refused = _policy_refusals(page)
        page.route("https://**/*", lambda route: route.abort())  # no outside network: Office's script fails fast
        page.goto(f"{base_url}/addin/taskpane.html#token={TOKEN}")
        page.wait_for_function("() => document.getElementById('connection').textContent === 'connected'", timeout=20000)
        assert page.inner_text("#models") == "none yet"
        assert "Not inside Excel" in page.inner_text("#mode-note")
        page.fill("#table-text", csv)
        page.fill("#target", "grade")
        page.fill("#model-name", "lots")
        page.fill("#hidden", "5")
        page.fill("#settings", "epochs=300")
        page.click("#train")
        page.wait_for_selector("#metrics:not([hidden])", timeout=60000)
        metrics = page.inner_text("#metrics")
        assert "accuracy" in metrics and "stopped by" in metrics
        assert "lots" in page.inner_text("#models") and "grade" in page.inner_text("#models")
        assert page.inner_text("#message") == "model lots trained"
        job = [j for j in app.state.jobs.jobs() if j.name == "lots"][-1]
        lines = 1 + any(point[2] is not None for point in job.curve)  # training loss, and validation loss when trained with one
        assert page.locator("#curve polyline").count() == lines
        assert float(page.get_attribute("#progress-bar", "value")) == 100
        shot = tmp_path / "pane.png"
        page.screenshot(path=str(shot), full_page=True)
        browser.close()
    assert refused == []  # the page's own script and styles run under its content policy
    image = (imread(shot)[..., :3] * 255).round()
    assert image.shape[0] > 600 and image.shape[1] >= 900
    blue = np.all(np.abs(image - TRAINING_BLUE) < 12, axis=-1)
    assert blue.sum() > 150  # the training-loss line (and the buttons) in the pane's blue are on screen


def _expected_workbook(before, placements):
    """A plain reference of the documented order (sheetnet/placements.py) on the stand-in's snapshot."""
    sheets = [s for s in before["sheets"] if not any(same_title(s["name"], d) for d in placements["drop_sheets"])]
    names = [n for n in before["names"] if not any(same_title(n["name"], d) for d in placements["drop_names"])]
    sheets = [{**s, "columnWidths": s.get("columnWidths", {})} for s in sheets]
    sheets += [{"name": p["title"], "visibility": VISIBILITY[p["visibility"]], "cells": {}, "columnWidths": {}} for p in placements["sheets"]]
    by_name = {s["name"]: s for s in sheets}
    for block in placements["cells"]:
        for i, row in enumerate(block["values"]):
            for j, value in enumerate(row):
                if value is None:
                    continue
                if isinstance(value, str):
                    cell = {"kind": "text", "value": value, "numberFormat": "@"}
                elif isinstance(value, bool):
                    cell = {"kind": "boolean", "value": value, "numberFormat": "General"}
                else:
                    cell = {"kind": "number", "value": value, "numberFormat": "General"}
                by_name[block["sheet"]]["cells"][f"{column_letters(block['left'] + j)}{block['top'] + i}"] = cell
    assert placements["formulas"] == []  # a model's placements write no formulas (the stand-in does not calculate)
    for style in placements["formats"]:  # the format code Excel knows, over the placement's rectangle
        for r in range(style["top"], style["bottom"] + 1):
            for c in range(style["left"], style["right"] + 1):
                cell = by_name[style["sheet"]]["cells"].setdefault(f"{column_letters(c)}{r}", {"kind": "empty"})
                cell["numberFormat"] = style["excel"]
    for width in placements["widths"]:
        by_name[width["sheet"]]["columnWidths"][column_letters(width["column"])] = width["points"]
    for n in placements["names"]:
        address = f"${column_letters(n['left'])}${n['top']}:${column_letters(n['right'])}${n['bottom']}"
        names.append({"name": n["name"], "sheet": n["sheet"], "address": address})
    return {"sheets": sheets, "names": names}


def test_the_pane_inside_excel_stores_exactly_the_services_placements(app, base_url):
    lots = sheetnet_demo.coffee_lot_grades(rows=200, seed=6).drop(columns="lot")
    lots["grade"] = lots["grade"].replace({"A": LINK_LABEL})
    lots["process"] = lots["process"].replace({"honey": FORMULA_LIKE_CATEGORY})
    table = [list(lots.columns)] + lots.astype(object).values.tolist()
    selection = f"A1:{column_letters(len(table[0]))}{len(table)}"
    seed = {
        "sheets": [
            {"name": "Lots", "rows": table, "textFormat": True},
            {"name": "Notes", "rows": [["keep this note"]]},
            {"name": "sheetnet_LOTS", "visibility": "VeryHidden", "rows": [["sheetnet model block"], ["an older model"]]},  # replaced
        ],
        "names": [
            {"name": "rates", "sheet": "Notes", "address": "$A$1:$A$1"},
            {"name": "Lots", "sheet": "sheetnet_LOTS", "address": "$A$1:$I$1"},  # the old model's: dropped
            {"name": "snf_lots_m1_b1", "sheet": "sheetnet_LOTS", "address": "$K$1:$K$4"},  # likewise
            {"name": "snf_other_m1_b1", "sheet": "Notes", "address": "$B$1:$B$2"},  # another model's: kept
        ],
        "selection": {"sheet": "Lots", "address": selection},
    }
    with playwright.sync_playwright() as driver:
        browser = driver.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
        page = browser.new_page(viewport={"width": 900, "height": 1300})
        errors = []
        page.on("pageerror", lambda error: errors.append(str(error)))
        page.route("https://**/*", lambda route: route.abort())
        page.route(OFFICE_SCRIPT, lambda route: route.fulfill(body=STAND_IN.read_text(), content_type="text/javascript"))
        page.goto(f"{base_url}/addin/taskpane.html#token={TOKEN}")
        page.wait_for_function("() => document.getElementById('connection').textContent === 'connected'", timeout=20000)
        assert "Select the table" in page.inner_text("#mode-note") and page.is_hidden("#table-from-text")
        assert page.input_value("#hidden") == ""  # blank, as at every other door: fit's default layers
        page.evaluate("seed => sheetnetStandIn.seed(seed)", seed)
        before = page.evaluate("sheetnetStandIn.snapshot()")
        page.fill("#target", "grade")
        page.fill("#model-name", "lots")
        page.fill("#settings", "epochs=200")
        page.click("#train")
        # functions, not expressions: the page's content policy refuses Playwright's eval of an expression
        ended = "() => document.getElementById('message').textContent.startsWith('model lots') || document.getElementById('message').className === 'error'"
        page.wait_for_function(ended, timeout=90000)  # stored, or an error the pane shows
        message = page.inner_text("#message")
        after = page.evaluate("sheetnetStandIn.snapshot()")
        associated = page.evaluate("Object.keys(sheetnetStandIn.associations)")
        browser.close()
    assert errors == [], errors
    job = [j for j in app.state.jobs.jobs() if j.name == "lots" and j.state == "done"][-1]  # the newest
    existing = [n["name"] for n in seed["names"]]
    placements = service.model_placements("lots", job.result, existing).to_json()
    expected = _expected_workbook(before, placements)
    assert json.loads(json.dumps(after)) == expected
    assert message == f"model lots stored in the workbook under the name lots, with {len(placements['names']) - 1} named constants for native formulas"
    # what that equality means, spelled out
    shown = [(s["name"], s["visibility"]) for s in after["sheets"]]
    assert shown[:2] == [("Lots", "Visible"), ("Notes", "Visible")] and ("sheetnet_lots", "VeryHidden") in shown[2:]
    assert len(shown) == 2 + len(placements["sheets"])  # the old model sheet replaced, the user's kept first
    defined = {n["name"] for n in after["names"]}
    assert {"rates", "snf_other_m1_b1", "lots", "snf_lots_classes", "snf_lots_cats5", "snf_lots_m1_W1n"} <= defined
    assert "Lots" not in defined and len(defined) == 2 + len(placements["names"])
    card = next(sheet for sheet in after["sheets"] if sheet["name"] == "sn card lots")
    accuracy_row = next(key[1:] for key, cell in card["cells"].items() if key.startswith("A") and cell.get("value") == "Accuracy")
    assert card["cells"][f"B{accuracy_row}"]["kind"] == "number" and card["cells"][f"B{accuracy_row}"]["numberFormat"] == "0.0%"
    assert card["columnWidths"]["A"] > 48  # wider than Excel's default, in points
    model_cells = next(sheet["cells"] for sheet in after["sheets"] if sheet["name"] == "sheetnet_lots")
    assert model_cells["A1"] == {"kind": "text", "value": "sheetnet model block", "numberFormat": "@"}
    for text in (LINK_LABEL, FORMULA_LIKE_CATEGORY):  # in the block and in a native-formula constant, as text
        landed = [cell for cell in model_cells.values() if cell.get("value") == text]
        assert len(landed) >= 2 and all(c["kind"] == "text" and c["numberFormat"] == "@" for c in landed), text
    assert not any(cell["kind"] == "formula" for cell in model_cells.values())
    # every native-formula constant's name covers filled cells: a pane-trained model predicts natively too
    constants = [n for n in after["names"] if n["name"].startswith("snf_lots_")]
    assert len(constants) == len(placements["names"]) - 1 and all(n["sheet"] == "sheetnet_lots" for n in constants)
    for named in constants:
        corners = named["address"].replace("$", "").split(":")
        (left, top), (right, bottom) = ((c.rstrip("0123456789"), int(c.lstrip("ABCDEFGHIJKLMNOPQRSTUVWXYZ"))) for c in corners)
        columns = [column_letters(k) for k in range(column_index_from_string(left), column_index_from_string(right) + 1)]
        assert all(f"{col}{row}" in model_cells for col in columns for row in range(top, bottom + 1)), named["name"]
    stored, info = decode_block(job.result)
    assert info.given.get("hidden") in ("", None) and "hidden_chosen" in stored.settings  # sent blank: the folds weighed none as well
    assert set(associated) == {entry.name.split(".", 1)[1] for entry in REGISTRY}


def test_names_from_data_show_as_text_and_run_nothing(app, base_url):
    lots = sheetnet_demo.coffee_lot_grades(rows=60, seed=2).drop(columns="lot").rename(columns={"grade": HOSTILE})
    table = [list(lots.columns)] + lots.astype(object).values.tolist()
    job = app.state.jobs.submit("hostile_target", [table, HOSTILE, "3", "epochs=30"])
    assert job.finished.wait(60) and job.state == "done", job.message
    csv = "\n".join([",".join(lots.columns)] + [",".join(str(v) for v in row) for row in lots.itertuples(index=False)])
    with playwright.sync_playwright() as driver:
        browser = driver.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
        page = browser.new_page()
        errors = []
        page.on("pageerror", lambda error: errors.append(str(error)))
        page.route("https://**/*", lambda route: route.abort())
        response = page.goto(f"{base_url}/addin/taskpane.html#token={TOKEN}")
        page.wait_for_function("() => document.getElementById('connection').textContent === 'connected'", timeout=20000)
        listed = page.inner_text("#models")
        assert f"hostile_target: {HOSTILE}," in listed  # the name as the characters it is
        # a failing training whose message quotes the name: the message is text too
        page.fill("#table-text", csv)
        page.fill("#target", HOSTILE + " (missing)")
        page.fill("#model-name", "second")
        page.click("#train")
        page.wait_for_function("() => document.getElementById('message').className === 'error'", timeout=30000)
        message = page.inner_text("#message")
        images = page.locator("img").count()
        pwned = page.evaluate("window.sheetnetPwned === undefined ? null : window.sheetnetPwned")
        policy = response.headers.get("content-security-policy", "")
        browser.close()
    assert HOSTILE in message and "no column" in message
    assert images == 0 and pwned is None and errors == []
    assert "script-src 'self' https://appsforoffice.microsoft.com" in policy and "object-src 'none'" in policy


def test_the_pane_refuses_to_replace_a_sheet_it_did_not_write(app, base_url):
    lots = sheetnet_demo.coffee_lot_grades(rows=60, seed=3).drop(columns="lot")
    table = [list(lots.columns)] + lots.astype(object).values.tolist()
    seed = {
        "sheets": [{"name": "Lots", "rows": table}, {"name": "SN card lots", "rows": [["my own notes"]]}],
        "selection": {"sheet": "Lots", "address": f"A1:{column_letters(len(table[0]))}{len(table)}"},
    }
    with playwright.sync_playwright() as driver:
        browser = driver.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
        page = browser.new_page()
        errors = []
        page.on("pageerror", lambda error: errors.append(str(error)))
        page.route("https://**/*", lambda route: route.abort())
        page.route(OFFICE_SCRIPT, lambda route: route.fulfill(body=STAND_IN.read_text(), content_type="text/javascript"))
        page.goto(f"{base_url}/addin/taskpane.html#token={TOKEN}")
        page.wait_for_function("() => document.getElementById('connection').textContent === 'connected'", timeout=20000)
        page.evaluate("seed => sheetnetStandIn.seed(seed)", seed)
        before = page.evaluate("sheetnetStandIn.snapshot()")
        page.fill("#target", "grade")
        page.fill("#model-name", "lots")
        page.fill("#settings", "epochs=30")
        page.click("#train")
        page.wait_for_function("() => document.getElementById('message').className === 'error'", timeout=90000)
        message = page.inner_text("#message")
        after = page.evaluate("sheetnetStandIn.snapshot()")
        browser.close()
    assert message == not_ours_message("SN card lots")  # the words of every other door
    assert after == before and errors == []  # nothing dropped, nothing written
