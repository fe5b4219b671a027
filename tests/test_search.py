"""Model search: the ranking, the one-standard-error choice, and that it scores exactly what cross-validation scores."""

import math
import shlex

import numpy as np
import pytest

import sheetnet
from sheetnet.block import decode_block
from sheetnet.search import Candidate, default_candidates, network_weights, rank, score_candidate
from sheetnet.workbook import open_book, read_model


def _scored(hidden, decay, folds, weights):
    return score_candidate(Candidate(hidden, decay), weights, decay, folds)


def test_ranking_and_choice_against_a_hand_check():
    # worked by hand: A's mean is 1.1, its deviations -0.1, 0.1, 0, -0.2, 0.2 give a standard deviation of
    # sqrt(0.10 / 4) = 0.1581 and a standard error of 0.1581 / sqrt(5) = 0.0707, so the bar is 1.1707
    a = _scored((8,), 1e-4, [1.0, 1.2, 1.1, 0.9, 1.3], 41)
    b = _scored((4,), 1e-4, [1.15] * 5, 21)  # within the bar, fewer weights than A
    e = _scored((4,), 1e-2, [1.16] * 5, 21)  # within the bar, as few weights as B and more decay: the simplest
    d = _scored((4,), 1.0, [1.18] * 5, 21)  # more decay still, but outside the bar
    c = _scored((), 1e-4, [1.3] * 5, 4)  # simplest of all, far outside
    assert a.spread == pytest.approx(math.sqrt(0.025)) and a.standard_error == pytest.approx(math.sqrt(0.025) / math.sqrt(5))
    ranking, best, chosen = rank([c, d, e, b, a], higher_is_better=False)
    assert [s.mean for s in ranking] == pytest.approx([1.1, 1.15, 1.16, 1.18, 1.3])
    assert best is a and chosen is e


def test_a_score_where_higher_is_better_ranks_the_other_way():
    sure = _scored((8,), 1e-4, [0.90, 0.92, 0.88], 41)  # mean 0.90, sd 0.02, se 0.01155
    close = _scored((2,), 1e-4, [0.89, 0.89, 0.89], 11)  # 0.89 is within 0.90 - 0.01155
    far = _scored((), 1e-4, [0.80, 0.80, 0.80], 3)
    ranking, best, chosen = rank([far, close, sure], higher_is_better=True)
    assert ranking == (sure, close, far) and best is sure and chosen is close


def test_the_best_is_chosen_when_nothing_simpler_comes_close():
    best = _scored((8,), 1e-4, [1.0, 1.0, 1.0], 41)  # no spread: the bar is the best mean itself
    simpler = _scored((4,), 1e-4, [1.01, 1.01, 1.01], 21)
    assert rank([simpler, best], higher_is_better=False)[2] is best


def test_network_weights_count_weights_and_biases():
    assert network_weights(3, (), 1) == 4
    assert network_weights(3, (8, 4), 2) == (3 + 1) * 8 + (8 + 1) * 4 + (4 + 1) * 2


def test_the_default_grid_has_twelve_candidates_from_linear_to_two_layers():
    grid = default_candidates()
    assert len(grid) == 12 and len(set(grid)) == 12
    assert {c.hidden for c in grid} == {(), (4,), (16,), (16, 8)} and {c.decay for c in grid} == {1e-4, 1e-2, 1.0}


def _curved(rows=160, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(rows, 2))
    return X, np.sin(2 * X[:, 0]) + 0.5 * X[:, 1] + 0.1 * rng.normal(size=rows)


