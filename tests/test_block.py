"""The model block: round trips, tamper detection, versions, and that reading it runs nothing."""

import dataclasses
import functools
import json
from pathlib import Path
from types import MappingProxyType

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import sheetnet
from sheetnet import block
from sheetnet.block import BlockError, BlockInfo, decode_block, encode_block
from sheetnet.settings import SETTINGS, resolve_settings

INFO = BlockInfo("output", "2026-01-01T00:00:00Z", "sheetnet test", "f" * 64, 80, 20, {"rmse": 0.25})
DATA = Path(__file__).parent / "data"
FIXTURE = DATA / "block_format_1.json"


def _mixed_model(rng, task="regression", repeats=1):
    frame = pd.DataFrame({"size": rng.normal(10, 2, 80), "kind": rng.choice(["red", "blue", "green"], 80), "depth": rng.uniform(0, 1, 80)})
    signal = frame["size"] * 0.3 + (frame["kind"] == "red") - frame["depth"]
    if task == "regression":
        y = signal + rng.normal(0, 0.1, 80)
    elif task == "binary":
        y = np.where(signal > signal.median(), "high", "low")
    else:
        y = np.digitize(signal, np.quantile(signal, [0.33, 0.66])) * 10  # labels 0, 10, 20
    return frame, sheetnet.fit(frame, y, hidden=(4, 3), seed=2, repeats=repeats, workers=1, epochs=60)


@pytest.mark.parametrize("task", ["regression", "binary", "multiclass"])
def test_round_trip_predicts_like_the_model(task, rng):
    frame, model = _mixed_model(rng, task, repeats=2)
    cells = encode_block(model, INFO)
    decoded, info = decode_block(cells)
    assert info == INFO
    assert decoded.classes == model.classes and decoded.input_names == model.input_names
    if task == "regression":
        np.testing.assert_allclose(decoded.predict(frame), model.predict(frame), rtol=1e-12)
    else:
        np.testing.assert_allclose(decoded.predict_proba(frame), model.predict_proba(frame), rtol=1e-12, atol=1e-14)
        assert decoded.predict(frame).tolist() == model.predict(frame).tolist()
    again, _ = decode_block(encode_block(decoded, INFO))
    np.testing.assert_array_equal(again.members[1].theta, decoded.members[1].theta)  # stored values are stable


def test_block_holds_only_numbers_and_short_texts(rng):
    _, model = _mixed_model(rng)
    cells = encode_block(model, INFO)
    assert {len(row) for row in cells} == {block.WIDTH}
    for row in cells:
        for value in row:
            assert isinstance(value, (int, float, str)) and not isinstance(value, bool)
            assert not isinstance(value, str) or len(value) < 256


def _edited(value):
    if isinstance(value, str):
        return value + "x" if value else 0.5
    return value * 1.001 + 1e-9


def test_every_single_cell_edit_is_detected(rng):
    frame = pd.DataFrame({"a": rng.normal(size=30), "b": rng.choice(["p", "q"], 30)})
    model = sheetnet.fit(frame, rng.normal(size=30), hidden=(2,), epochs=5)
    cells = encode_block(model, INFO)
    for i, row in enumerate(cells):
        for j, value in enumerate(row):
            tampered = [list(r) for r in cells]
            tampered[i][j] = _edited(value)
            with pytest.raises(BlockError):
                decode_block(tampered)


def test_truncated_and_shuffled_blocks_are_refused(rng):
    _, model = _mixed_model(rng)
    cells = encode_block(model, INFO)
    with pytest.raises(BlockError, match="checksum row is missing"):
        decode_block(cells[:-3])
    with pytest.raises(BlockError, match="checksum does not match"):
        decode_block(cells[:5] + cells[6:])
    with pytest.raises(BlockError, match="not a sheetnet model block"):
        decode_block([["price", 3.0]])
    with pytest.raises(BlockError, match="not a model block"):
        decode_block("SHEETNET.TRAIN")


def test_a_newer_format_asks_for_an_upgrade(rng):
    _, model = _mixed_model(rng)
    cells = encode_block(model, INFO)
    cells[0][1] = block.FORMAT_VERSION + 1
    with pytest.raises(BlockError, match="newer sheetnet"):
        decode_block(cells)


def _resealed(cells):
    """Recompute the checksum after an edit, as a deliberate forger would."""
    records, _ = block._records_of(cells[:-1] + [["checksum", ""] + [""] * (block.WIDTH - 2)])
    return cells[:-1] + [["checksum", block.checksum(records)] + [""] * (block.WIDTH - 2)]


def test_a_forged_block_is_read_as_data_and_never_run(rng):
    _, model = _mixed_model(rng)
    cells = encode_block(model, INFO)
    row = next(i for i, r in enumerate(cells) if r[0] == "network")
    cells[row][1] = "__import__('os').system('echo hacked')"
    with pytest.raises(BlockError, match="activation .* does not know"):
        decode_block(_resealed(cells))


