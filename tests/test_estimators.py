"""The scikit-learn estimators: scikit-learn's own checks, and its tools (Pipeline, GridSearchCV, cross_val_score, inspection).

scikit-learn's `parametrize_with_checks` (sklearn.utils.estimator_checks) runs every check of
`check_estimator` as its own test. Small settings keep them fast: 200 epochs, a fixed decay.
"""

import inspect
import os
import pickle
import subprocess
import sys
import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.base import is_classifier
from sklearn.compose import ColumnTransformer
from sklearn.exceptions import DataConversionWarning, NotFittedError
from sklearn.inspection import partial_dependence, permutation_importance
from sklearn.model_selection import GridSearchCV, KFold, StratifiedKFold, cross_val_score
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import FunctionTransformer, OneHotEncoder, StandardScaler
from sklearn.utils.estimator_checks import estimator_checks_generator, parametrize_with_checks
from sklearn.utils.validation import has_fit_parameter

import sheetnet
from sheetnet import errors
from sheetnet.estimators import ESTIMATOR_SETTINGS, NotTrainedError, SheetnetClassifier, SheetnetRegressor
from sheetnet.settings import SETTINGS

QUICK = dict(epochs=200, decay=1e-4, validation_share=0)


# the defaults as a user meets them, and quick fixed networks
@parametrize_with_checks([SheetnetRegressor(), SheetnetClassifier(), SheetnetRegressor(hidden=(4,), **QUICK), SheetnetClassifier(hidden=(4,), **QUICK)])
def test_scikit_learn_checks(estimator, check):
    if getattr(check, "func", check).__name__ == "check_array_api_input":
        pytest.skip("needs SCIPY_ARRAY_API=1 before SciPy loads: test_the_array_api_check_with_dispatch_enabled runs it in a process of its own")
    with warnings.catch_warnings():
        # scikit-learn's own helpers cast NaN to integers inside some checks; that warning is theirs, not ours
        warnings.filterwarnings("ignore", message="invalid value encountered in cast", category=RuntimeWarning)
        check(estimator)


