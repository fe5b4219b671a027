"""Every cell function through the Python API: shapes, headers, alignment, messages for bad cells."""

import numpy as np
import pytest
import sheetnet_demo
from sklearn.datasets import load_iris, load_wine

import sheetnet
from sheetnet import functions as cellfn
from sheetnet.block import decode_block
from sheetnet.cells import MARKER
from sheetnet.registry import REGISTRY, check_registry


def _cells(frame):
    return [list(frame.columns)] + frame.astype(object).values.tolist()


@pytest.fixture(scope="module")
def shipments():
    return _cells(sheetnet_demo.cold_chain_shipments(rows=240, seed=3))


@pytest.fixture(scope="module")
def trained(shipments):
    split = cellfn.split(shipments, 0.25, 4, "stratified spoiled")
    model = cellfn.train(shipments, "spoiled", "5", "ignore=shipment; epochs=300", split)
    assert not str(model[0][0]).startswith(MARKER), model
    return split, model


def _is_message(answer, *phrases):
    assert len(answer) == 1 and len(answer[0]) == 1, answer
    text = answer[0][0]
    assert text.startswith(MARKER), text
    for phrase in phrases:
        assert phrase in text, text
    return text


def test_registry_matches_the_python_functions():
    check_registry()
    assert [f.name for f in REGISTRY] == [
        "SHEETNET.SPLIT", "SHEETNET.TRAIN", "SHEETNET.PREDICT", "SHEETNET.SCORE", "SHEETNET.EXPLAIN", "SHEETNET.ABOUT", "SHEETNET.LAGS",
        "SHEETNET.GROUPS", "SHEETNET.SEARCH",
    ]
    assert [f.python_name for f in REGISTRY] == ["split", "train", "predict", "score", "explain", "about", "lags", "groups", "search"]


def test_split_marks_every_data_row_and_leaves_blank_rows_blank(shipments):
    table = shipments[:41] + [[None] * len(shipments[0])] + shipments[41:61]
    answer = cellfn.split(table, 0.25, 1)
    assert answer[0] == ["split"] and len(answer) == len(table)
    assert answer[41] == [""]
    marks = [row[0] for i, row in enumerate(answer[1:], start=1) if i != 41]
    assert marks.count("holdout") == 15 and marks.count("train") == 45


def test_split_modes(shipments):
    ordered = cellfn.split(shipments[:11], 0.3, 0, "ordered")
    assert [r[0] for r in ordered[1:]] == ["train"] * 7 + ["holdout"] * 3
    stratified = cellfn.split(shipments, 0.25, 0, "stratified spoiled")
    spoiled = [row[-1] for row in shipments[1:]]
    held = [s for s, mark in zip(spoiled, stratified[1:]) if mark[0] == "holdout"]
    assert abs(held.count("yes") / len(held) - spoiled.count("yes") / len(spoiled)) < 0.02
    _is_message(cellfn.split(shipments, 0.2, 0, "sideways"), "not known")


def test_train_returns_a_block_that_predicts_aligned_rows(shipments, trained):
    split, model = trained
    assert model[0][0] == "sheetnet model block"
    table = shipments[:5] + [[None] * len(shipments[0])] + shipments[5:10]
    answer = cellfn.predict(model, table, "value, probabilities, flag")
    assert answer[0] == ["predicted spoiled", "P(no)", "P(yes)", "outside training range"]
    assert len(answer) == len(table) and answer[5] == ["", "", "", ""]
    for row in answer[1:5] + answer[6:]:
        assert row[0] in ("yes", "no") and row[1] + row[2] == pytest.approx(1.0)
        assert (row[0] == "yes") == (row[2] >= 0.5)
        assert isinstance(row[3], bool)


def test_predict_matches_columns_by_name_in_any_order(shipments, trained):
    _, model = trained
    reordered = [list(reversed(row)) for row in shipments[:20]]
    assert cellfn.predict(model, reordered) == cellfn.predict(model, shipments[:20])


def test_score_on_holdout_rows_equals_the_metrics_stored_in_the_model(shipments, trained):
    split, model = trained
    scored = dict(map(tuple, cellfn.score(model, shipments, split)[1:]))
    assert scored["rows"] == 60
    about = dict(map(tuple, cellfn.about(model, shipments)[1:]))
    assert about["holdout accuracy"] == pytest.approx(scored["accuracy"], abs=1e-14)
    assert about["data since training"] == "unchanged"
    assert about["holdout rows"] == 60 and about["training rows"] == 180
    assert "bias" in about["caution"]


