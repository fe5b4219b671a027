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
    assert dict(after.settings) == dict(before.settings)
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
