"""Pictures are real PNG images with something drawn on them."""

import numpy as np
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
