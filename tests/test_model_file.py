"""Models that travel: pickle, joblib and deepcopy; model files written and read, hostile files refused."""

import copy
import io
import json
import pickle

import joblib
import numpy as np
import pandas as pd
import pytest

import sheetnet
from sheetnet import model_file
from sheetnet.block import BlockError, BlockInfo, decode_block, encode_block
from sheetnet.model_file import MAX_FILE_BYTES, ModelFileError

FAST = dict(epochs=40, validation_share=0, decay=1e-4)


def _orders(rows: int = 60) -> tuple[pd.DataFrame, np.ndarray]:
    """An invented table: order size, weekday (text) and whether the order came late."""
    rng = np.random.default_rng(11)
    frame = pd.DataFrame({"items": rng.integers(1, 30, rows).astype(float), "weekday": rng.choice(["mon", "tue", "sat"], rows)})
    late = np.where(frame["items"] + 10 * (frame["weekday"] == "sat") + rng.normal(0, 3, rows) > 18, "late", "on time")
    return frame, late


@pytest.fixture(scope="module")
def trained() -> tuple[sheetnet.Model, pd.DataFrame]:
    frame, late = _orders()
    return sheetnet.fit(frame, late, hidden=(3,), repeats=2, workers=1, **FAST), frame


# --- pickle, joblib, deepcopy -------------------------------------------------------------------

def _copies(model):
    buffer = io.BytesIO()
    joblib.dump(model, buffer)
    buffer.seek(0)
    return {"pickle": pickle.loads(pickle.dumps(model)), "joblib": joblib.load(buffer), "deepcopy": copy.deepcopy(model)}


def test_a_model_copies_by_pickle_joblib_and_deepcopy(trained):
    model, frame = trained
    for how, copied in _copies(model).items():
        np.testing.assert_array_equal(copied.predict_proba(frame), model.predict_proba(frame), err_msg=how)
        assert copied.settings == model.settings and copied.classes == model.classes and copied.sizes == model.sizes


def test_a_copied_model_is_as_read_only_as_the_original(trained):
    model, _ = trained
    for how, copied in _copies(model).items():
        with pytest.raises(ValueError, match="read-only"):
            copied.members[1].theta[0] = 0.0
        with pytest.raises(TypeError):
            copied.settings["epochs"] = 1  # type: ignore[index]
        with pytest.raises(AttributeError):
            copied.seed = 3  # type: ignore[misc]
        assert copied.members[0].theta is not model.members[0].theta, how


def test_a_model_never_freezes_the_array_it_was_given(trained):
    model, _ = trained
    theta = np.array(model.members[0].theta)
    member = type(model.members[0])(theta, "epochs", 1, (1.0,), (), 1)
    assert theta.flags.writeable and not member.theta.flags.writeable


def test_the_info_a_block_records_copies_by_pickle_joblib_and_deepcopy_and_stays_read_only(trained):
    model, _ = trained
    info = BlockInfo(
        "late", "2026-12-01T09:00:00Z", "sheetnet 0.1.0", "ab" * 32, 48, 12, {"accuracy": 0.75},
        source=("Orders!A1:C61", 0.2, "stratified", 0), given={"hidden": "3", "epochs": 40},
        metric_intervals={"accuracy": (0.6, 0.9)}, error_bars=(0.9, 200, 0),
        group_column="weekday", group_metrics={"mon": {"accuracy": 0.8, "rows": 5.0}},
    )
    block = encode_block(model, info)
    _, read = decode_block(block)  # decoding gives the arguments as given, intervals and group metrics read-only
    for how, copied in _copies(read).items():
        assert copied == read and copied is not read, how
        assert copied.given == {"hidden": "3", "epochs": 40} and copied.group_metrics == {"mon": {"accuracy": 0.8, "rows": 5.0}}
        for mapping in (copied.given, copied.metric_intervals, copied.group_metrics):
            with pytest.raises(TypeError):
                mapping["epochs"] = 1  # type: ignore[index]
        with pytest.raises(AttributeError):
            copied.target = "other"  # type: ignore[misc]
        assert copied.holdout_metrics == {"accuracy": 0.75} and type(copied.holdout_metrics) is dict  # a plain dict stays one
        assert encode_block(model, copied) == block, how  # the copy writes the very same block


