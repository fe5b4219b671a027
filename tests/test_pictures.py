"""Pictures are real PNG images with something drawn on them."""

import numpy as np
import pytest
from matplotlib.image import imread

import sheetnet
from sheetnet import pictures


def _looks_drawn(path):
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    image = imread(path)
    height, width = image.shape[:2]
    assert height > 200 and width > 200
    assert image[..., :3].std() > 0.05  # not a blank canvas
    return image


def test_loss_curve_marks_the_kept_epoch(tmp_path, rng):
    X = rng.normal(size=(200, 3))
    model = sheetnet.fit(X, X[:, 0] + rng.normal(scale=0.5, size=200), hidden=(12,), decay=0.0, validation_share=0.3)
    _looks_drawn(pictures.loss_curve_picture(model, tmp_path / "curve.png"))


def test_predicted_against_actual(tmp_path, rng):
    actual = rng.normal(size=50)
    _looks_drawn(pictures.predicted_vs_actual_picture(actual, actual + rng.normal(scale=0.2, size=50), tmp_path / "scatter.png"))


def test_confusion_matrix_picture(tmp_path):
    path = pictures.confusion_picture(np.array([[5, 1], [2, 7]]), ["no", "yes"], tmp_path / "nested" / "confusion.png")
    assert path.parent.name == "nested"
    _looks_drawn(path)


def _decoded(model):
    from sheetnet.block import BlockInfo, decode_block, encode_block

    info = BlockInfo("y", "2026-01-01T00:00:00Z", "sheetnet test", "0" * 64, 200, 0)
    return decode_block(encode_block(model, info))[0]


def test_a_decoded_long_regression_curve_is_drawn_at_its_stored_epochs(tmp_path, rng):
    X = rng.normal(size=(60, 2))
    fresh = sheetnet.fit(X, X[:, 0] - X[:, 1], hidden=(3,), epochs=400, decay=1e-4, validation_share=0, patience=400, tolerance=0.0, gradient_threshold=0.0)
    member = _decoded(fresh).members[0]
    assert fresh.epochs == 400 and len(member.training_curve) == 200  # the block keeps 200 of the 400 points
    assert member.training_epochs[0] == 1 and member.training_epochs[-1] == 400
    lines = pictures.loss_curve_figure(_decoded(fresh)).axes[0].get_lines()
    np.testing.assert_array_equal(lines[0].get_xdata(), member.training_epochs)
    np.testing.assert_array_equal(lines[0].get_ydata(), member.training_curve)
    _looks_drawn(pictures.loss_curve_picture(_decoded(fresh), tmp_path / "regression.png"))
    # a fresh fit draws every epoch
    np.testing.assert_array_equal(pictures.loss_curve_figure(fresh).axes[0].get_lines()[0].get_xdata(), np.arange(1, 401))


def test_a_decoded_classifier_draws_its_validation_curve_at_its_stored_epochs(tmp_path, rng):
    X = rng.normal(size=(200, 3))
    y = np.where(X[:, 0] + rng.normal(scale=0.8, size=200) > 0, "yes", "no")
    fresh = sheetnet.fit(X, y, hidden=(8,), epochs=400, validation_share=0.3, patience=400, tolerance=0.0, gradient_threshold=0.0, decay=0.0)
    decoded = _decoded(fresh)
    member = decoded.members[0]
    assert fresh.epochs == 400 and len(member.validation_curve) == 200
    lines = pictures.loss_curve_figure(decoded).axes[0].get_lines()
    np.testing.assert_array_equal(lines[0].get_xdata(), member.training_epochs)
    np.testing.assert_array_equal(lines[1].get_xdata(), member.validation_epochs)
    np.testing.assert_array_equal(lines[1].get_ydata(), member.validation_curve)
    assert lines[2].get_xdata()[0] == fresh.members[0].best_epoch  # the kept epoch is marked where it was
    # the stored points are the fresh curve's losses at those epochs
    kept = np.asarray(member.validation_epochs) - 1
    np.testing.assert_allclose(member.validation_curve, np.asarray(fresh.members[0].validation_curve)[kept], rtol=1e-14)
    _looks_drawn(pictures.loss_curve_picture(decoded, tmp_path / "classifier.png"))