def test_a_forged_block_with_missing_weights_is_refused(rng):
    _, model = _mixed_model(rng)
    cells = encode_block(model, INFO)
    weights = next(i for i, r in enumerate(cells) if r[0] == "weights")
    cells = cells[: weights + 2] + cells[weights + 3:]
    with pytest.raises(BlockError, match="weights of network 1 are missing or cut short"):
        decode_block(_resealed(cells))


def test_blocks_of_format_1_stay_readable():
    # written once by sheetnet 0.1.0 (format 1) and kept: later versions must read it and predict the same
    stored = json.loads(FIXTURE.read_text())
    model, info = decode_block(stored["block"])
    assert info.target == "output"
    np.testing.assert_allclose(model.predict(pd.DataFrame(stored["rows"])), stored["predictions"], rtol=1e-12)


def test_blocks_of_format_1_read_setting_types_from_the_declarations():
    model, info = decode_block(json.loads(FIXTURE.read_text())["block"])
    assert model.format_version == 1 and info.given == {}
    declared = {s.name: s.kind for s in SETTINGS}
    for name, value in model.settings.items():
        assert value is None or type(value) is declared[name], name
    # format 1 wrote whole-number floats as bare numbers: 50.0 for a float setting stays a float
    assert model.settings["rprop_step_max"] == 50.0 and type(model.settings["rprop_step_max"]) is float
    assert model.settings["rate"] == 0.0 and type(model.settings["rate"]) is float
    assert model.settings["epochs"] == 50 and type(model.settings["epochs"]) is int
    assert model.settings["workers"] is None


def test_blocks_of_format_2_stay_readable():
    # written once when format 2 began (tests/data/block_format_2.json) and kept: later versions must read it
    # and predict the same. Binary classifier, a text input, two repeats of 400 epochs with validation curves.
    stored = json.loads((DATA / "block_format_2.json").read_text())
    model, info = decode_block(stored["block"])
    assert model.format_version == 2
    assert (info.target, info.blank_rows, info.source) == ("status", "skip", ("'Deliveries'!A1:D201", 0.2, "stratified", 5))
    assert info.given["hidden"] == "5,3" and info.given["categories"] is None
    assert type(info.given["patience"]) is float and type(info.given["decay"]) is int
    assert model.settings["threshold"] == 0.4 and type(model.settings["tolerance"]) is float
    rows = pd.DataFrame(stored["rows"])
    np.testing.assert_allclose(model.predict_proba(rows), stored["probabilities"], rtol=1e-12)
    assert model.predict(rows).tolist() == stored["predictions"]


def _other_value(setting):
    """A valid value other than the default, preferring whole-number floats (the type a round trip used to lose)."""
    if setting.choices:
        return next(c for c in setting.choices if c != setting.default)
    candidates = (1.0, 0.0, 0.25, 3.0) if setting.kind is float else (2, 3, 1)
    return next(
        v for v in candidates
        if v != setting.default and (setting.low is None or v >= setting.low) and (setting.high is None or v <= setting.high)
    )


def _exactly(mapping):
    return {name: (type(value), value) for name, value in mapping.items()}


def test_every_setting_keeps_its_type_and_value(rng):
    _, model = _mixed_model(rng)
    for setting in SETTINGS:
        used = resolve_settings({setting.name: _other_value(setting)})
        with_setting = dataclasses.replace(model, settings=MappingProxyType(used))
        decoded, _ = decode_block(encode_block(with_setting, INFO))
        assert _exactly(decoded.settings) == _exactly(used), setting.name
    defaults = resolve_settings({})  # None for the settings that pick for themselves
    decoded, _ = decode_block(encode_block(dataclasses.replace(model, settings=MappingProxyType(defaults)), INFO))
    assert _exactly(decoded.settings) == _exactly(defaults)
    assert decoded.settings["validation_share"] is None


def test_the_arguments_as_given_come_back_exactly(rng):
    _, model = _mixed_model(rng)
    given = {
        "hidden": "8,4", "epochs": "500", "rate": 0.30000000000000004, "tolerance": 1.0, "patience": 6.0, "repeats": 6,
        "seed": 12345678901234567890, "ignore": "id, name", "inputs": None, "categories": "  ", "blank_rows": "Skip",
        "threshold": True, "task": "", "decay": 0.0,
    }
    for hidden in ("8,4", 6, 6.0, None):
        info = dataclasses.replace(INFO, given={**given, "hidden": hidden})
        _, decoded = decode_block(encode_block(model, info))
        assert _exactly(decoded.given) == _exactly(info.given)
        assert list(decoded.given) == list(info.given)  # in the order given
        assert decoded == info


