"""Holdout evaluation, cross-validation and permutation importance."""

import numpy as np
import pytest
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.inspection import permutation_importance as reference_importance

import sheetnet
from sheetnet.evaluation import make_folds


def _signal_and_noise(rng, rows=400):
    X = rng.normal(size=(rows, 3))
    y = 3 * X[:, 0] + 0.5 * X[:, 1] + 0.1 * rng.normal(size=rows)  # column 3 is pure noise
    return X, y


def test_holdout_evaluation_trains_only_on_the_other_rows(rng):
    X, y = _signal_and_noise(rng)
    result = sheetnet.holdout_evaluation(X, y, share=0.25, seed=2, hidden=(3,))
    assert result.holdout.sum() == 100
    assert result.metrics["r2"] > 0.95
    expected = sheetnet.fit(X[~result.holdout], y[~result.holdout], hidden=(3,), seed=2)
    np.testing.assert_array_equal(expected.members[0].theta, result.model.members[0].theta)


def test_holdout_evaluation_is_stratified_for_classes(rng):
    X = rng.normal(size=(200, 2))
    y = np.where(X[:, 0] > 1.0, "rare", "common")
    result = sheetnet.holdout_evaluation(X, y, share=0.25, hidden=(2,))
    rare = (y == "rare")
    assert abs(rare[result.holdout].mean() - rare.mean()) < 0.02


def test_cross_validation_scores_every_fold(rng):
    X, y = _signal_and_noise(rng, 200)
    result = sheetnet.cross_validate(X, y, k=4, hidden=(3,), workers=2)
    assert len(result["folds"]) == 4
    one_by_one = sheetnet.cross_validate(X, y, k=4, hidden=(3,), workers=1)
    assert [f["rmse"] for f in result["folds"]] == [f["rmse"] for f in one_by_one["folds"]]
    assert result["mean"]["rmse"] == pytest.approx(np.mean([f["rmse"] for f in result["folds"]]))
    assert result["mean"]["r2"] > 0.9


class _Wrapped(RegressorMixin, BaseEstimator):
    """A scikit-learn estimator around a fitted sheetnet model, for the reference call."""

    def __init__(self, model=None):
        self.model = model

    def fit(self, X, y):
        return self

    def predict(self, X):
        return self.model.predict(X)


def test_permutation_importance_ranks_inputs_like_scikit_learn(rng):
    # reference: sklearn.inspection.permutation_importance with RMSE as the score
    X, y = _signal_and_noise(rng)
    model = sheetnet.fit(X[:300], y[:300], hidden=(4,), seed=0)
    ours = sheetnet.permutation_importance(model, X[300:], y[300:], repeats=30, seed=1)
    assert [name for name, _, _ in ours] == ["x1", "x2", "x3"]
    theirs = reference_importance(
        _Wrapped(model), X[300:], y[300:], scoring="neg_root_mean_squared_error", n_repeats=30, random_state=1
    )
    by_name = {name: mean for name, mean, _ in ours}
    for j, name in enumerate(["x1", "x2", "x3"]):
        # different random permutations: agree within 10 % of the largest importance
        assert by_name[name] == pytest.approx(theirs.importances_mean[j], abs=0.1 * theirs.importances_mean.max())
    assert abs(by_name["x3"]) < 0.05 * by_name["x1"]


def test_score_of_a_binary_model_uses_its_threshold(rng):
    X = rng.normal(size=(300, 2))
    y = np.where(X[:, 0] + rng.normal(scale=0.8, size=300) > 0, "yes", "no")
    model = sheetnet.fit(X, y, hidden=(2,), threshold=0.9)
    found = sheetnet.score(model, X, y)
    predicted = model.predict(X)
    assert found["accuracy"] == pytest.approx((predicted == y).mean())
    assert found["confusion"][:, 1].sum() == (predicted == "yes").sum()


def test_scores_leave_mape_out_for_a_target_that_crosses_zero(rng):
    X, y = _signal_and_noise(rng, rows=120)  # y is centred on 0, so it crosses zero
    model = sheetnet.fit(X, y, hidden=(3,), seed=0, epochs=50)
    found = sheetnet.score(model, X, y)
    assert found["mape"] is None and found["rmse"] > 0
    folds = sheetnet.cross_validate(X, y, k=3, hidden=(3,), workers=1, epochs=30)
    assert "mape" not in folds["mean"] and set(folds["mean"]) == {"rmse", "mae", "r2"}


