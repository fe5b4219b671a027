"""The model block: round trips, tamper detection, versions, and that reading it runs nothing."""

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import sheetnet
from sheetnet import block
from sheetnet.block import BlockError, BlockInfo, decode_block, encode_block

INFO = BlockInfo("output", "2026-01-01T00:00:00Z", "sheetnet test", "f" * 64, 80, 20, {"rmse": 0.25})
FIXTURE = Path(__file__).parent / "data" / "block_format_1.json"


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