def _shipments(rows: int = 120, seed: int = 3) -> tuple[pd.DataFrame, np.ndarray]:
    """An invented table: transit hours, packaging (text) and a spoilage score."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(
        {
            "transit_hours": rng.uniform(5, 90, rows),
            "door_openings": rng.integers(0, 8, rows).astype(float),
            "packaging": rng.choice(["foam", "gel pack", "dry ice"], rows),
        }
    )
    score = 0.05 * frame["transit_hours"] + 0.3 * frame["door_openings"] - 2.0 * (frame["packaging"] == "dry ice") + rng.normal(0, 0.3, rows)
    return frame, score.to_numpy()


def test_parameters_are_the_settings_plus_hidden_seed_and_categories():
    names = list(inspect.signature(SheetnetRegressor).parameters)
    assert names == ["hidden", "seed", "categories", *ESTIMATOR_SETTINGS]
    assert set(ESTIMATOR_SETTINGS) == {s.name for s in SETTINGS} - {"task"}  # a new setting needs a parameter
    defaults = SheetnetClassifier().get_params()
    assert all(defaults[s.name] == s.default for s in SETTINGS if s.name != "task")


def test_the_regressor_is_sheetnet_fit():
    frame, y = _shipments()
    estimator = SheetnetRegressor(hidden=(5,), seed=4, **QUICK).fit(frame, y)
    direct = sheetnet.fit(frame, y, hidden=(5,), seed=4, task="regression", **QUICK)
    np.testing.assert_array_equal(estimator.predict(frame), direct.predict(frame))
    assert estimator.feature_names_in_.tolist() == ["transit_hours", "door_openings", "packaging"]
    assert estimator.n_features_in_ == 3
    assert estimator.score(frame, y) > 0.9


def test_the_classifier_takes_text_labels_and_text_columns():
    frame, y = _shipments()
    labels = np.where(y > np.median(y), "spoiled", "fine")
    classifier = SheetnetClassifier(hidden=(4,), **QUICK).fit(frame, labels)
    assert classifier.classes_.tolist() == ["fine", "spoiled"]
    probabilities = classifier.predict_proba(frame)
    assert probabilities.shape == (120, 2)
    np.testing.assert_allclose(probabilities.sum(axis=1), 1.0)
    assert classifier.predict(frame).tolist() == np.asarray(classifier.classes_)[probabilities.argmax(axis=1)].tolist()
    assert classifier.score(frame, labels) > 0.85


def test_a_polars_table_trains_as_the_same_table_in_pandas():
    pl = pytest.importorskip("polars", reason="polars is a test-only extra (pip install '.[dev]')")
    frame, y = _shipments()
    polars_frame = pl.DataFrame({name: frame[name].tolist() for name in frame.columns})
    from_polars = SheetnetRegressor(hidden=(3,), **QUICK).fit(polars_frame, y)
    from_pandas = SheetnetRegressor(hidden=(3,), **QUICK).fit(frame, y)
    np.testing.assert_array_equal(from_polars.predict(polars_frame), from_pandas.predict(frame))
    assert from_polars.feature_names_in_.tolist() == list(frame.columns)


def test_in_a_pipeline_the_estimator_trains_on_the_scaled_rows():
    frame, y = _shipments()
    X = frame[["transit_hours", "door_openings"]].to_numpy()
    pipeline = Pipeline([("scale", StandardScaler()), ("net", SheetnetRegressor(hidden=(3,), **QUICK))]).fit(X, y)
    scaled = StandardScaler().fit_transform(X)
    direct = sheetnet.fit(scaled, y, hidden=(3,), task="regression", **QUICK)
    np.testing.assert_array_equal(pipeline.predict(X), direct.predict(scaled))
    assert pipeline.score(X, y) == pytest.approx(sheetnet.score(direct, scaled, y)["r2"], rel=1e-12)


def test_a_column_transformer_hands_the_estimator_a_table_with_its_text_column():
    frame, y = _shipments()
    columns = ColumnTransformer(
        [("hours", FunctionTransformer(np.log1p, feature_names_out="one-to-one"), ["transit_hours"]),
         ("kept", "passthrough", ["door_openings", "packaging"])],
        verbose_feature_names_out=False,
    ).set_output(transform="pandas")
    pipeline = Pipeline([("columns", columns), ("net", SheetnetRegressor(hidden=(3,), **QUICK))]).fit(frame, y)
    assert pipeline[-1].feature_names_in_.tolist() == ["transit_hours", "door_openings", "packaging"]
    assert pipeline[-1].model_.preparation.encoded_names()[2:] == ("packaging=dry ice", "packaging=foam", "packaging=gel pack")
    by_hand = frame.assign(transit_hours=np.log1p(frame["transit_hours"]))
    direct = sheetnet.fit(by_hand, y, hidden=(3,), task="regression", **QUICK)
    np.testing.assert_array_equal(pipeline.predict(frame), direct.predict(by_hand))
    # the same text column one-hot encoded by scikit-learn instead: the network gets numbers only
    encoded = ColumnTransformer([("packaging", OneHotEncoder(sparse_output=False), ["packaging"])], remainder="passthrough")
    numeric = Pipeline([("columns", encoded), ("net", SheetnetRegressor(hidden=(3,), **QUICK))]).fit(frame, y)
    assert numeric[-1].n_features_in_ == 5 and numeric[-1].model_.preparation.all_numeric
    assert numeric.score(frame, y) > 0.9


def _product_table(rows: int = 120) -> tuple[np.ndarray, np.ndarray]:
    """y = x1 * x2: no straight line (no hidden layer) can follow it, and a heavy decay flattens any network."""
    rng = np.random.default_rng(8)
    X = rng.uniform(-1, 1, size=(rows, 2))
    return X, X[:, 0] * X[:, 1] + 0.01 * rng.normal(size=rows)


def test_grid_search_picks_the_network_the_table_was_made_for():
    X, y = _product_table()
    grid = {"hidden": [(), (6,)], "decay": [1e-4, 50.0]}
    search = GridSearchCV(SheetnetRegressor(**QUICK), grid, cv=3).fit(X, y)
    assert search.best_params_ == {"hidden": (6,), "decay": 1e-4}  # by construction: a product needs a hidden layer
    means = dict(zip(map(str, search.cv_results_["params"]), search.cv_results_["mean_test_score"]))
    assert means[str({"decay": 1e-4, "hidden": (6,)})] > 0.8 and means[str({"decay": 1e-4, "hidden": ()})] < 0.1
    best = search.best_index_  # its fold scores are those of the same folds trained by hand (KFold(3), no shuffle)
    for number, (train, test) in enumerate(KFold(3).split(X)):
        model = sheetnet.fit(X[train], y[train], hidden=(6,), task="regression", **QUICK)
        assert search.cv_results_[f"split{number}_test_score"][best] == pytest.approx(sheetnet.score(model, X[test], y[test])["r2"], rel=1e-12)
    refit = SheetnetRegressor(**{**QUICK, **search.best_params_}).fit(X, y)
    np.testing.assert_array_equal(search.predict(X), refit.predict(X))


def test_cross_val_score_equals_folds_trained_by_hand():
    frame, y = _shipments()
    folds = KFold(3, shuffle=True, random_state=0)
    scores = cross_val_score(SheetnetRegressor(hidden=(3,), **QUICK), frame, y, cv=folds)
    by_hand = []
    for train, test in folds.split(frame):
        model = sheetnet.fit(frame.iloc[train], y[train], hidden=(3,), task="regression", **QUICK)
        by_hand.append(sheetnet.score(model, frame.iloc[test], y[test])["r2"])
    np.testing.assert_allclose(scores, by_hand, rtol=1e-12)
    labels = np.where(y > np.median(y), "spoiled", "fine")  # the classifier: accuracy per stratified fold
    accuracy = cross_val_score(SheetnetClassifier(hidden=(3,), **QUICK), frame, labels, cv=3)
    by_hand = []
    for train, test in StratifiedKFold(3).split(frame, labels):
        model = sheetnet.fit(frame.iloc[train], labels[train], hidden=(3,), task="multiclass", **QUICK)
        by_hand.append(np.mean(model.predict(frame.iloc[test]) == labels[test]))
    assert accuracy.tolist() == by_hand


def test_permutation_importance_is_the_score_lost_by_shuffling_each_column():
    # reference: scikit-learn's definition (sklearn/inspection/_permutation_importance.py): one seed is drawn from
    # random_state, each column's rows are shuffled by a RandomState of that seed, importance = score before - after
    rng = np.random.default_rng(5)
    X = rng.normal(size=(150, 3))
    y = 3 * X[:, 1] + 0.1 * rng.normal(size=150)  # columns 1 and 3 are noise
    estimator = SheetnetRegressor(hidden=(3,), **QUICK).fit(X, y)
    importance = permutation_importance(estimator, X, y, n_repeats=1, random_state=0)
    seed = np.random.RandomState(0).randint(np.iinfo(np.int32).max + 1)
    baseline = estimator.score(X, y)
    for column in range(3):
        order = np.arange(150)
        np.random.RandomState(seed).shuffle(order)
        shuffled = X.copy()
        shuffled[:, column] = X[order, column]
        assert importance.importances[column, 0] == pytest.approx(baseline - estimator.score(shuffled, y), rel=1e-12, abs=1e-15)
    assert importance.importances_mean[1] > 1.0 and np.abs(importance.importances_mean[[0, 2]]).max() < 0.05


def test_partial_dependence_is_the_average_prediction_over_its_grid():
    # reference: scikit-learn's brute-force partial dependence (Friedman 2001): set the column to each grid value in
    # every row and average the predictions
    frame, y = _shipments()
    estimator = SheetnetRegressor(hidden=(4,), **QUICK).fit(frame, y)
    hours = partial_dependence(estimator, frame, ["transit_hours"], grid_resolution=5, kind="average")
    by_hand = [estimator.predict(frame.assign(transit_hours=value)).mean() for value in hours["grid_values"][0]]
    np.testing.assert_allclose(hours["average"][0], by_hand, rtol=1e-12)
    assert len(by_hand) == 5 and by_hand[-1] - by_hand[0] > 2.5  # the table rises 0.05 an hour over about 76 hours
    packaging = partial_dependence(estimator, frame, ["packaging"], categorical_features=["packaging"], kind="average")
    assert packaging["grid_values"][0].tolist() == ["dry ice", "foam", "gel pack"]
    by_hand = [estimator.predict(frame.assign(packaging=value)).mean() for value in ["dry ice", "foam", "gel pack"]]
    np.testing.assert_allclose(packaging["average"][0], by_hand, rtol=1e-12)
    assert by_hand[1] - by_hand[0] == pytest.approx(2.0, abs=0.4)  # dry ice takes 2 off the score in the invented table


def test_row_weights_are_refused_in_words_and_scikit_learn_sees_none():
    frame, y = _shipments()
    weights = np.ones(len(y))
    for estimator in (SheetnetRegressor(hidden=(2,), **QUICK), SheetnetClassifier(hidden=(2,), **QUICK)):
        assert not has_fit_parameter(estimator, "sample_weight")
        checks = {getattr(check, "func", check).__name__ for _, check in estimator_checks_generator(estimator, mark="skip")}
        weight_checks = {c for c in checks if "sample_weight" in c}
        # the one such check scikit-learn runs on an estimator without the parameter: fitting with weights is refused, naming them
        assert "check_estimators_dtypes" in checks and weight_checks == ({"check_classifiers_one_label_sample_weights"} if is_classifier(estimator) else set())
    with pytest.raises(errors.InputError, match="sample_weight is not supported: sheetnet weighs every training row alike"):
        SheetnetRegressor(hidden=(2,), **QUICK).fit(frame, y, sample_weight=weights)
    with pytest.raises(errors.InputError, match="sample_weight is not supported"):
        Pipeline([("net", SheetnetRegressor(hidden=(2,), **QUICK))]).fit(frame, y, net__sample_weight=weights)
    with pytest.raises(errors.InputError, match="sample_weight is not supported"):
        GridSearchCV(SheetnetRegressor(hidden=(2,), **QUICK), {"decay": [1e-4]}, cv=2, error_score="raise").fit(frame, y, sample_weight=weights)
    with pytest.raises(errors.InputError, match="fit takes X and y only, but was also given check_input; leave them out"):
        SheetnetClassifier(hidden=(2,), **QUICK).fit(frame, y > 1, check_input=False)


def test_a_fitted_estimator_pickles_and_predicts_the_same():
    frame, y = _shipments()
    estimator = SheetnetRegressor(hidden=(3,), **QUICK).fit(frame, y)
    copy = pickle.loads(pickle.dumps(estimator))
    np.testing.assert_array_equal(copy.predict(frame), estimator.predict(frame))


def test_messages_of_the_scikit_learn_door():
    frame, y = _shipments()
    with pytest.raises(NotTrainedError, match="not fitted yet") as unfitted:
        SheetnetRegressor().predict(frame)
    assert isinstance(unfitted.value, NotFittedError) and isinstance(unfitted.value, errors.SheetnetError)
    with pytest.raises(errors.InputError, match="X is one-dimensional; Reshape your data"):
        SheetnetRegressor(**QUICK).fit(frame["transit_hours"], y)
    with pytest.warns(DataConversionWarning, match="A column-vector y was passed"):
        SheetnetRegressor(hidden=(2,), **QUICK).fit(frame, y.reshape(-1, 1))
    trained = SheetnetRegressor(hidden=(2,), **QUICK).fit(frame, y)
    with pytest.raises(errors.UnknownColumnError, match="The feature names should match those that were passed during fit"):
        trained.predict(frame[["packaging", "transit_hours", "door_openings"]])
    with pytest.raises(errors.InputError, match="Unknown label type: the target holds continuous numbers"):
        SheetnetClassifier(**QUICK).fit(frame, y)
    with pytest.raises(errors.InputError, match=r"requires y to be passed, but the target y is None"):
        SheetnetClassifier(**QUICK).fit(frame, None)
    with pytest.raises(errors.InputError, match="Feature names are only supported if all input features have string names"):
        SheetnetRegressor(**QUICK).fit(frame.set_axis(["transit_hours", 2, "packaging"], axis=1), y)
    with pytest.raises(errors.NotEnoughRowsError, match=r"needs at least 4 rows; X has 1 row \(1 sample\)"):
        SheetnetRegressor(**QUICK).fit(frame.iloc[:1], y[:1])


ARRAY_API_CHECK = """
from sklearn.utils.estimator_checks import check_array_api_input
from sheetnet.estimators import SheetnetClassifier, SheetnetRegressor
for estimator in (SheetnetRegressor(hidden=(4,), **QUICK), SheetnetClassifier(hidden=(4,), **QUICK)):
    check_array_api_input(type(estimator).__name__, estimator, array_namespace="numpy", expect_only_array_outputs=False)
    print("passed", type(estimator).__name__)
"""


def test_the_array_api_check_with_dispatch_enabled():
    """scikit-learn's check that array API dispatch leaves NumPy results unchanged; SciPy reads SCIPY_ARRAY_API when it loads."""
    program = f"QUICK = {QUICK!r}\n" + ARRAY_API_CHECK
    done = subprocess.run([sys.executable, "-W", "error", "-c", program], env={**os.environ, "SCIPY_ARRAY_API": "1"},
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.split("\n")[:2] == ["passed SheetnetRegressor", "passed SheetnetClassifier"]