def test_arguments_the_block_cannot_keep_are_refused_when_writing(rng):
    _, model = _mixed_model(rng)
    with pytest.raises(sheetnet.errors.ModelError, match="the argument 'rate' is infinity, not a finite number"):
        encode_block(model, dataclasses.replace(INFO, given={"rate": float("inf")}))
    with pytest.raises(sheetnet.errors.ModelError, match="the argument 'epochs' is a list"):
        encode_block(model, dataclasses.replace(INFO, given={"epochs": [1, 2]}))


# --- extreme values and tampered fields ---------------------------------------------------

LARGEST_KEPT = 1.79769313486231e308  # the largest magnitude whose 15-digit rounding is still finite
LARGEST_FLOAT = 1.7976931348623157e308  # rounds to '1.79769313486232e+308', which reads back as infinity


def _with_input_scaling(model, mean, scale=1.0):
    first = model.preparation.inputs[0]
    inputs = (dataclasses.replace(first, mean=mean, scale=scale), *model.preparation.inputs[1:])
    return dataclasses.replace(model, preparation=dataclasses.replace(model.preparation, inputs=inputs))


@pytest.mark.parametrize("value", [1e308, LARGEST_KEPT, -LARGEST_KEPT, 5e-324])
def test_huge_and_tiny_finite_numbers_round_trip(rng, value):
    _, model = _mixed_model(rng)
    extreme = _with_input_scaling(model, value)
    info = dataclasses.replace(INFO, holdout_metrics={"rmse": abs(value)})
    cells = json.loads(json.dumps(encode_block(extreme, info)))  # as a file would keep them
    decoded, decoded_info = decode_block(cells)
    assert decoded.preparation.inputs[0].mean == float(f"{value:.15g}")
    assert decoded_info.holdout_metrics["rmse"] == float(f"{abs(value):.15g}")


@pytest.mark.parametrize("value", [LARGEST_FLOAT, -LARGEST_FLOAT, float("inf"), float("nan")])
def test_numbers_a_block_cannot_keep_are_refused_when_writing(rng, value):
    _, model = _mixed_model(rng)
    with pytest.raises(sheetnet.errors.ModelError, match=r"cannot be stored in a block: the scaling of input 'size' holds a number .* divide that column"):
        encode_block(_with_input_scaling(model, value), INFO)
    with pytest.raises(sheetnet.errors.ModelError, match=r"the holdout metric 'rmse' holds a number that is infinite"):
        encode_block(model, dataclasses.replace(INFO, holdout_metrics={"rmse": value}))
    theta = np.array(model.members[0].theta)
    theta[3] = value
    member = dataclasses.replace(model.members[0], theta=theta)
    with pytest.raises(sheetnet.errors.ModelError, match=r"the weights of network 1 holds .* lower the setting 'rate'"):
        encode_block(dataclasses.replace(model, members=(member,)), INFO)


def test_whole_numbers_and_texts_a_spreadsheet_would_change_are_refused(rng):
    _, model = _mixed_model(rng)
    with pytest.raises(sheetnet.errors.ModelError, match=r"the seed or the layer sizes holds the whole number 1000000000000000, longer than the 15 digits"):
        encode_block(dataclasses.replace(model, seed=10**15), INFO)
    with pytest.raises(sheetnet.errors.ModelError, match=r"split's holdout share or seed holds the whole number"):
        encode_block(model, dataclasses.replace(INFO, source=("Data!A1:C9", 0.2, "random", 10**16)))
    with pytest.raises(sheetnet.errors.ModelError, match=r"a text of 40,000 characters, more than the 32,767 a cell holds"):
        encode_block(model, dataclasses.replace(INFO, target="t" * 40_000))
    with pytest.raises(sheetnet.errors.ModelError, match=r"the argument 'seed' is a whole number of thousands of digits"):
        encode_block(model, dataclasses.replace(INFO, given={"seed": 10**5000}))
    decode_block(encode_block(dataclasses.replace(model, seed=10**15 - 1), INFO))  # 15 digits are kept


@functools.lru_cache(maxsize=None)
def _small_block(task):
    rng = np.random.default_rng(7)
    frame, model = _mixed_model(rng, task, repeats=2)
    info = dataclasses.replace(INFO, source=("Data!A1:D81", 0.2, "random", 3), given={"hidden": "4,3", "epochs": 60, "seed": None, "rate": 0.5})
    return frame, encode_block(model, info)


def _tampered(cells, key, position, value, occurrence=0):
    rows = [i for i, r in enumerate(cells) if r[0] == key]
    edited = [list(r) for r in cells]
    edited[rows[occurrence]][position] = value
    return _resealed(edited)


