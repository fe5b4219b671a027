import numpy as np
import pytest

from sheetnet import errors
from sheetnet.splits import holdout_mask, k_folds


def test_ordered_split_holds_out_the_last_rows():
    mask = holdout_mask(10, 0.3, mode="ordered")
    assert mask.tolist() == [False] * 7 + [True] * 3


def test_random_split_takes_the_share_and_repeats_with_the_seed():
    first = holdout_mask(200, 0.25, seed=3)
    assert first.sum() == 50
    np.testing.assert_array_equal(first, holdout_mask(200, 0.25, seed=3))
    assert not np.array_equal(first, holdout_mask(200, 0.25, seed=4))


def test_stratified_split_keeps_the_class_mix():
    labels = np.array(["a"] * 60 + ["b"] * 30 + ["c"] * 10)
    mask = holdout_mask(100, 0.2, seed=1, mode="stratified", labels=labels)
    held = labels[mask]
    assert [(held == c).sum() for c in "abc"] == [12, 6, 2]


def test_stratified_split_refuses_a_class_with_one_row():
    labels = ["a", "a", "a", "b"]
    with pytest.raises(errors.SplitError, match="class 'b' has a single row"):
        holdout_mask(4, 0.5, mode="stratified", labels=labels)


def test_split_messages_show_labels_in_spreadsheet_words():
    labels = np.array([1.0, 1.0, 1.0, 2.0])
    with pytest.raises(errors.SplitError) as refused:
        holdout_mask(4, 0.5, mode="stratified", labels=labels)
    assert str(refused.value).startswith("class 2 has a single row")  # not np.float64(2.0)
    with pytest.raises(errors.SplitError, match="class 1 has 3 rows, fewer than the 5 folds"):
        k_folds(10, 5, labels=np.array([1.0] * 3 + [0.0] * 7))
    with pytest.raises(errors.SplitError, match="^the holdout share is 1.5; give a number between 0 and 1"):
        holdout_mask(10, np.float64(1.5))


@pytest.mark.parametrize("share", [0, 1, 1.5, -0.1])
def test_holdout_share_must_lie_between_zero_and_one(share):
    with pytest.raises(errors.SplitError, match="between 0 and 1"):
        holdout_mask(10, share)


def test_k_folds_test_every_row_once_and_stratify():
    labels = np.array([0] * 30 + [1] * 20)
    folds = k_folds(50, 5, seed=2, labels=labels)
    tested = np.concatenate([test for _, test in folds])
    assert sorted(tested.tolist()) == list(range(50))
    for train, test in folds:
        assert len(set(train) & set(test)) == 0
        assert (labels[test] == 1).sum() == 4