def test_ordered_folds_never_train_on_later_rows():
    folds = make_folds(np.arange(103.0), k=4, mode="ordered")[1]
    assert len(folds) == 4
    for train_rows, test_rows in folds:
        assert train_rows.max() < test_rows.min()  # every training row comes before every test row
        np.testing.assert_array_equal(train_rows, np.arange(len(train_rows)))  # the window expands from the first row
    tested = np.concatenate([te for _, te in folds])
    np.testing.assert_array_equal(tested, np.arange(tested[0], 103))  # the later rows are each tested once
    # 103 rows cut at 0, 20.6, 41.2, 61.8, 82.4, 103 (rounded): the first block only trains
    assert [len(te) for _, te in folds] == [20, 21, 20, 21]


def test_ordered_cross_validation_trains_each_fold_on_the_earlier_rows_only(rng):
    X, y = _signal_and_noise(rng, 120)
    result = sheetnet.cross_validate(X, y, k=3, hidden=(2,), workers=1, epochs=30, mode="ordered")
    assert result["mode"] == "ordered" and result["rows"] == [(30, 30), (60, 30), (90, 30)]
    last = sheetnet.fit(X[:90], y[:90], hidden=(2,), epochs=30)  # the third fold by hand: rows 1-90 train, 91-120 test
    assert result["folds"][2]["rmse"] == sheetnet.score(last, X[90:], y[90:])["rmse"]
    assert result["spread"]["rmse"] == pytest.approx(np.std([f["rmse"] for f in result["folds"]], ddof=1))


def test_grouped_folds_never_split_a_group(rng):
    groups = rng.choice([f"store {i}" for i in range(13)], size=300)
    folds = make_folds(np.arange(300.0), k=5, groups=groups, seed=3)[1]
    for train_rows, test_rows in folds:
        assert not set(groups[train_rows]) & set(groups[test_rows])
    assert sorted(np.concatenate([te for _, te in folds]).tolist()) == list(range(300))
    sizes = [len(te) for _, te in folds]
    assert max(sizes) - min(sizes) <= max(np.unique(groups, return_counts=True)[1])  # dealt to the emptiest fold


def test_grouped_cross_validation_from_groups_alone(rng):
    X, y = _signal_and_noise(rng, 120)
    groups = np.repeat(np.arange(8), 15)
    result = sheetnet.cross_validate(X, y, k=4, hidden=(2,), workers=1, epochs=20, groups=groups)
    assert result["mode"] == "grouped" and [te for _, te in result["rows"]] == [30, 30, 30, 30]


def test_fold_modes_refuse_what_they_cannot_do():
    with pytest.raises(sheetnet.SheetnetError, match="grouped folds need the groups"):
        make_folds(np.zeros(20), mode="grouped")
    with pytest.raises(sheetnet.SheetnetError, match="at least 5 different groups; the group column has 2"):
        make_folds(np.zeros(20), groups=[1, 2] * 10)
    with pytest.raises(sheetnet.SheetnetError, match="groups were given with fold mode ordered"):
        make_folds(np.zeros(20), mode="ordered", groups=list(range(20)))
    with pytest.raises(sheetnet.SheetnetError, match="blank in data row 3"):
        make_folds(np.zeros(6), k=2, groups=["a", "b", None, "a", "b", "c"])
    with pytest.raises(sheetnet.SheetnetError, match="fold mode 'weekly' is not known"):
        make_folds(np.zeros(20), mode="weekly")
    with pytest.raises(sheetnet.SheetnetError, match="need at least 12 rows"):
        make_folds(np.zeros(11), k=5, mode="ordered")
    with pytest.raises(sheetnet.SheetnetError, match="stratified folds are for targets learned as classes"):
        make_folds(np.linspace(0, 1, 20), mode="stratified")


def test_importance_columns_give_the_same_answer_in_processes(rng):
    X, y = _signal_and_noise(rng, 200)
    model = sheetnet.fit(X, y, hidden=(3,), seed=0, epochs=50)
    here = sheetnet.permutation_importance(model, X, y, repeats=3, seed=4, workers=1)
    there = sheetnet.permutation_importance(model, X, y, repeats=3, seed=4, workers=2)
    assert here == there


def test_ordered_and_grouped_folds_refuse_classes_a_fold_cannot_learn():
    X = np.arange(120.0).reshape(-1, 1)
    late = np.where(np.arange(120) % 2 == 0, "a", "b")
    late[110:] = "c"  # a class that only the last rows have
    with pytest.raises(sheetnet.SheetnetError, match="ordered fold 3 of 3 trains on 90 rows and tests 30, and they hold a class its training rows never had"):
        sheetnet.cross_validate(X, late, k=3, mode="ordered", hidden=(2,), workers=1)
    with pytest.raises(sheetnet.SheetnetError, match="ordered fold 1 of 3 trains on 30 rows and tests 30, but its training rows hold a single class"):
        sheetnet.cross_validate(X, np.where(np.arange(120) < 50, "a", "b"), k=3, mode="ordered", hidden=(2,), workers=1)
    one_group_one_class = np.repeat(["p", "q", "r", "s"], 30)
    labels = np.where(one_group_one_class == "s", "rare", np.where(np.arange(120) % 2 == 0, "x", "y"))
    with pytest.raises(sheetnet.SheetnetError, match="grouped fold .* a class its training rows never had"):
        sheetnet.cross_validate(X, labels, k=4, groups=one_group_one_class, hidden=(2,), workers=1)