def test_search_scores_each_candidate_exactly_as_cross_validation_does():
    X, y = _curved()
    candidates = [Candidate(()), Candidate((6,), 0.01), {"hidden": (3,), "algorithm": "irprop+"}]
    result = sheetnet.search(X, y, candidates, k=3, seed=2, workers=1, epochs=60)
    by_hidden = {s.candidate.hidden: s for s in result.ranking}
    for hidden, settings in (((), {}), ((6,), {"decay": 0.01}), ((3,), {"algorithm": "irprop+"})):
        folds = sheetnet.cross_validate(X, y, k=3, seed=2, hidden=hidden, workers=1, epochs=60, **settings)["folds"]
        assert by_hidden[hidden].fold_scores == tuple(f["rmse"] for f in folds)
    means = sorted(s.mean for s in result.ranking)
    assert [s.mean for s in result.ranking] == means  # rmse: lowest first
    assert result.ranking[-1].candidate.hidden == ()  # a line cannot follow the sine
    assert result.metric == "rmse" and result.mode == "random" and result.folds == 3
    assert result.best.mean - result.best.standard_error <= result.chosen.mean <= result.best.mean + result.best.standard_error


def test_search_honours_ordered_folds():
    X, y = _curved(120)
    result = sheetnet.search(X, y, [Candidate((3,))], k=3, mode="ordered", workers=1, epochs=30)
    folds = sheetnet.cross_validate(X, y, k=3, hidden=(3,), mode="ordered", workers=1, epochs=30)["folds"]
    assert result.mode == "ordered" and result.ranking[0].fold_scores == tuple(f["rmse"] for f in folds)


def test_search_on_classes_ranks_by_log_loss_unless_told():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(150, 2))
    y = np.where(X[:, 0] * X[:, 1] > 0, "same", "differ")  # needs a hidden layer
    found = sheetnet.search(X, y, [Candidate(()), Candidate((6,))], k=3, workers=1, epochs=100)
    assert found.metric == "log_loss" and not found.higher_is_better and found.mode == "stratified"
    assert found.best.candidate.hidden == (6,)
    by_accuracy = sheetnet.search(X, y, [Candidate(()), Candidate((6,))], k=3, workers=1, epochs=100, metric="accuracy")
    assert by_accuracy.higher_is_better and by_accuracy.ranking[0].mean > 0.8 > by_accuracy.ranking[1].mean


def test_result_rows_show_the_ranking_and_the_choice():
    X, y = _curved(100)
    rows = sheetnet.search(X, y, [Candidate((2,)), Candidate((), 1.0)], k=2, workers=1, epochs=20).rows()
    assert rows[0] == ["rank", "hidden", "decay", "algorithm", "weights", "mean rmse", "spread", "standard error", "choice"]
    assert [r[0] for r in rows[1:]] == [1, 2]
    assert {r[1] for r in rows[1:]} == {"2", "0"}  # hidden as TRAIN reads it: 0 for none
    assert sum("use this" in r[8] for r in rows[1:]) == 1 and rows[1][8].startswith("best mean")


def test_search_refuses_bad_requests_before_training():
    X, y = _curved(60)
    with pytest.raises(sheetnet.SheetnetError, match="metric 'median' is not known"):
        sheetnet.search(X, y, [Candidate((2,))], metric="median")
    with pytest.raises(sheetnet.SheetnetError, match="metric accuracy does not fit a target learned as numbers"):
        sheetnet.search(X, y, [Candidate((2,))], metric="accuracy")
    with pytest.raises(sheetnet.SheetnetError, match="has no candidates"):
        sheetnet.search(X, y, [])
    with pytest.raises(sheetnet.SheetnetError, match="not whole numbers of 1 or more"):
        sheetnet.search(X, y, [Candidate((0,))])
    with pytest.raises(sheetnet.SheetnetError, match="decay"):
        sheetnet.search(X, y, [Candidate((2,), -1.0)])
    with pytest.raises(sheetnet.SheetnetError, match="a candidate has width"):
        sheetnet.search(X, y, [{"width": 3}])


def _sheet(rows=90, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(rows, 2))
    y = np.sin(2 * X[:, 0]) + 0.5 * X[:, 1] + 0.1 * rng.normal(size=rows)
    return [["week", "a", "b", "store", "sales"]] + [[i, float(a), float(b), f"s{i % 6}", float(v)] for i, ((a, b), v) in enumerate(zip(X, y))]