def test_about_notices_changed_data(shipments, trained):
    _, model = trained
    changed = [list(r) for r in shipments]
    changed[7][1] = changed[7][1] + 1.0
    about = dict(map(tuple, cellfn.about(model, changed)[1:]))
    assert about["data since training"].startswith("changed")


def test_explain_ranks_inputs(shipments, trained):
    _, model = trained
    answer = cellfn.explain(model, shipments)
    assert answer[0][0] == "input"
    names = [row[0] for row in answer[1:]]
    assert sorted(names) == sorted(["transit_hours", "peak_temp_c", "door_openings", "packaging", "route_km"])
    importances = [row[1] for row in answer[1:]]
    assert importances == sorted(importances, reverse=True)
    assert names[0] == "peak_temp_c"  # the generator makes heat the main driver of spoilage


def test_train_is_cached_by_content(shipments, monkeypatch):
    calls = []
    real_fit = cellfn.fit
    monkeypatch.setattr(cellfn, "fit", lambda *a, **k: calls.append(1) or real_fit(*a, **k))
    table = shipments[:80]
    first = cellfn.train(table, "spoiled", 3, "ignore=shipment; epochs=30")
    again = cellfn.train([list(r) for r in table], "spoiled", 3, "ignore=shipment; epochs=30")
    assert first == again and len(calls) == 1
    changed = [list(r) for r in table]
    changed[3][1] += 5.0
    retrained = cellfn.train(changed, "spoiled", 3, "ignore=shipment; epochs=30")
    assert len(calls) == 2 and retrained != first


def test_settings_as_a_two_column_range(shipments):
    block = cellfn.train(shipments[:60], "spoiled", 4, [["epochs", 7], ["ignore", "shipment"], ["validation_share", 0]])
    about = dict(map(tuple, cellfn.about(block)[1:]))
    assert about["epochs"] == 7 and about["layers"] == "7-4-1"


def test_lags_are_aligned_with_the_series():
    answer = cellfn.lags([["sales"], [10], [11], [12], [None], [14]], "1,2")
    assert answer == [["sales lag 1", "sales lag 2"], ["", ""], [10.0, ""], [11.0, 10.0], [12.0, 11.0], ["", 12.0]]
    _is_message(cellfn.lags([["sales"], [1], ["many"]], 1), "not a number in a numeric series", "row 3 of the table")


# --- bad cells and bad calls ---------------------------------------------------------------

def test_text_in_a_numeric_column_names_column_and_row(shipments):
    bad = [list(r) for r in shipments[:60]]
    bad[9][1] = "about forty"
    _is_message(cellfn.train(bad, "spoiled", 3, "ignore=shipment"), "column 'transit_hours'", "row 10 of the table", "text in a numeric column")


@pytest.mark.parametrize("error_value", ["#N/A", "#VALUE!", "#DIV/0!", "#REF!"])
def test_spreadsheet_error_values_are_named(shipments, trained, error_value):
    _, model = trained
    bad = [list(r) for r in shipments[:30]]
    bad[4][2] = error_value
    _is_message(cellfn.predict(model, bad), "column 'peak_temp_c'", "row 5 of the table", "spreadsheet error value")


def test_a_blank_cell_inside_a_row_is_named(shipments):
    bad = [list(r) for r in shipments[:60]]
    bad[12][3] = None
    _is_message(cellfn.train(bad, "spoiled", 3, "ignore=shipment"), "column 'door_openings'", "row 13 of the table", "blank")
    skipped = cellfn.train(bad, "spoiled", 3, "ignore=shipment; blank_rows=skip; epochs=20")
    assert dict(map(tuple, cellfn.about(skipped)[1:]))["training rows"] == 58


def test_blank_target_cells_are_named_by_the_target(shipments):
    bad = [list(r) for r in shipments[:60]]
    bad[20][-1] = None
    _is_message(cellfn.train(bad, "spoiled", 3, "ignore=shipment"), "column 'spoiled'", "row 21 of the table")


def test_split_of_another_height_is_refused(shipments):
    split = cellfn.split(shipments[:50], 0.2)
    _is_message(cellfn.train(shipments[:60], "spoiled", 3, "ignore=shipment", split), "split has 49 rows", "table has 59")