# --- model files --------------------------------------------------------------------------------

def test_a_saved_model_loads_as_the_block_a_workbook_would_give_back(trained, tmp_path):
    model, frame = trained
    path = sheetnet.save(model, tmp_path / "orders.json")
    loaded = sheetnet.load(path)
    from_block, _ = decode_block(encode_block(model, model_file.default_info(model)))
    np.testing.assert_array_equal(loaded.predict_proba(frame), from_block.predict_proba(frame))
    np.testing.assert_allclose(loaded.predict_proba(frame), model.predict_proba(frame), rtol=0, atol=1e-12)  # weights kept to 15 digits
    assert loaded.predict(frame).tolist() == model.predict(frame).tolist()
    assert loaded.classes == ("late", "on time") and loaded.input_names == ("items", "weekday")


def test_the_file_is_the_documented_json_and_keeps_what_info_records(trained, tmp_path):
    model, _ = trained
    info = BlockInfo("late", "2026-12-01T09:00:00Z", "sheetnet 0.1.0", "ab" * 32, 48, 12, {"accuracy": 0.75})
    path = sheetnet.save(model, tmp_path / "orders.json", info)
    document = json.loads(path.read_text("utf-8"))
    assert (document["format"], document["version"]) == ("sheetnet model file", 1)
    assert document["block"][0][0] == "sheetnet model block" and document["block"][-1][0] == "checksum"
    assert all(row and row[-1] != "" for row in document["block"])  # trailing empty cells are left out
    _, read = model_file.load_with_info(path)
    assert (read.target, read.training_rows, read.holdout_rows, read.holdout_metrics) == ("late", 48, 12, {"accuracy": 0.75})


def test_saving_replaces_a_model_file_but_never_another_file(trained, tmp_path):
    model, _ = trained
    path = tmp_path / "orders.json"
    sheetnet.save(model, path)
    sheetnet.save(model, path)  # a model file may be replaced
    notes = tmp_path / "notes.json"
    notes.write_text('{"mine": true}')
    with pytest.raises(ModelFileError, match="exists and is not a sheetnet model file; choose another name"):
        sheetnet.save(model, notes)
    assert notes.read_text() == '{"mine": true}'
    with pytest.raises(ModelFileError, match="is a folder"):
        sheetnet.save(model, tmp_path)
    with pytest.raises(ModelFileError, match="does not exist; create it first"):
        sheetnet.save(model, tmp_path / "missing" / "orders.json")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.json", "orders.json"]  # no temporary file left behind


def _file_with(tmp_path, text: str):
    path = tmp_path / "model.json"
    path.write_text(text, encoding="utf-8")
    return path


def _saved_text(model) -> str:
    return model_file.file_text(encode_block(model, model_file.default_info(model)))


@pytest.mark.parametrize(
    "text, message",
    [
        ("", "not a readable model file \\(expecting value at line 1, column 1\\)"),
        ('{"format": "sheetnet model file", "version": 1, "block": [[NaN]]}', "it holds NaN, which no spreadsheet cell holds"),
        ('{"format": "sheetnet model file", "version": 1, "block": [[1e999]]}', "it holds the number 1e999, too large for any cell"),
        ('{"format": "sheetnet model file", "version": 1, "block": [[' + "9" * 5000 + "]]}", "not a readable model file"),
        ("[" * 100_000 + "]" * 100_000, "nests lists too deeply"),
        ('{"format": "something else", "block": []}', "is not a sheetnet model file \\(its 'format'"),
        ('{"format": "sheetnet model file", "version": 7, "block": [["x"]]}', "written by a newer sheetnet \\(file version 7"),
        ('{"format": "sheetnet model file", "version": 1, "block": [["x", {"code": 1}]]}', "row 1 of the model file's block holds a cell that is a record"),
        ('{"format": "sheetnet model file", "version": 1, "block": ["x"]}', "row 1 of the model file's block is not a list of cells"),
        ('{"format": "sheetnet model file", "version": 1, "block": [["x"]], "run": "rm"}', "holds parts sheetnet does not write \\('run'\\)"),
    ],
)
def test_hostile_or_damaged_files_are_refused_in_words(tmp_path, text, message):
    with pytest.raises(ModelFileError, match=message):
        sheetnet.load(_file_with(tmp_path, text))


