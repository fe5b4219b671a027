"""The model block: round trips, tamper detection, versions, and that reading it runs nothing."""

import dataclasses
import json
from pathlib import Path
from types import MappingProxyType

import numpy as np
import pandas as pd
import pytest

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
    with pytest.raises(sheetnet.errors.ModelError, match="the argument 'rate' is inf, not a finite number"):
        encode_block(model, dataclasses.replace(INFO, given={"rate": float("inf")}))
    with pytest.raises(sheetnet.errors.ModelError, match="the argument 'epochs' is a list"):
        encode_block(model, dataclasses.replace(INFO, given={"epochs": [1, 2]}))