def test_too_few_rows_and_constant_targets(shipments):
    _is_message(cellfn.train(shipments[:3], "spoiled", 3, "ignore=shipment"), "at least 4 rows")
    constant = [list(r) for r in shipments[:30]]
    for row in constant[1:]:
        row[-1] = "no"
    _is_message(cellfn.train(constant, "spoiled", 3, "ignore=shipment"), "one class 'no'")


def test_unknown_category_at_prediction(shipments, trained):
    _, model = trained
    new = [list(r) for r in shipments[:10]]
    new[3][4] = "liquid nitrogen"
    _is_message(cellfn.predict(model, new), "column 'packaging', row 4 of the table", "category 'liquid nitrogen'", "known: dry ice, foam, gel pack")


def test_missing_columns_and_unknown_targets(shipments, trained):
    _, model = trained
    _is_message(cellfn.predict(model, [row[:3] for row in shipments[:10]]), "no column named")
    _is_message(cellfn.train(shipments, "rotten", 3), "no column named 'rotten'")


def test_oversized_ranges_are_refused(trained):
    _, model = trained
    huge = [["a"] * 30] + [[1.0] * 30 for _ in range(70_000)]
    _is_message(cellfn.predict(model, huge), "more than the 2,000,000 sheetnet reads")


def test_damaged_blocks_give_a_message_not_a_number(shipments, trained):
    _, model = trained
    edited = [list(r) for r in model]
    row = next(i for i, r in enumerate(edited) if r[0] == "" and isinstance(r[1], float))
    edited[row][1] += 0.01
    for call in (cellfn.predict, cellfn.score, cellfn.explain, cellfn.about):
        _is_message(call(edited, shipments) if call is not cellfn.about else call(edited), "checksum does not match")
    _is_message(cellfn.predict(model[:10], shipments), "checksum row is missing")
    _is_message(cellfn.predict("", shipments), "no model given")


def test_unexpected_failures_still_return_a_message(monkeypatch, shipments):
    def broken(*args, **kwargs):
        raise ZeroDivisionError("boom")

    monkeypatch.setattr(cellfn, "read_sheet_table", broken)
    _is_message(cellfn.split(shipments), "unexpected ZeroDivisionError: boom", "report")


# --- against outside references ------------------------------------------------------------

def test_wine_through_the_cell_functions_reaches_the_engine_accuracy():
    # reference data: scikit-learn's bundled wine recognition dataset
    data = load_wine(as_frame=True)
    frame = data.frame.rename(columns={"target": "cultivar"})
    table = _cells(frame)
    split = cellfn.split(table, 0.25, 0, "stratified cultivar")
    model = cellfn.train(table, "cultivar", 8, "seed=0", split)
    cell_accuracy = dict(map(tuple, cellfn.score(model, table, split)[1:]))["accuracy"]
    held = np.array([row[0] == "holdout" for row in split[1:]])
    engine = sheetnet.fit(frame.drop(columns="cultivar")[~held], frame["cultivar"][~held], hidden=(8,), seed=0)
    engine_accuracy = sheetnet.score(engine, frame.drop(columns="cultivar")[held], frame["cultivar"][held])["accuracy"]
    assert cell_accuracy == pytest.approx(engine_accuracy, abs=1e-12)
    assert cell_accuracy > 0.9


def test_a_blank_hidden_argument_trains_what_fit_trains_by_default():
    # reference data: scikit-learn's bundled iris dataset. Blank at every door is fit's default: the folds weigh
    # one layer of 4 and no hidden layer, and the model records which they kept
    data = load_iris(as_frame=True)
    frame = data.frame.rename(columns={"target": "species"})
    table = _cells(frame)
    split = cellfn.split(table, 0.25, 0, "stratified species")
    block = cellfn.train(table, "species", None, "seed=0", split)
    cell_model, info = decode_block(block)
    held = np.array([row[0] == "holdout" for row in split[1:]])
    engine = sheetnet.fit(frame.drop(columns="species")[~held], frame["species"][~held], seed=0)
    assert cell_model.hidden == engine.hidden and cell_model.settings["hidden_chosen"] == engine.settings["hidden_chosen"]
    for stored, fitted in zip(cell_model.members, engine.members, strict=True):  # the block keeps 15 significant digits
        np.testing.assert_allclose(stored.theta, fitted.theta, rtol=1e-13, atol=1e-15)
    assert info.given["hidden"] is None  # recorded blank, so a refresh weighs both again
    written, _ = decode_block(cellfn.train(table, "species", 4, "seed=0", split))
    assert written.hidden == (4,) and "hidden_chosen" not in written.settings  # widths written out are kept


