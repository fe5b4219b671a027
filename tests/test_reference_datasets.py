"""Holdout quality on scikit-learn's bundled datasets, against scikit-learn's own MLP.

Reference: scikit-learn's bundled diabetes, breast cancer, wine and digits data
and its MLPRegressor / MLPClassifier (default solver Adam, same hidden layer,
inputs standardised on the training rows, regression target standardised too).
Each sheetnet algorithm must reach the reference's holdout quality minus a
stated margin: 0.03 accuracy, 0.05 R^2 (margins are our choice: about one
standard error of a holdout of 45 to 450 rows).
"""

import warnings

import numpy as np
import pytest
from sklearn import datasets
from sklearn.compose import TransformedTargetRegressor
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import sheetnet

pytestmark = pytest.mark.slow

MARGIN = {"regression": 0.05, "classes": 0.03}
DATASETS = {
    "diabetes": (datasets.load_diabetes, "regression", (8,)),
    "breast_cancer": (datasets.load_breast_cancer, "classes", (8,)),
    "wine": (datasets.load_wine, "classes", (8,)),
    "digits": (datasets.load_digits, "classes", (32,)),
}
ALGORITHMS = {
    "lbfgs": {},
    "adam": {"rate": 0.01, "batch": 32},
    "gd": {"rate": 0.05, "momentum": 0.9, "batch": 32},
    "rprop+": {},
    "irprop+": {},
}


def _split(name):
    loader, kind, hidden = DATASETS[name]
    X, y = loader(return_X_y=True)
    held = sheetnet.holdout_mask(len(y), 0.25, seed=0, mode="stratified" if kind == "classes" else "random", labels=y if kind == "classes" else None)
    return X, y, held, kind, hidden


def _quality(kind, predicted, actual):
    return sheetnet.metrics.r2(actual, predicted) if kind == "regression" else float(np.mean(predicted == actual))


@pytest.fixture(scope="module")
def reference_quality():
    found = {}
    for name in DATASETS:
        X, y, held, kind, hidden = _split(name)
        if kind == "regression":
            net = MLPRegressor(hidden_layer_sizes=hidden, max_iter=500, random_state=0)
            model = TransformedTargetRegressor(make_pipeline(StandardScaler(), net), transformer=StandardScaler())
        else:
            model = make_pipeline(StandardScaler(), MLPClassifier(hidden_layer_sizes=hidden, max_iter=500, random_state=0))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            model.fit(X[~held], y[~held])
        found[name] = _quality(kind, model.predict(X[held]), y[held])
    return found


@pytest.mark.parametrize("algorithm", ALGORITHMS)
@pytest.mark.parametrize("name", DATASETS)
def test_holdout_quality_reaches_scikit_learn(name, algorithm, reference_quality):
    X, y, held, kind, hidden = _split(name)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", sheetnet.errors.SheetnetWarning)  # digits has blank-border pixels that never vary
        model = sheetnet.fit(X[~held], y[~held], hidden=hidden, seed=0, algorithm=algorithm, epochs=3000, **ALGORITHMS[algorithm])
    ours = _quality(kind, model.predict(X[held]), y[held])
    assert ours >= reference_quality[name] - MARGIN[kind], (ours, reference_quality[name])