def test_a_bad_cell_is_named_at_its_row_in_the_whole_table_not_in_a_fold():
    X = np.arange(120.0).reshape(-1, 1).astype(object)
    X[97, 0] = "lots"
    with pytest.raises(sheetnet.SheetnetError, match="row 98"):
        sheetnet.cross_validate(X, np.arange(120.0), k=3, hidden=(2,), workers=1)


def _mixed_table(rng, rows=90):
    import pandas as pd

    frame = pd.DataFrame({
        "size": rng.normal(size=rows),
        "age": rng.integers(0, 40, size=rows).astype(np.float64),
        "region": rng.choice(["north", "south", "east"], size=rows),
    })
    y = 2.0 * frame["size"] + (frame["region"] == "east") * 1.5 + 0.1 * rng.normal(size=rows)
    return frame, y


def test_folds_and_the_holdout_of_a_polars_table_equal_those_of_the_same_pandas_table(rng):
    pl = pytest.importorskip("polars")  # in the dev extra
    frame, y = _mixed_table(rng)
    table = pl.DataFrame({name: frame[name].tolist() for name in frame.columns})
    target = pl.Series("y", y.tolist())
    settings = dict(hidden=(2,), epochs=25, decay=1e-4, workers=1)
    for mode in ("random", "ordered"):
        from_pandas = sheetnet.cross_validate(frame, y, k=3, mode=mode, **settings)
        from_polars = sheetnet.cross_validate(table, target, k=3, mode=mode, **settings)
        assert from_polars["rows"] == from_pandas["rows"] == ([(60, 30)] * 3 if mode == "random" else [(22, 23), (45, 23), (68, 22)])
        assert from_polars["folds"] == from_pandas["folds"]  # every metric of every fold, to the last bit
    groups = np.repeat(np.arange(9), 10)
    assert sheetnet.cross_validate(table, target, k=3, groups=groups, **settings)["folds"] == \
        sheetnet.cross_validate(frame, y, k=3, groups=groups, **settings)["folds"]
    held_pandas = sheetnet.holdout_evaluation(frame, y, share=0.3, seed=4, hidden=(2,), epochs=25, decay=1e-4)
    held_polars = sheetnet.holdout_evaluation(table, target, share=0.3, seed=4, hidden=(2,), epochs=25, decay=1e-4)
    np.testing.assert_array_equal(held_polars.holdout, held_pandas.holdout)
    assert held_polars.holdout.sum() == 27
    np.testing.assert_array_equal(held_polars.model.members[0].theta, held_pandas.model.members[0].theta)
    assert held_polars.metrics == held_pandas.metrics
    assert held_polars.model.input_names == ("size", "age", "region")  # names kept, not x1..x3


class _ArrayOnly:
    """A table that only converts itself with __array__ (as an array of another library would)."""

    def __init__(self, array):
        self._array = array

    def __array__(self, dtype=None, copy=None):
        return self._array if dtype is None else self._array.astype(dtype)


def test_folds_of_lists_and_array_like_tables_equal_those_of_the_array(rng):
    X, y = _signal_and_noise(rng, 60)
    settings = dict(k=3, hidden=(2,), epochs=20, decay=1e-4, workers=1)
    from_lists = sheetnet.cross_validate(X.tolist(), y.tolist(), **settings)["folds"]
    assert sheetnet.cross_validate(_ArrayOnly(X), _ArrayOnly(y), **settings)["folds"] == from_lists
    # A float array predicts through the model's folded-scaling fast path, which may round the last bit differently
    from_array = sheetnet.cross_validate(X, y, **settings)["folds"]
    for listed, array in zip(from_lists, from_array):
        assert listed == {name: pytest.approx(value, rel=1e-12) if value is not None else None for name, value in array.items()}
    picked = sheetnet.take_rows(_ArrayOnly(X), np.array([4, 0]))
    np.testing.assert_array_equal(np.column_stack(picked.columns), X[[4, 0]])


def test_a_sparse_table_is_refused_by_holdout_and_folds_in_words(rng):
    from scipy import sparse

    X = sparse.csr_matrix(rng.normal(size=(40, 2)))
    for run in (lambda: sheetnet.holdout_evaluation(X, np.arange(40.0)), lambda: sheetnet.cross_validate(X, np.arange(40.0), k=2)):
        with pytest.raises(sheetnet.SheetnetError, match="the inputs are a sparse matrix \\(40 by 2\\).*X.toarray\\(\\)"):
            run()