def test_sunspot_forecast_with_lags_beats_the_naive_forecast():
    # reference data: statsmodels' bundled yearly sunspot numbers (1700-2008)
    from statsmodels.datasets import sunspots

    series = sunspots.load_pandas().data["SUNACTIVITY"].tolist()
    lagged = cellfn.lags([["sunspots"]] + [[v] for v in series], 9)
    table = [lagged[0] + ["sunspots"]] + [row + [v] for row, v in zip(lagged[1:], series)]
    split = cellfn.split(table, 0.2, 0, "ordered")
    model = cellfn.train(table, "sunspots", 4, "blank_rows=skip; seed=0", split)
    answer = cellfn.predict(model, table)
    held = [i for i, row in enumerate(split[1:]) if row[0] == "holdout"]
    actual = np.array([series[i] for i in held])
    forecast = np.array([answer[i + 1][0] for i in held])
    naive = np.array([series[i - 1] for i in held])  # last year's value
    model_rmse = np.sqrt(np.mean((forecast - actual) ** 2))
    naive_rmse = np.sqrt(np.mean((naive - actual) ** 2))
    assert model_rmse < 0.9 * naive_rmse, (model_rmse, naive_rmse)


def test_a_holdout_of_the_last_rows_makes_train_tune_on_folds_in_time_order():
    # reference data: statsmodels' bundled yearly sunspot numbers; SPLIT's ordered mode holds out the last years
    from statsmodels.datasets import sunspots

    series = sunspots.load_pandas().data["SUNACTIVITY"].tolist()
    lagged = cellfn.lags([["sunspots"]] + [[v] for v in series], 9)
    table = [lagged[0] + ["sunspots"]] + [row + [v] for row, v in zip(lagged[1:], series)]
    ordered, _ = decode_block(cellfn.train(table, "sunspots", None, "blank_rows=skip; seed=0", cellfn.split(table, 0.2, 0, "ordered")))
    shuffled, _ = decode_block(cellfn.train(table, "sunspots", None, "blank_rows=skip; seed=0", cellfn.split(table, 0.2, 0, "random")))
    assert (ordered.settings["inner_folds"], shuffled.settings["inner_folds"]) == ("ordered", "shuffled")
    given, info = decode_block(cellfn.train(table, "sunspots", None, "blank_rows=skip; seed=0; inner_folds=shuffled", cellfn.split(table, 0.2, 0, "ordered")))
    assert given.settings["inner_folds"] == "shuffled" and info.given["inner_folds"] == "shuffled"  # a setting given wins


def test_dates_in_a_numeric_column_get_advice(shipments):
    import datetime

    bad = [list(r) for r in shipments[:60]]
    bad[7][1] = datetime.datetime(2026, 3, 1)
    _is_message(cellfn.train(bad, "spoiled", 3, "ignore=shipment"), "column 'transit_hours'", "row 8 of the table", "a date or time in a numeric column")


@pytest.fixture(scope="module")
def weeks():
    table = sheetnet_demo.parcel_table(sheetnet_demo.depot_parcel_weeks(weeks=200, seed=5)).drop(columns="week starting")
    return _cells(table)  # the target, next change, is the last column


