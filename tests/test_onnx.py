"""The ONNX export: onnxruntime running the graph gives `predict` and `predict_proba` to 1e-9 (double graphs)."""

import numpy as np
import pandas as pd
import pytest

import sheetnet
from sheetnet.errors import ModelError
from sheetnet.settings import SETTINGS_BY_NAME

ort = pytest.importorskip("onnxruntime", reason="the ONNX export is an optional extra (pip install '.[onnx]'; dev installs it)")
onnx_export = pytest.importorskip("sheetnet.onnx_export")
pytest.importorskip("onnx", reason="the ONNX export is an optional extra (pip install '.[onnx]'; dev installs it)")

FAST = dict(epochs=60, validation_share=0, decay=1e-4)
TOLERANCE = 1e-9


def _deliveries(rows: int = 90, seed: int = 2) -> pd.DataFrame:
    """An invented table: distance, parcels, the van (text, one of three) and the depot (numbers read as categories)."""
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "distance km": rng.uniform(1, 40, rows),
            "parcels": rng.integers(1, 12, rows).astype(float),
            "van": rng.choice(["small", "large", "cargo bike"], rows),
            "depot": rng.choice([3, 7], rows),
        }
    )


def _run(model, X) -> dict[str, np.ndarray]:
    session = ort.InferenceSession(onnx_export.to_onnx(model).SerializeToString(), providers=["CPUExecutionProvider"])
    names = [o.name for o in session.get_outputs()]
    return dict(zip(names, session.run(names, onnx_export.onnx_inputs(model, X))))


@pytest.mark.parametrize("activation", sorted(SETTINGS_BY_NAME["activation"].choices))
def test_a_regression_with_categories_and_repeats_matches_predict(activation):
    frame = _deliveries()
    minutes = 2 * frame["distance km"] + 3 * frame["parcels"] + 10 * (frame["van"] == "cargo bike") + frame["depot"]
    model = sheetnet.fit(frame, minutes, hidden=(4, 3), activation=activation, repeats=2, workers=1, categories=["depot"], **FAST)
    new = _deliveries(40, seed=9)
    answer = _run(model, new)
    np.testing.assert_allclose(answer["prediction"], model.predict(new), rtol=0, atol=TOLERANCE * np.abs(model.predict(new)).max())
    assert answer["prediction"].dtype == np.float64 and not answer["unknown_category"].any()


def test_a_numeric_network_without_hidden_layers_matches_predict():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(50, 3))
    model = sheetnet.fit(X, X @ [1.0, -2.0, 0.5] + 4, hidden=(), **FAST)
    answer = _run(model, X)
    np.testing.assert_allclose(answer["prediction"], model.predict(X), rtol=0, atol=TOLERANCE)
    assert [i.name for i in onnx_export.to_onnx(model).graph.input] == ["x1", "x2", "x3"]


def test_two_classes_with_text_labels_and_a_threshold_match_predict():
    frame = _deliveries()
    noise = np.random.default_rng(8).normal(0, 12, len(frame))
    late = np.where(frame["distance km"] + 2 * frame["parcels"] + noise > 35, "late", "on time")
    model = sheetnet.fit(frame, late, hidden=(3,), threshold=0.3, **{**FAST, "epochs": 8})
    answer = _run(model, frame)
    np.testing.assert_allclose(answer["probabilities"], model.predict_proba(frame), rtol=0, atol=TOLERANCE)
    assert answer["prediction"].tolist() == model.predict(frame).tolist()
    second = model.predict_proba(frame)[:, 1]
    assert ((second >= 0.3) & (second < 0.5)).any()  # rows the threshold decides, so the graph's threshold is tested


@pytest.mark.parametrize("labels", [np.array([1, 2, 3]), np.array([0.5, 1.5, 2.5]), np.array(["A", "B", "C"])])
def test_several_classes_keep_the_kind_of_their_labels(labels):
    frame = _deliveries()
    which = labels[np.digitize(frame["distance km"], [14, 27])]
    model = sheetnet.fit(frame, which, hidden=(5,), task="multiclass", **FAST)
    answer = _run(model, frame)
    np.testing.assert_allclose(answer["probabilities"], model.predict_proba(frame), rtol=0, atol=TOLERANCE)
    assert answer["prediction"].tolist() == model.predict(frame).tolist()


def test_true_false_labels_come_back_as_booleans():
    frame = _deliveries()
    model = sheetnet.fit(frame, frame["parcels"] > 6, hidden=(2,), **FAST)
    answer = _run(model, frame)
    assert answer["prediction"].dtype == np.bool_ and answer["prediction"].tolist() == model.predict(frame).tolist()


def test_an_unknown_category_is_flagged_where_predict_refuses():
    frame = _deliveries()
    model = sheetnet.fit(frame, frame["distance km"] * 2, hidden=(2,), **FAST)
    new = frame.head(3).assign(van=["small", "truck", "large"])
    assert _run(model, new)["unknown_category"].tolist() == [False, True, False]
    with pytest.raises(sheetnet.SheetnetError, match="category 'truck' was not in the training rows"):
        model.predict(new)


def test_the_graph_file_is_written_and_names_clash_in_words(tmp_path):
    frame = _deliveries()
    model = sheetnet.fit(frame, frame["distance km"], hidden=(2,), **FAST)
    path = onnx_export.save_onnx(model, tmp_path / "deliveries.onnx")
    session = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    np.testing.assert_allclose(session.run(["prediction"], onnx_export.onnx_inputs(model, frame))[0], model.predict(frame), rtol=1e-12)
    clash = sheetnet.fit(frame.rename(columns={"parcels": "prediction"}), frame["distance km"], hidden=(2,), **FAST)
    with pytest.raises(ModelError, match="the input column 'prediction' has the name of an output of the ONNX graph; rename that column"):
        onnx_export.to_onnx(clash)
