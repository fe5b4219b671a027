"""The workbook service: names, placements, one auto mode, one seed, refresh with the settings as given."""

import json

import numpy as np
import pytest
import sheetnet_demo

from sheetnet import functions, service
from sheetnet.block import decode_block
from sheetnet.errors import InputError, SettingError
from sheetnet.placements import placements_from_json


@pytest.fixture(scope="module")
def table():
    frame = sheetnet_demo.coffee_lot_grades(rows=90, seed=2)
    return [list(frame.columns)] + frame.astype(object).values.tolist()


def test_long_model_names_get_their_own_sheets_and_case_is_one_name():
    north, south = service.model_sheet_name("grading_model_for_region_north"), service.model_sheet_name("grading_model_for_region_south")
    assert north != south and len(north) <= 31 and len(south) <= 31
    assert north == service.model_sheet_name("grading_model_for_region_north")  # stable
    assert service.model_sheet_name("Grades").casefold() == service.model_sheet_name("grades").casefold()
    assert service.model_sheet_name("grades") == "sheetnet_grades"


def test_constants_belong_to_their_own_model_even_when_one_name_extends_another():
    names = ["a", "snf_a_m1_W1n", "snf_a_target", "a_b", "snf_a_b_m1_W1n", "snf_a_b_m1_b2", "user_name"]
    assert service.names_of_model("a", names) == ["a", "snf_a_m1_W1n", "snf_a_target"]
    assert service.names_of_model("A_B", names) == ["a_b", "snf_a_b_m1_W1n", "snf_a_b_m1_b2"]
    assert service.constant_owner("snf_a_b_m2_W1c3") == "a_b"
    assert service.constant_owner("user_name") is None


@pytest.mark.parametrize("name", ["A1", "AB12", "1model", "has space", "", "R1C1"])
def test_names_that_cannot_be_models_are_refused(name):
    with pytest.raises(InputError, match="cannot be a model name"):
        service.check_model_name(name)


def test_model_placements_lay_out_block_and_constants_and_travel_as_json(table):
    block = functions.train(table, "grade", "3", "ignore=lot; epochs=60")
    placements = service.model_placements("grades", block, ["grades", "snf_grades_m1_W9", "snf_grades_x_m1_b1"])
    assert placements.drop_names == ("grades", "snf_grades_m1_W9")  # the old constants go; another model's stay
    assert placements.sheets[0].title == "sheetnet_grades" and placements.sheets[0].visibility == "veryHidden"
    first = placements.cells[0]
    assert (first.top, first.left, first.height) == (1, 1, len(block))
    assert placements.names[0].reference == f"'sheetnet_grades'!$A$1:$I${len(block)}"
    assert all(n.left == service.CONSTANTS_COLUMN for n in placements.names[1:])
    assert placements_from_json(json.loads(json.dumps(placements.to_json()))) == placements


def test_auto_holdout_mode_follows_the_task_the_target_is_learned_as():
    rows = [["x", "flag", "amount"]] + [[float(i), float(i % 2), i * 1.5 + (i % 7)] for i in range(60)]
    assert service.split_mode(rows, "flag", "auto", None) == "stratified flag"  # 0/1 numbers are two classes
    assert service.split_mode(rows, "flag", "auto", "task=regression") == "random"
    assert service.split_mode(rows, "amount", "auto", None) == "random"
    assert service.split_mode(rows, "amount", "ordered", None) == "ordered"
    with pytest.raises(SettingError, match="holdout mode 'sideways'"):
        service.split_mode(rows, "amount", "sideways", None)


def test_one_seed_seeds_the_split_and_the_training(table):
    trained = service.train_model(service.TrainRequest(table, "grade", "3", "ignore=lot; epochs=60", seed=5, address="Lots!A1:G91"))
    direct_split = functions.split(table, 0.2, 5, "stratified grade")
    assert trained.split == direct_split
    direct = functions.train(table, "grade", "3", "ignore=lot; epochs=60; seed=5", direct_split)
    assert np.array_equal(decode_block(trained.block)[0].members[0].theta, decode_block(direct)[0].members[0].theta)
    model, info = decode_block(trained.block)
    assert model.seed == 5 and info.source == ("Lots!A1:G91", 0.2, "auto", 5)
    from_settings = service.train_model(service.TrainRequest(table, "grade", "3", "ignore=lot; epochs=60; seed=5"))
    assert from_settings.split == direct_split
    with pytest.raises(SettingError, match="seed is given twice"):
        service.train_model(service.TrainRequest(table, "grade", "3", "seed=4", seed=5))