def test_writing_a_decoded_model_again_keeps_its_curve_epochs(rng):
    X = rng.normal(size=(60, 2))
    fresh = sheetnet.fit(X, X[:, 0], hidden=(2,), epochs=333, decay=1e-4, validation_share=0, patience=400, tolerance=0.0, gradient_threshold=0.0)
    once = _decoded(fresh).members[0]
    twice = _decoded(_decoded(fresh)).members[0]
    assert once.training_epochs[-1] == 333 and len(once.training_epochs) == 200
    assert tuple(twice.training_epochs) == tuple(once.training_epochs)
    assert twice.training_curve == once.training_curve


def test_importance_residuals_calibration_and_dependence_pictures(tmp_path, rng):
    from sheetnet.dependence import partial_dependence
    from sheetnet.uncertainty import reliability_table

    _looks_drawn(pictures.importance_picture([("heat", 1.2, 0.1), ("hours", 0.4, 0.05), ("noise", 0.01, 0.02)], tmp_path / "importance.png"))
    actual = rng.normal(size=80)
    _looks_drawn(pictures.residuals_picture(actual, actual + rng.normal(scale=0.3, size=80), tmp_path / "residuals.png", half_width=0.5))
    p = rng.uniform(size=300)
    table = reliability_table(rng.uniform(size=300) < p, p)
    _looks_drawn(pictures.calibration_picture(table, tmp_path / "calibration.png", "yes"))
    X = rng.normal(size=(120, 2))
    model = sheetnet.fit(X, X[:, 0] ** 2, hidden=(5,), epochs=60)
    curves = [(name, *partial_dependence(model, X, name)) for name in model.input_names]
    _looks_drawn(pictures.partial_dependence_picture(curves, tmp_path / "dependence.png"))


def test_partial_dependence_equals_scikit_learns_brute_average(rng):
    # reference: sklearn.inspection.partial_dependence (method "brute", kind "average") on the same model
    from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
    from sklearn.inspection import partial_dependence as reference

    from sheetnet.dependence import partial_dependence

    class Regressor(RegressorMixin, BaseEstimator):
        def __init__(self, model=None):
            self.model = model

        def fit(self, X, y):
            self.fitted_ = True
            return self

        def predict(self, X):
            return self.model.predict(np.asarray(X, dtype=float))

    class Classifier(ClassifierMixin, BaseEstimator):
        def __init__(self, model=None):
            self.model = model

        def fit(self, X, y):
            self.classes_ = np.asarray(self.model.classes)
            return self

        def predict_proba(self, X):
            return self.model.predict_proba(np.asarray(X, dtype=float))

    X = rng.normal(size=(150, 3))
    y = np.sin(X[:, 0]) + X[:, 1] * X[:, 2]
    model = sheetnet.fit(X, y, hidden=(6,), epochs=80)
    theirs = reference(Regressor(model).fit(X, y), X, [1], method="brute", kind="average", grid_resolution=15)
    grid, ours = partial_dependence(model, X, model.input_names[1], theirs["grid_values"][0])
    np.testing.assert_allclose(ours, theirs["average"][0], rtol=1e-12)
    labels = (y > 0).astype(int)
    classifier = sheetnet.fit(X, labels, hidden=(4,), epochs=60)
    theirs = reference(Classifier(classifier).fit(X, labels), X, [0], method="brute", kind="average", grid_resolution=10, response_method="predict_proba")
    _, ours = partial_dependence(classifier, X, classifier.input_names[0], theirs["grid_values"][0])
    np.testing.assert_allclose(ours, theirs["average"][0], rtol=1e-12)  # two classes: the second class's probability


def test_partial_dependence_by_hand_and_its_refusals():
    from sheetnet.dependence import partial_dependence
    from sheetnet.errors import InputError

    X = np.array([[0.0, 1.0], [1.0, 2.0], [2.0, 0.0], [3.0, 4.0], [1.5, 1.5]])
    model = sheetnet.fit(np.tile(X, (4, 1)), np.tile(X[:, 0] - X[:, 1], 4), hidden=(), epochs=50, task="regression")
    grid, average = partial_dependence(model, X, "x2", [0.0, 2.0])
    direct = [model.predict(np.column_stack([X[:, 0], np.full(5, v)])).mean() for v in (0.0, 2.0)]
    np.testing.assert_allclose(average, direct, rtol=1e-14)
    with pytest.raises(InputError, match="not an input"):
        partial_dependence(model, X, "x9")