def test_an_edited_or_cut_block_gets_the_workbooks_messages(trained, tmp_path):
    model, _ = trained
    text = _saved_text(model)
    edited = text.replace('["setting", "epochs", "int", "40"]', '["setting", "epochs", "int", "41"]')
    assert edited != text
    with pytest.raises(BlockError, match="changed after training \\(its checksum does not match\\)"):
        sheetnet.load(_file_with(tmp_path, edited))
    lines = text.splitlines()
    cut = "\n".join(lines[:-3]).rstrip(",") + "\n ]}"  # the last rows cut off, weights and checksum among them
    with pytest.raises(BlockError, match="incomplete \\(its checksum row is missing\\)"):
        sheetnet.load(_file_with(tmp_path, cut))


def test_a_file_too_large_is_refused_before_reading(tmp_path):
    path = tmp_path / "huge.json"
    with path.open("wb") as handle:
        handle.truncate(MAX_FILE_BYTES + 1)  # a sparse file: no disk used
    with pytest.raises(ModelFileError, match="more than the 134,217,728 a model file may hold"):
        sheetnet.load(path)


def test_missing_files_and_folders_are_named(tmp_path):
    with pytest.raises(ModelFileError, match="there is no file .*nothing.json'; check the name"):
        sheetnet.load(tmp_path / "nothing.json")
    with pytest.raises(ModelFileError, match="is a folder, not a model file"):
        sheetnet.load(tmp_path)
    (tmp_path / "binary.json").write_bytes(b"\xff\xfe\x00")
    with pytest.raises(ModelFileError, match="is not text \\(UTF-8\\)"):
        sheetnet.load(tmp_path / "binary.json")


def test_random_damage_to_a_file_is_always_refused_in_words(trained, tmp_path):
    """Bytes flipped, cut or doubled anywhere: a ModelFileError or a BlockError every time, never another exception."""
    model, frame = trained
    data = _saved_text(model).encode("utf-8")
    rng = np.random.default_rng(0)
    outcomes = {"refused": 0, "loaded": 0}
    for trial in range(300):
        damaged = bytearray(data)
        where = int(rng.integers(len(damaged)))
        how = trial % 3
        if how == 0:
            damaged[where] = int(rng.integers(256))
        elif how == 1:
            damaged = damaged[:where]
        else:
            damaged[where:where] = damaged[max(0, where - 20):where]
        path = tmp_path / "damaged.json"
        path.write_bytes(bytes(damaged))
        try:
            loaded = sheetnet.load(path)
        except (ModelFileError, BlockError) as error:
            assert "Traceback" not in str(error) and str(error)
            outcomes["refused"] += 1
        else:  # only a change the checksum does not cover (spacing between cells, say) may load, and it predicts the same
            np.testing.assert_array_equal(loaded.predict_proba(frame), sheetnet.load(_file_with(tmp_path, _saved_text(model))).predict_proba(frame))
            outcomes["loaded"] += 1
    assert outcomes["refused"] > 250


def test_a_block_is_saved_as_it_is_and_read_back_row_for_row(trained, tmp_path):
    model, frame = trained
    block = encode_block(model, model_file.default_info(model))
    path = model_file.save_block(block, tmp_path / "as_is.json")
    rows = model_file.load_block(path)
    assert [row + [""] * (len(block[0]) - len(row)) for row in rows] == block  # the same cells, trailing blanks put back
    damaged = [list(row) for row in block]
    damaged[3][1] = "another target"
    with pytest.raises(BlockError, match="changed after training"):
        model_file.save_block(damaged, tmp_path / "damaged.json")
    assert not (tmp_path / "damaged.json").exists()