ALGORITHM_SETTINGS = [
    "algorithm=gd; rate=0.5; momentum=0.5; batch=16; epochs=40",
    "algorithm=rprop+; rprop_increase=1.3; rprop_decrease=0.4; rprop_step=0.05; epochs=40",
    "algorithm=irprop+; rprop_step_max=7; epochs=40; tolerance=1",
    "algorithm=adam; rate=0.02; adam_beta1=0.8; adam_beta2=0.99; batch=32; epochs=30",
    "algorithm=lbfgs; lbfgs_memory=4; decay=0.001; epochs=50; validation_share=0",
]


@pytest.mark.parametrize("settings", ALGORITHM_SETTINGS)
def test_refresh_retrains_with_every_setting_as_given(table, settings):
    trained = service.train_model(service.TrainRequest(table, "grade", "4,2", f"ignore=lot; {settings}", seed=3, address="Lots!A1:G91"))
    changed = [row[:] for row in table]
    changed[5][1] = float(changed[5][1]) + 0.75
    outcome = service.refresh_model("grades", trained.block, lambda address: changed)
    assert outcome.state == "retrained" and outcome.trained is not None
    before, before_info = decode_block(trained.block)
    after, after_info = decode_block(outcome.trained.block)
    # the settings as used repeat, but for what the folds choose from the data when it is not given (the decay)
    from_data = set() if "decay=" in settings else {"decay"}
    kept_after, kept_before = ({k: v for k, v in m.settings.items() if k not in from_data} for m in (after, before))
    assert kept_after == kept_before and after.settings.keys() == before.settings.keys()
    assert {k: type(v) for k, v in after.settings.items()} == {k: type(v) for k, v in before.settings.items()}
    assert dict(after_info.given) == dict(before_info.given) and after.hidden == before.hidden and after.seed == 3
    assert after_info.source == before_info.source
    # and exactly what training the changed table directly with the same request gives
    direct = service.train_model(service.TrainRequest(changed, "grade", "4,2", f"ignore=lot; {settings}", seed=3, address="Lots!A1:G91"))
    assert np.array_equal(decode_block(direct.block)[0].members[0].theta, after.members[0].theta)


def test_refresh_leaves_unchanged_and_sourceless_models_alone(table):
    trained = service.train_model(service.TrainRequest(table, "grade", "3", "ignore=lot; epochs=30", address="Lots!A1:G91"))
    assert service.refresh_model("grades", trained.block, lambda address: table).state == "unchanged"
    bare = functions.train(table, "grade", "3", "ignore=lot; epochs=30")
    outcome = service.refresh_model("bare", bare, lambda address: table)
    assert outcome.state == "no-source" and "does not record the range" in outcome.message
    assert service.refresh_summary([outcome]) == "sheetnet: not from a known range, left as they are: bare"


def _card(placements, name):
    title = service.card_sheet_name(name)
    blocks = [c for c in placements.cells if c.sheet == title]
    assert [b.values for b in blocks[:1]] == [((service.OWNED_MARK,),)]
    return {row[0]: row for row in blocks[1].values if row[0]}


def test_every_stored_model_gets_a_card_with_use_data_metrics_groups_limits_and_cautions(table):
    request = service.TrainRequest(
        table, "grade", "3", "epochs=40; ignore=lot; intended_use=sorting lots for cupping; group=process", seed=1, address="Data!A1:G91"
    )
    trained = service.train_model(request)
    placements = service.model_placements("grades", trained.block)
    assert [(s.title, s.visibility) for s in placements.sheets] == [("sheetnet_grades", "veryHidden"), ("sn card grades", "visible")]
    assert "sn card grades" in placements.drop_sheets and "sn card grades" in service.removal_placements("grades", []).drop_sheets
    card = _card(placements, "grades")
    assert card["intended use"][1] == "sorting lots for cupping"
    assert card["training rows"][1] == 72 and card["holdout rows"][1] == 18 and card["source range"][1] == "Data!A1:G91"
    accuracy = card["Accuracy"]
    _, info = decode_block(trained.block)
    assert accuracy[1] == info.holdout_metrics["accuracy"]  # a number, shown as a percentage by its format
    assert accuracy[2].startswith("90 % interval") and accuracy[2].endswith("(accuracy)") and "%" in accuracy[2]
    title = service.card_sheet_name("grades")
    rows = next(b for b in placements.cells if b.sheet == title and b.top == 2).values
    at = {(r, c): f.format for f in placements.formats if f.sheet == title for r in range(f.top, f.bottom + 1) for c in range(f.left, f.right + 1)}
    items = [r[0] for r in rows]
    assert at[(2 + items.index("Accuracy"), 2)] == "percent1" and at[(2 + items.index("Balanced accuracy"), 2)] == "percent1"
    assert at[(2 + items.index("Log-loss"), 2)] == "decimal3" and (2 + items.index("training rows"), 2) not in at
    assert all(isinstance(rows[r - 2][c - 1], float) for r, c in at)  # only numbers get a number format
    assert placements.to_json()["formats"][0]["excel"] in ("0.0%", "0.000") and placements.to_json()["formats"][0]["calc"]
    assert placements_from_json(placements.to_json()) == placements
    assert "every class with probability" in card["prediction set"][1]
    process = [r for r in table[1:] if r[table[0].index("process")] is not None]
    assert info.group_column == "process" and sum(v["rows"] for v in info.group_metrics.values()) == 18 and len(process) == 90
    for label, values in info.group_metrics.items():
        assert card[label][1] == f"{int(values['rows'])} rows"
    assert "altitude_m range" in card and "process categories" in card
    title = service.card_sheet_name("grades")
    texts = " ".join(str(v) for block in placements.cells if block.sheet == title for row in block.values for v in row)
    assert "decision aid" in texts and "local law" in texts and "credit, hiring, medical or safety" in texts
    assert "needs a person's judgement" in texts  # the caution beside the group gaps


