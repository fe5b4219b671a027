"""Conformal intervals and sets cover at their level; bootstrap error bars cover a known metric at theirs."""

import math

import numpy as np
import pytest
from scipy.stats import binom
from sklearn.datasets import make_friedman1

import sheetnet
from sheetnet import uncertainty as u
from sheetnet.errors import InputError, SettingError

TRIALS = 2000  # fresh calibration sets, one fresh row checked against each: the hits are independent Bernoulli draws


def _binomial_band(trials, low_p, high_p, tail=1e-4):
    """Hit shares a Binomial(trials, p) falls outside with probability below ``tail`` for any p in [low_p, high_p]."""
    return binom.ppf(tail, trials, low_p) / trials, binom.isf(tail, trials, high_p) / trials


@pytest.fixture(scope="module")
def friedman_model():
    # scikit-learn's make_friedman1 (Friedman 1991), noise 1.0: y = 10 sin(pi x1 x2) + 20 (x3 - 0.5)^2 + 10 x4 + 5 x5 + N(0, 1)
    X, y = make_friedman1(2000, noise=1.0, random_state=12345)
    return sheetnet.fit(X, y, (16,), seed=0)


def test_conformal_quantile_is_the_rank_lei_et_al_give():
    scores = [0.1, 0.4, 0.2, 0.3, 0.5, 0.9, 0.7, 0.6, 0.8]
    assert u.conformal_quantile(scores, 0.9) == 0.9  # ceil(10 * 0.9) = 9th of 9
    assert u.conformal_quantile(scores, 0.8) == 0.8  # ceil(10 * 0.8) = 8th
    assert u.conformal_quantile(list(range(1, 20)), 0.9) == 18  # ceil(20 * 0.9) = 18th of 19
    with pytest.raises(InputError, match="at least 9 rows"):
        u.conformal_quantile(scores[:8], 0.9)
    assert u.rows_needed(0.9) == 9 and u.rows_needed(0.95) == 19 and u.rows_needed(0.8) == 4


def test_levels_read_from_cells():
    assert u.read_level(None) == 0.9 and u.read_level("") == 0.9
    assert u.read_level("95%") == pytest.approx(0.95) and u.read_level(80) == pytest.approx(0.8) and u.read_level(0.75) == 0.75
    for bad in ("most", 100, "40%", True):
        with pytest.raises(SettingError, match="level"):
            u.read_level(bad)


def test_regression_intervals_cover_friedman1_at_the_level_with_the_width_of_the_noise(friedman_model):
    level, n = 0.9, 100
    hits, quantiles = [], []
    for seed in range(TRIALS):
        X, y = make_friedman1(n + 1, noise=1.0, random_state=seed)
        conformal = u.calibrate(friedman_model, X[:n], y[:n], level)
        low, high = u.predict_interval(friedman_model, conformal, X[n:])
        hits.append(low[0] <= y[n] <= high[0])
        quantiles.append(conformal.quantile)
    # split-conformal coverage lies in [level, level + 1/(n + 1)] (Lei et al. 2018, theorem 2.2)
    lowest, highest = _binomial_band(TRIALS, level, level + 1 / (n + 1))
    assert lowest <= np.mean(hits) <= highest, np.mean(hits)
    # with noise N(0, 1) the best possible 90 % half-width is z(0.95) = 1.645 (normal quantile, from memory); the
    # network adds its own error (test RMSE about 1.08 here), so the half-width sits a little above
    median = float(np.median(quantiles))
    assert 1.645 <= median <= 1.645 * 1.25, median


def test_class_sets_cover_at_the_level():
    rng = np.random.default_rng(7)
    centres = np.array([[0.0, 0.0], [1.5, 0.0], [0.0, 1.5]])  # three overlapping invented classes

    def draw(rows, generator):
        labels = generator.integers(0, 3, rows)
        return centres[labels] + generator.normal(size=(rows, 2)), labels

    X, y = draw(1500, rng)
    model = sheetnet.fit(X, y, (6,), seed=0)
    level, n = 0.8, 60
    hits, sizes = [], []
    for seed in range(TRIALS):
        Xs, ys = draw(n + 1, np.random.default_rng(1000 + seed))
        conformal = u.calibrate(model, Xs[:n], ys[:n], level)
        member = u.predict_sets(model, conformal, Xs[n:])[0]
        hits.append(bool(member[list(model.classes).index(ys[n])]))
        sizes.append(int(member.sum()))
    lowest, highest = _binomial_band(TRIALS, level, level + 1 / (n + 1))
    assert lowest <= np.mean(hits) <= highest, np.mean(hits)
    assert 1.0 < np.mean(sizes) < 2.5  # overlapping classes: sometimes two are possible, rarely all three