def test_predict_interval_is_the_prediction_plus_minus_the_holdout_quantile(weeks):
    target = weeks[0][-1]
    split = cellfn.split(weeks, 0.3, 2)
    block = cellfn.train(weeks, target, "4", "epochs=200; interval_level=80%; repeats=2; workers=1", split)
    answer = cellfn.predict(block, weeks, "value, interval, spread")
    assert answer[0] == [f"predicted {target}", f"{target} low (80 % interval)", f"{target} high (80 % interval)",
                         f"{target} lowest network", f"{target} highest network"]
    # the stored quantile is the ceil((n + 1) * 0.8)-th smallest absolute residual over the holdout rows (Lei et al. 2018)
    held = [i for i, mark in enumerate(split[1:], start=1) if mark[0] == "holdout"]
    residuals = sorted(abs(weeks[i][-1] - answer[i][0]) for i in held)
    quantile = residuals[int(np.ceil((len(held) + 1) * 0.8)) - 1]
    for row in answer[1:]:
        assert row[1] == pytest.approx(row[0] - quantile, abs=1e-9) and row[2] == pytest.approx(row[0] + quantile, abs=1e-9)
        assert row[3] <= row[4]
    # inside means |actual - predicted| <= quantile; a row on the edge may land a rounding step outside pred + q
    inside = [answer[i][1] - 1e-9 <= weeks[i][-1] <= answer[i][2] + 1e-9 for i in held]
    assert sum(inside) == int(np.ceil((len(held) + 1) * 0.8))  # the holdout rows themselves, by construction
    about = dict(map(tuple, cellfn.about(block)[1:]))
    assert "80 %" in about["prediction interval"] and f"{len(held)} holdout rows" in about["prediction interval"]
    assert about["holdout rmse 80 % interval"].count(" to ") == 1


def test_interval_without_holdout_rows_says_what_to_do(weeks):
    block = cellfn.train(weeks[:80], weeks[0][-1], "3", "epochs=50")
    _is_message(cellfn.predict(block, weeks[:5], "interval"), "no prediction interval", "split")
    _is_message(cellfn.predict(block, weeks[:5], "spread"), "repeats=5")


def test_predict_set_lists_the_classes_the_row_may_be(shipments, trained):
    split, model = trained
    answer = [[row[2], row[0], row[1]] for row in cellfn.predict(model, shipments, "set, probabilities")]
    assert answer[0] == ["spoiled may be (90 % set)", "P(no)", "P(yes)"]
    about = dict(map(tuple, cellfn.about(model)[1:]))
    floor = float(about["prediction set"].split("probability ")[1].split(" or more")[0])
    for row in answer[1:]:
        expected = [label for label, p in (("no", row[1]), ("yes", row[2])) if p >= floor - 5e-4] or ["none"]
        if abs(row[1] - floor) > 5e-4 and abs(row[2] - floor) > 5e-4:  # the floor is shown to 3 digits
            assert row[0] == ", ".join(expected)
    _is_message(cellfn.predict(model, shipments, "interval"), "output set")


def test_score_with_error_bars_states_method_and_words(shipments, trained):
    split, model = trained
    plain = cellfn.score(model, shipments, split)
    wide = cellfn.score(model, shipments, split, "90%")
    assert wide[0] == ["metric", "value", "low (90 %)", "high (90 %)", "in words"]
    by_name = {row[0]: row for row in wide[1:]}
    for name, value in plain[1:]:
        assert by_name[name][1] == value
    low, high = by_name["accuracy"][2:4]
    assert low <= by_name["accuracy"][1] <= high
    assert by_name["balanced_accuracy"][4].startswith("Balanced accuracy ") and "%" in by_name["balanced_accuracy"][4]
    assert "1000 resamples, seed 0" in by_name["error bars"][1] and "percentile bootstrap" in by_name["error bars"][1]
    _is_message(cellfn.score(model, shipments, split, "120%"), "level")


def test_groups_by_a_column_match_a_count_over_the_rows(shipments, trained):
    split, model = trained
    answer = cellfn.groups(model, shipments, "packaging", split)
    header = answer[0]
    assert header[:3] == ["packaging", "rows", "Accuracy"] and "False-positive rate" in header
    predicted = [row[0] for row in cellfn.predict(model, shipments)[1:]]
    column = shipments[0].index("packaging")
    held = [i for i, mark in enumerate(split[1:]) if mark[0] == "holdout"]
    for row in answer[1:]:
        if row[0] in ("largest gap", "between", "positive class", "caution"):
            continue
        mine = [i for i in held if shipments[i + 1][column] == row[0]]
        assert row[1] == len(mine)
        assert row[2] == pytest.approx(np.mean([predicted[i] == shipments[i + 1][-1] for i in mine]))
        assert row[header.index("Predicted positive rate")] == pytest.approx(np.mean([predicted[i] == "yes" for i in mine]))
    labels = [row[0] for row in answer]
    assert labels[-4:] == ["largest gap", "between", "positive class", "caution"] and "local law" in answer[-1][1]
    _is_message(cellfn.groups(model, shipments, "transit_hours", split), "different values")
    _is_message(cellfn.groups(model, shipments, "", split), "no group column")