def test_the_cell_function_ranks_like_the_python_search():
    from sheetnet import functions

    table = _sheet()
    answer = functions.search(table, "sales", [["hidden", "decay"], ["0", None], [3, 0.01]], "ignore=week, store; epochs=40; seed=1", "ordered 3")
    X = np.array([[row[1], row[2]] for row in table[1:]])
    y = np.array([row[4] for row in table[1:]])
    direct = sheetnet.search(X, y, [Candidate(()), Candidate((3,), 0.01)], k=3, seed=1, mode="ordered", epochs=40)
    assert answer[0][5] == "mean rmse"
    # a DataFrame and an array of the same numbers are scaled in a different order: equal to the last bit or two
    assert [row[5] for row in answer[1:3]] == pytest.approx([s.mean for s in direct.ranking], rel=1e-12)
    assert answer[3][:2] == ["choice rule", direct.rule] and answer[4][:2] == ["folds", "3 folds, ordered"]
    assert all(len(row) == 9 for row in answer)


def test_the_cell_function_keeps_groups_whole_and_leaves_their_column_out():
    from sheetnet import functions

    answer = functions.search(_sheet(), "sales", [["hidden"], [2]], "ignore=week; epochs=20", "grouped store 3")
    assert answer[1][4] == (2 + 1) * 2 + (2 + 1) * 1  # inputs a and b only: the group column is not an input
    assert answer[-1][1] == "3 folds, grouped by store"


def test_the_cell_function_answers_in_spreadsheet_words():
    from sheetnet import functions

    table = _sheet(30)
    assert functions.search(table, "sales", None, None, "weekly")[0][0].startswith("#SHEETNET! the folds 'weekly' are not understood")
    assert functions.search(table, "sales", [["width"], [3]])[0][0].startswith("#SHEETNET! the candidates' header has 'width'")
    missing = functions.search(table, "sales", None, None, "grouped shop")[0][0]
    assert missing == "#SHEETNET! the table has no column named 'shop'; its columns are: week, a, b, store, sales"
    table[5][1] = "lots"
    found = functions.search(table, "sales", [["hidden"], [2]], "ignore=week, store", 2)[0][0]
    assert found.startswith("#SHEETNET!") and "row 6 of the table" in found  # the row as the user counts it, not inside a fold


def test_the_search_command_prints_the_ranking_and_how_to_train_the_choice(tmp_path, capsys):
    import openpyxl

    from sheetnet.cli import main

    book = openpyxl.Workbook()
    for row in _sheet(80):
        book.active.append(row)
    book.active.title = "Data"
    path = tmp_path / "sales.xlsx"
    book.save(path)
    before = path.read_bytes()
    code = main([
        "search", str(path), "--table", "Data!A1:E81", "--target", "sales", "--hidden", "0", "--hidden", "3", "--decay", "0.01",
        "--folds", "ordered 3", "--set", "ignore=week, store", "--set", "epochs=30",
    ])
    out = capsys.readouterr().out
    assert code == 0
    assert out.splitlines()[0] == "2 candidates for sales on Data!A1:E81; 3 folds, ordered"
    assert "mean rmse" in out and "use this" in out and "rule: the simplest candidate" in out
    suggested = next(line for line in out.splitlines() if line.startswith("to train it: "))
    assert suggested.startswith(f"to train it: sheetnet train {path} --table 'Data!A1:E81' --target sales --name NAME --hidden ")
    assert "--set 'ignore=week, store' --set epochs=30" in suggested  # the shared settings travel; the ranking is of them
    assert path.read_bytes() == before  # a search writes nothing
    words = shlex.split(suggested.removeprefix("to train it: "))
    assert main([w if w != "NAME" else "chosen" for w in words[1:]]) == 0  # the suggestion runs as printed
    capsys.readouterr()
    stored, _ = decode_block(read_model(open_book(path), "chosen"))
    kept = suggested.split("--hidden ")[1].split()[0]
    assert stored.hidden == (() if kept == "0" else tuple(int(w) for w in kept.split(",")))
    assert stored.settings["epochs"] == 30 and stored.input_names == ("a", "b")  # week and store were ignored
    assert main(["search", str(path), "--table", "Data!A1:E81", "--target", "sales", "--folds", "grouped nowhere"]) == 1
    assert "the table has no column named 'nowhere'" in capsys.readouterr().err