def test_interval_and_set_refuse_the_other_task(friedman_model):
    conformal = u.Conformal(0.9, 100, 1.0, u.SCORES[0])
    with pytest.raises(SettingError, match="output interval"):
        u.predict_sets(friedman_model, conformal, np.zeros((1, 10)))


def test_bootstrap_intervals_cover_a_known_mean_absolute_error_at_the_stated_rate():
    # errors drawn from N(0, 2): their mean absolute value is 2 * sqrt(2 / pi) (the normal's mean absolute deviation, from memory)
    truth = 2 * math.sqrt(2 / math.pi)
    trials, rows, level = 400, 200, 0.9
    covered = 0
    for seed in range(trials):
        errors = np.random.default_rng(seed).normal(0, 2, rows)
        bars = u.bootstrap_intervals(lambda idx, errors=errors: {"mae": float(np.mean(np.abs(errors[idx])))}, rows, level, resamples=300, seed=seed)
        low, high = bars["mae"]
        covered += low <= truth <= high
    # the percentile bootstrap is close to its level at 200 rows (Efron & Tibshirani 1993, ch. 13); allow the binomial spread
    lowest, highest = _binomial_band(trials, level - 0.02, level + 0.01)
    assert lowest <= covered / trials <= highest, covered / trials


def test_bootstrap_states_what_it_cannot_measure():
    with pytest.raises(InputError, match="at least 2"):
        u.bootstrap_intervals(lambda idx: {"x": 1.0}, 1)
    bars = u.bootstrap_intervals(lambda idx: {"steady": 1.0, "undefined": None}, 10, resamples=20)
    assert bars == {"steady": (1.0, 1.0)}


def test_reliability_table_by_hand():
    table = u.reliability_table([0, 1, 1, 1, 0], [0.05, 0.15, 0.95, 0.92, 1.0], bins=10)
    assert table == [
        (0.0, 0.1, 1, 0.05, 0.0),
        (0.1, 0.2, 1, 0.15, 1.0),
        (pytest.approx(0.9), 1.0, 3, pytest.approx((0.95 + 0.92 + 1.0) / 3), pytest.approx(2 / 3)),
    ]


def test_metric_error_bars_surround_the_holdout_metrics(friedman_model):
    X, y = make_friedman1(150, noise=1.0, random_state=777)
    found = sheetnet.score(friedman_model, X, y)
    bars = u.metric_error_bars(friedman_model, X, y, 0.9, resamples=300, seed=1)
    for name in ("rmse", "mae", "r2"):
        low, high = bars[name]
        assert low < found[name] < high, name
    assert bars == u.metric_error_bars(friedman_model, X, y, 0.9, resamples=300, seed=1)  # one seed, the same bars


def _small_binary_table():
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 1, 40)
    late = np.where(x + rng.normal(0, 0.2, 40) > 0.5, "late", "on time")  # an invented delivery outcome
    return [["distance", "arrival"]] + [[float(a), str(b)] for a, b in zip(x, late)]


def test_score_shows_the_reliability_table_counted_by_hand():
    from sheetnet import functions

    table = _small_binary_table()
    block = functions.train(table, "arrival", "2", "epochs=60")
    answer = functions.score(block, table, None, None, 4)
    probabilities = functions.predict(block, table, "probabilities")
    header = probabilities[0]
    positive = header[-1]  # the second class of the model is the positive one
    assert positive == "P(on time)"
    # the hand count: each row into bin floor(4 p) (p = 1 into the last), then per bin rows, mean p, share of the class
    counted = {}
    for (_p_first, p_second), row in zip(probabilities[1:], table[1:]):
        b = min(int(p_second * 4), 3)
        counted.setdefault(b, []).append((p_second, row[1] == "on time"))
    blank = next(i for i, row in enumerate(answer) if row[0] == "")
    assert answer[blank + 1] == ["reliability: predicted P(on time)", "rows", "mean predicted", "share on time"]
    shown = answer[blank + 2:]
    assert [row[0] for row in shown] == [f"{b / 4:.3g} to {(b + 1) / 4:.3g}" for b in sorted(counted)]
    for row, b in zip(shown, sorted(counted)):
        values = counted[b]
        assert row[1] == len(values)
        assert row[2] == pytest.approx(sum(p for p, _ in values) / len(values), abs=1e-12)
        assert row[3] == pytest.approx(sum(hit for _, hit in values) / len(values), abs=1e-12)
    assert sum(row[1] for row in shown) == 40 and all(len(row) == 4 for row in answer)
    assert answer[:blank] == [row + ["", ""] for row in functions.score(block, table)]  # the metrics as without it