@pytest.mark.parametrize(
    "key, position, value, message",
    [
        ("network", 4, 10**9, "number of layers is 1000000000, not a whole number from 2 to"),  # a huge layer count
        ("network", 4, float("inf"), "number of layers is inf"),
        ("network", 3, -1, "seed is -1"),
        ("rows", 1, float("nan"), "row count is nan"),
        ("rows", 2, 1e300, "row count is 1e[+]300"),
        ("member", 3, float("inf"), "number of epochs of network 1 is inf"),
        ("member", 3, 0, "number of epochs of network 1 is 0"),
        ("member", 4, 10**6, r"kept epoch of network 1 is 1000000, not a whole number from 1 to \d+"),  # to its epochs
        ("member", 1, 7, "networks are not numbered"),
        ("weights", 2, float("inf"), "weights of network 1 are missing or cut short"),
        ("weights", 1, 2.5, "network index of a weights row is 2.5"),
        ("curve", 1, -3, "network index of a curve is -3"),
        ("curve", 2, "testing", "curve row for network 0, 'testing', is unknown"),
        ("input", 3, float("nan"), "number of categories of 'kind' is blank"),  # a NaN reads as an empty cell
        ("input", 3, 10_000, "categories of 'kind' .3 listed. do not match its count 10000"),
        ("class", 1, 10_000, "class rows are not numbered"),
        ("class", 2, "int", "records class label 0 as 'high', which is not a valid int"),
        ("setting", 3, "inf", "records the setting 'activation' as 'inf', which is not a valid float"),
        ("source", 2, 7.0, "holdout share of its source is 7.0"),
        ("holdout_metric", 2, "high", "holdout metric 'rmse' is 'high', not a finite number"),
        ("given", 2, "bool", "records the argument 'hidden' as '4,3', which is not a valid bool"),
        ("given", 2, "code", "records the argument 'hidden' with a kind 'code' this sheetnet does not know"),
    ],
)
def test_absurd_values_in_fields_are_named(key, position, value, message):
    task = "binary" if key == "class" else "regression"
    frame, cells = _small_block(task)
    if key == "setting" and message.endswith("valid float"):
        cells = [list(r) for r in cells]
        row = next(i for i, r in enumerate(cells) if r[0] == "setting")
        cells[row][2] = "float"
    with pytest.raises(BlockError, match=message):
        decode_block(_tampered(cells, key, position, value, occurrence=1 if key == "input" else 0))  # input 1 is the text column 'kind'


def test_ten_thousand_classes_are_refused():
    _, cells = _small_block("multiclass")
    last = max(i for i, r in enumerate(cells) if r[0] == "class")
    extra = [["class", k, "int", str(100 + k)] + [""] * (block.WIDTH - 4) for k in range(3, 10_003)]
    with pytest.raises(BlockError, match="inputs or outputs do not match its layer sizes"):
        decode_block(_resealed(cells[: last + 1] + extra + cells[last + 1:]))


def test_a_numbers_row_with_infinity_is_refused():
    _, cells = _small_block("regression")
    weights = next(i for i, r in enumerate(cells) if r[0] == "weights")
    edited = [list(r) for r in cells]
    edited[weights + 1][2] = float("inf")
    with pytest.raises(BlockError, match=f"row {weights + 2} of the model block holds inf where a finite number belongs"):
        decode_block(edited)


TAMPERED_VALUES = st.one_of(
    st.sampled_from([float("inf"), -float("inf"), float("nan"), 1e308, -1.0, 0, 1, 2, 3, 10_000, 10**20, 10**400, 2.5, "", " ", "x", "none",
                     "TRUE", "text", "int", "float", "bool", "training", "validation", "number", "category", "binary", "regression", None, True]),
    st.integers(),
    st.floats(),
    st.text(max_size=4),
)


@given(task=st.sampled_from(["regression", "binary", "multiclass"]), where=st.integers(0, 10**6), column=st.integers(0, block.WIDTH - 1),
       value=TAMPERED_VALUES)
@settings(max_examples=400, deadline=None)
def test_decoding_a_tampered_resealed_block_raises_only_block_errors(task, where, column, value):
    frame, cells = _small_block(task)
    edited = [list(r) for r in cells]
    row = where % (len(cells) - 1)  # any row but the checksum
    edited[row][column] = value
    try:
        resealed = _resealed(edited)
    except BlockError:
        return  # the edit broke the layout before the checksum (a blank key on the first row, text among numbers)
    try:
        model, _ = decode_block(resealed)
    except BlockError:
        return
    try:  # what decoding accepted must predict (forged huge weights may overflow to NaN), or refuse the rows with a sheetnet error
        with np.errstate(over="ignore", invalid="ignore"):
            model.predict(frame)
    except sheetnet.errors.SheetnetError:
        pass