def test_a_card_for_a_format_2_block_and_one_without_a_holdout(table):
    with open("tests/data/block_format_2.json") as f:
        old = json.load(f)["block"]
    card = _card(service.model_placements("old", old), "old")
    assert card["intended use"][1].startswith("not stated") and "Holdout metrics" in card
    block = functions.train_block(table, "grade", "2", "epochs=5; ignore=lot")
    card = _card(service.model_placements("plain", block), "plain")
    assert card["holdout metrics"][1].startswith("none") and card["no holdout rows"][1] == 0


def test_a_users_sheet_named_like_a_card_is_never_replaced(tmp_path, table):
    import openpyxl

    from sheetnet.workbook import open_book
    from sheetnet.workbook_models import check_storable

    book = openpyxl.Workbook()
    book.active.title = "Data"
    book.create_sheet("SN card grades")["A1"] = "my own notes"
    book.save(tmp_path / "mine.xlsx")
    with pytest.raises(InputError, match="sheet 'sn card grades' that sheetnet did not write"):
        check_storable(open_book(tmp_path / "mine.xlsx"), "grades")


def test_the_file_door_writes_number_formats_and_column_widths_and_keeps_the_users_styles(tmp_path, table):
    import openpyxl

    from sheetnet import cli

    book = openpyxl.Workbook()
    book.active.title = "Data"
    for row in table:
        book.active.append(row)
    book.active["A1"].number_format = "0.00000"  # the user's own style must keep its meaning
    book.save(tmp_path / "lots.xlsx")
    args = ["train", str(tmp_path / "lots.xlsx"), "--table", f"Data!A1:G{len(table)}", "--target", "grade", "--name", "grades",
            "--set", "ignore=lot", "--set", "epochs=40"]
    assert cli.main(args) == 0
    saved = openpyxl.load_workbook(tmp_path / "lots.xlsx")
    assert saved["Data"]["A1"].number_format == "0.00000"
    card = saved["sn card grades"]
    found = {row[0].value: row[1] for row in card.iter_rows(min_row=2, max_col=2)}
    assert isinstance(found["Accuracy"].value, float) and found["Accuracy"].number_format == "0.0%"
    assert found["Log-loss"].number_format == "0.000" and found["training rows"].number_format == "General"
    assert card.column_dimensions["A"].width > len("Balanced accuracy") and card.column_dimensions["A"].customWidth
    results = saved["sn grades"]
    about = {row[0].value: row[1] for row in results.iter_rows(min_row=4, min_col=7, max_col=8)}
    assert about["holdout accuracy"].number_format == "0.0%" and about["holdout log_loss"].number_format == "0.000"
    assert about["holdout rows"].number_format == "General"
    assert results.column_dimensions["G"].width >= len("holdout balanced_accuracy 90 % interval")


def test_predictions_are_shown_at_sensible_decimals():
    answer = [["predicted price", "P(no)", "P(yes)", "class"], [1234.5678, 0.123456, 0.876544, "yes"], [987.654321, 0.5, 0.5, "no"]]
    shown = service.predictions_shown(answer)
    assert shown[0] == answer[0] and shown[1][3] == "yes"
    assert [v.format for v in shown[1][:3]] == ["integer", "decimal3", "decimal3"]  # about four significant digits of a price in the thousands
    assert [v.value for v in shown[2][:3]] == [987.654321, 0.5, 0.5]  # the numbers themselves unchanged
    assert service.value_format([0.0123, 0.0456]) == "decimal4" and service.value_format([12.5, 30.25]) == "decimal2"
    assert service.value_format([1, 0, 1]) == "integer"  # class labels written as numbers