def test_reliability_for_several_classes_and_its_refusals():
    import sheetnet_demo

    from sheetnet import functions

    lots = sheetnet_demo.coffee_lot_grades(rows=60, seed=1).drop(columns="lot")
    table = [list(lots.columns)] + lots.astype(object).values.tolist()
    block = functions.train(table, "grade", "3", "epochs=30")
    answer = functions.score(block, table, None, "90%", True)
    start = [row[0] for row in answer].index("reliability: probability of the picked class")
    assert answer[start][1:4] == ["rows", "mean predicted", "share picked right"] and len(answer[start]) == 5  # beside the error bars' five columns
    assert sum(row[1] for row in answer[start + 1:]) == 60 and len(answer) - start - 1 <= 10
    assert functions.score(block, table, None, None, "x")[0][0].startswith("#SHEETNET! the reliability bins are 'x'")
    numbers = [["x", "y"]] + [[float(i), float(i % 7)] for i in range(30)]
    refused = functions.score(functions.train(numbers, "y", "2", "epochs=10"), numbers, None, None, 5)
    assert refused[0][0].startswith("#SHEETNET! a reliability table is for models that predict classes")


def _looped_error_bars(model, X, y, level=0.9, resamples=1000, seed=0):
    """The plain reference: each resample in turn through sheetnet.metrics, as the bootstrap was first written."""
    from sheetnet.metrics import classification_metrics, regression_metrics

    if model.task == "regression":
        a, p = np.asarray(y, dtype=np.float64), model.predict(X)
        return u.bootstrap_intervals(lambda rows: regression_metrics(a[rows], p[rows]), len(a), level, resamples, seed)
    index = model.target.class_indices(np.asarray(y, dtype=object))
    probabilities = model.predict_proba(X)
    decided = (probabilities[:, 1] >= model.threshold).astype(np.int64) if model.task == "binary" else probabilities.argmax(axis=1)
    return u.bootstrap_intervals(
        lambda rows: classification_metrics(index[rows], probabilities[rows], model.classes, decided[rows]), len(index), level, resamples, seed
    )


@pytest.mark.parametrize("kind", ["regression", "binary", "multiclass"])
def test_batched_error_bars_equal_the_resample_by_resample_reference(kind, friedman_model):
    rng = np.random.default_rng(11)
    if kind == "regression":
        model = friedman_model
        X, y = make_friedman1(41, noise=1.0, random_state=5)  # an odd count of rows; MAPE is defined on some resamples only
        y = y - 2.0
    else:
        X = rng.normal(size=(300, 2))
        labels = (X[:, 0] + rng.normal(0, 0.7, 300) > 0).astype(int) + (kind == "multiclass") * (X[:, 1] > 0.8)
        y = np.array(["c%d" % v for v in labels], dtype=object)
        model = sheetnet.fit(X[:200], y[:200], (3,), seed=0, epochs=40)
        X, y = X[200:237], y[200:237]
    fast = u.metric_error_bars(model, X, y, 0.9, resamples=400, seed=3)
    slow = _looped_error_bars(model, X, y, 0.9, resamples=400, seed=3)
    assert sorted(fast) == sorted(slow) and len(fast) >= 3, sorted(slow)
    assert {"regression": "mape", "binary": "roc_auc", "multiclass": "balanced_accuracy"}[kind] in fast
    for name, (low, high) in slow.items():
        assert fast[name] == pytest.approx((low, high), rel=1e-12, abs=1e-14), name


@pytest.mark.parametrize("decimals", [None, 1])
def test_resampled_roc_auc_equals_the_rank_form_with_and_without_ties(decimals):
    from sheetnet.metrics import roc_auc

    rng = np.random.default_rng(1)
    positive, score = rng.integers(0, 2, 37).astype(bool), rng.uniform(0, 1, 37)
    score = score if decimals is None else np.round(score, decimals)  # rounded: many ties, counted half
    expected = [roc_auc(positive[i], score[i]) for i in u.resample_indices(37, 60, 2)]
    found = u.resampled_class_metrics(positive.astype(int), np.c_[1 - score, score], positive.astype(int), u.resample_counts(37, 60, 2))["roc_auc"]
    assert [None if np.isnan(f) else f for f in found] == pytest.approx(expected, abs=1e-12)
