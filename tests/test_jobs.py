"""Training jobs without HTTP: refusals leave nothing behind, bounds, cancelling, messages, placements."""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
import sheetnet_demo

from sheetnet import functions, service
from sheetnet.errors import InputError
from sheetnet.jobs import BoardFull, JobBoard, JobRequestError, UnknownJob, check_train_arguments

WAIT = 60  # seconds a test waits for a job at most


@pytest.fixture(scope="module")
def table():
    frame = sheetnet_demo.cold_chain_shipments(rows=120, seed=4).drop(columns="shipment")
    return [list(frame.columns)] + frame.astype(object).values.tolist()


def _finish(job):
    assert job.finished.wait(WAIT), "the job did not finish in time"
    return job.view()


class Gate:
    """A stand-in trainer that holds every job until released, then answers a fixed block."""

    def __init__(self, block=None):
        self.release, self.block = threading.Event(), block

    def __call__(self, table, target, hidden, settings, split, progress=None):
        assert self.release.wait(WAIT)
        if self.block is None:
            raise RuntimeError("no block given")
        return self.block


@pytest.mark.parametrize("args", [[], [[["a", "y"], [1, 2]]], [1, 2, 3, 4, 5, 6], "table and target"])
def test_a_refused_request_leaves_no_job_behind(args):
    board = JobBoard()
    for _ in range(500):  # repeated bad requests must not grow the board
        with pytest.raises(JobRequestError):
            board.submit("model1", args)
    assert board.jobs() == [] and board.running_count() == 0


def test_refusal_messages_say_what_a_job_needs():
    with pytest.raises(JobRequestError, match=r"^a training job needs at least the table and the target column's name \(table, target\); got 1 argument$"):
        check_train_arguments([[["a"]]])
    with pytest.raises(JobRequestError, match=r"^SHEETNET.TRAIN takes at most 5 arguments; got 6$"):
        check_train_arguments([1, 2, 3, 4, 5, 6])
    assert check_train_arguments(["t", "y"]) == ["t", "y", None, None, None]


def test_a_bad_model_name_or_names_list_is_refused_before_registering(table):
    board = JobBoard()
    with pytest.raises(InputError, match="cannot be a model name"):
        board.submit("AB12", [table, "spoiled"])  # looks like a cell address
    with pytest.raises(JobRequestError, match="existing_names must be a list"):
        board.submit("shipments", [table, "spoiled"], existing_names="snf_x")
    with pytest.raises(JobRequestError, match="existing_names must be a list"):
        board.submit("shipments", [table, "spoiled"], existing_names=["ok", 3])
    assert board.jobs() == []


def test_a_done_job_has_its_block_its_curve_and_the_listed_model(table):
    board = JobBoard()
    view = _finish(board.submit("shipments", [table, "spoiled", "3", "epochs=40; seed=1"]))
    assert view["state"] == "done" and view["message"] is None
    assert view["result"][0][0] == "sheetnet model block"
    assert view["epoch"] == len(view["curve"]) > 0 and view["curve"][0][0] == 1
    assert view["placements"] is None  # the request carried no workbook names
    direct = functions.train(table, "spoiled", "3", "epochs=40; seed=1")
    assert [row[0] for row in view["result"]] == [row[0] for row in direct]  # the same block layout as the cell's
    [model] = board.models()
    assert model["name"] == "shipments" and dict(model["about"])["target"] == "spoiled"


def test_a_done_job_carries_the_services_placements_when_it_was_given_the_names(table):
    board = JobBoard()
    names = ["rates", "Shipments", "snf_shipments_m1_b1", "snf_other_m1_b1"]
    view = _finish(board.submit("shipments", [table, "spoiled", "3", "epochs=30"], existing_names=names))
    assert view["state"] == "done"
    expected = service.model_placements("shipments", view["result"], names).to_json()
    assert view["placements"] == expected
    assert expected["drop_names"] == ["Shipments", "snf_shipments_m1_b1"]  # the model's old names, nobody else's
    assert {n["name"] for n in expected["names"]} >= {"shipments", "snf_shipments_m1_W1n", "snf_shipments_classes"}


def test_a_failed_job_says_what_the_train_cell_says():
    rows = [["a", "b", "y"]] + [[float(i), float(i % 3), float(2 * i)] for i in range(1, 30)]
    rows[3][0] = "x"  # text in a numeric column, on the sheet's row 4 of the table
    board = JobBoard()
    view = _finish(board.submit("broken", [rows, "y"]))
    assert view["state"] == "failed" and view["result"] is None
    assert view["message"] == "#SHEETNET! column 'a', row 4 of the table: text in a numeric column ('x'); type a number, or clear the text and remove the row"
    assert view["message"] == functions.train(rows, "y")[0][0]
    missing = _finish(board.submit("broken", [rows, "nope"]))
    assert missing["message"] == "#SHEETNET! the table has no column named 'nope'; its columns are: a, b, y"
    assert board.models() == []


def test_an_unexpected_error_fails_the_job_with_a_message_to_report():
    gate = Gate(block=None)  # raises RuntimeError when released
    gate.release.set()
    view = _finish(JobBoard(trainer=gate).submit("buggy", [[["a", "y"], [1, 2]], "y"]))
    assert view["state"] == "failed"
    assert view["message"] == "#SHEETNET! unexpected RuntimeError: no block given. Please report this with the workbook"


def test_a_running_job_can_be_cancelled():
    rng = np.random.default_rng(0)
    big = [["a", "b", "c", "y"]] + [[*map(float, rng.normal(size=3)), float(rng.normal())] for _ in range(3000)]
    board = JobBoard()
    job = board.submit("long", [big, "y", "16", "algorithm=adam; decay=0; epochs=100000; patience=100000; validation_share=0"])
    for _ in range(WAIT * 20):
        if job.epoch >= 2 or job.finished.wait(0.05):
            break
    assert job.state == "running" and job.epoch >= 2
    assert board.cancel(job.id) == "cancelling"
    view = _finish(job)
    assert view["state"] == "cancelled" and view["message"] == "the training was cancelled"
    assert view["epoch"] < 100000 and view["result"] is None
    assert board.cancel(job.id) == "cancelled"  # cancelling again reports the final state
    assert board.models() == []


def test_unknown_jobs_are_refused_in_words():
    board = JobBoard()
    with pytest.raises(UnknownJob, match="there is no training job 'nope'"):
        board.get("nope")
    with pytest.raises(UnknownJob):
        board.cancel("nope")


def test_running_and_waiting_jobs_are_bounded_and_a_full_board_registers_nothing(table):
    block = functions.train(table, "spoiled", "2", "epochs=5")
    gate = Gate(block)
    board = JobBoard(max_running=2, max_waiting=1, trainer=gate)
    first, second, third = (board.submit(name, [table, "spoiled"]) for name in ("one", "two", "three"))
    for _ in range(WAIT * 20):  # the two trainers take the first two jobs; the third waits its turn
        if not first.waiting and not second.waiting:
            break
        threading.Event().wait(0.05)
    assert third.waiting and third.view()["state"] == "running" and third.view()["waiting"] is True
    assert board.running_count() == 2 and board.waiting_count() == 1
    with pytest.raises(BoardFull, match=r"^2 models are training and 1 are waiting already, the most this server takes at once; wait for one") as full:
        board.submit("four", [table, "spoiled"])
    assert full.value.retry_after == 10
    assert [j.id for j in board.jobs()] == [first.id, second.id, third.id]
    gate.release.set()
    assert _finish(first)["state"] == _finish(second)["state"] == _finish(third)["state"] == "done"
    assert board.running_count() == 0 and board.waiting_count() == 0
    fourth = board.submit("four", [table, "spoiled"])  # room again
    assert _finish(fourth)["state"] == "done"
    names = [m["name"] for m in board.models()]
    assert names[0] == "four" and sorted(names[1:]) == ["one", "three", "two"]  # newest first


def test_a_waiting_job_is_cancelled_at_once_and_never_trains(table):
    block = functions.train(table, "spoiled", "2", "epochs=5")
    gate = Gate(block)
    board = JobBoard(max_running=1, max_waiting=2, trainer=gate)
    first, second = board.submit("one", [table, "spoiled"]), board.submit("two", [table, "spoiled"])
    assert second.waiting
    assert board.cancel(second.id) == "cancelled" and second.finished.is_set()
    assert board.waiting_count() == 0
    gate.release.set()
    assert _finish(first)["state"] == "done"
    assert second.view()["state"] == "cancelled" and second.result is None
    assert [m["name"] for m in board.models()] == ["one"]


def test_cancel_wins_over_completion(table):
    block = functions.train(table, "spoiled", "2", "epochs=5")
    for _ in range(60):  # the trainer finishes right after the cancel was accepted, never reporting an epoch
        gate = Gate(block)
        board = JobBoard(max_running=1, trainer=gate)
        job = board.submit("raced", [table, "spoiled"])
        for _ in range(WAIT * 200):
            if not job.waiting:
                break
            threading.Event().wait(0.005)
        answer = board.cancel(job.id)
        gate.release.set()
        view = _finish(job)
        assert answer == "cancelling"
        assert view["state"] == "cancelled" and view["result"] is None and view["placements"] is None
        assert board.models() == []


def test_a_cancel_after_the_end_reports_the_end(table):
    block = functions.train(table, "spoiled", "2", "epochs=5")
    gate = Gate(block)
    gate.release.set()
    board = JobBoard(trainer=gate)
    job = board.submit("quick", [table, "spoiled"])
    _finish(job)
    assert board.cancel(job.id) == "done" and job.view()["state"] == "done"


def test_finished_jobs_are_forgotten_beyond_the_cells_they_may_hold(table):
    block = functions.train(table, "spoiled", "2", "epochs=5")
    cells = sum(len(row) for row in block)
    gate = Gate(block)
    gate.release.set()
    board = JobBoard(kept_finished=100, kept_cells=3 * cells, trainer=gate)
    ids = [board.submit(f"m{i}x", [table, "spoiled"]).id for i in range(6)]
    for job_id in ids:
        _finish(board.get(job_id)) if job_id in {j.id for j in board.jobs()} else None
    assert [j.id for j in board.jobs()] == ids[-3:]
    assert sum(j.cells for j in board.jobs()) == 3 * cells


def test_finished_jobs_and_models_kept_are_bounded(table):
    block = functions.train(table, "spoiled", "2", "epochs=5")
    gate = Gate(block)
    gate.release.set()
    board = JobBoard(kept_finished=3, kept_models=2, trainer=gate)
    ids = []
    for i in range(8):
        job = board.submit(f"m{i}x", [table, "spoiled"])
        _finish(job)
        ids.append(job.id)
    assert [j.id for j in board.jobs()] == ids[-3:]  # the oldest finished jobs are forgotten first
    with pytest.raises(UnknownJob):
        board.get(ids[0])
    assert [m["name"] for m in board.models()] == ["m7x", "m6x"]
    again = board.submit("M7X", [table, "spoiled"])  # the same model under another case: one entry
    _finish(again)
    assert [m["name"] for m in board.models()] == ["M7X", "m6x"]



def test_a_job_with_a_holdout_request_splits_and_seeds_as_every_door(table):
    from sheetnet.jobs import SplitRequest

    board = JobBoard()
    job = board.submit("spoilage", [table, "spoiled", "3", "epochs=40"], split=SplitRequest(0.25, "auto", 7, "'Shipments'!$A$1:$F$121"))
    assert _finish(job)["state"] == "done", job.message
    direct = service.train_model(service.TrainRequest(table, "spoiled", "3", "epochs=40", 0.25, "auto", 7, "'Shipments'!$A$1:$F$121"))
    from sheetnet.block import decode_block

    model, info = decode_block(job.result)
    assert np.array_equal(model.members[0].theta, decode_block(direct.block)[0].members[0].theta)
    assert model.seed == 7 and info.source == ("'Shipments'!$A$1:$F$121", 0.25, "auto", 7) and info.holdout_rows == 30


@pytest.mark.parametrize(
    "args, split, words",
    [
        (["T", "y", None, None, [["split"]]], (0.2, "auto", 0), "not both"),
        (["T", "y"], (1.5, "auto", 0), "holdout share must be a number from 0"),
        (["T", "y"], (0.2, "sideways", 0), "holdout mode 'sideways' is not known"),
        (["T", "y"], (0.2, "auto", -3), "seed must be a whole number of 0 or more"),
    ],
)
def test_a_bad_holdout_request_is_refused_before_any_job_exists(args, split, words):
    from sheetnet.jobs import SplitRequest

    board = JobBoard()
    with pytest.raises(JobRequestError, match=words):
        board.submit("m", args, split=SplitRequest(*split))
    assert board.jobs() == []


def test_the_tables_held_by_jobs_under_way_are_bounded(table):
    block = functions.train(table, "spoiled", "2", "epochs=5")
    gate = Gate(block)
    cells = len(table) * len(table[0])
    board = JobBoard(max_running=1, max_waiting=5, max_table_cells=2 * cells + 1, trainer=gate)
    first, second = board.submit("one", [table, "spoiled"]), board.submit("two", [table, "spoiled"])
    with pytest.raises(BoardFull, match=rf"^the training jobs under way hold {2 * cells:,} cells of tables already, and this one would add {cells:,}"):
        board.submit("three", [table, "spoiled"])
    assert board.cancel(second.id) == "cancelled"  # a cancelled waiting job lets its table go
    third = board.submit("three", [table, "spoiled"])
    gate.release.set()
    assert _finish(first)["state"] == _finish(third)["state"] == "done"
    for i in range(5):  # every job lets its table go at its end
        assert board.submit(f"m{i}x", [table, "spoiled"]).finished.wait(WAIT)


# --- TRAIN's content cache, and search jobs -------------------------------------------------------

@pytest.fixture
def counted_training(monkeypatch):
    """functions.train_block counting its calls (the cache sits in front of it), with TRAIN's cache emptied first."""
    calls = []
    real = functions.train_block

    def counting(*args, **kwargs):
        calls.append(args[:4])
        return real(*args, **kwargs)

    monkeypatch.setattr(functions, "train_block", counting)
    monkeypatch.setattr(functions, "_train_cache", type(functions._train_cache)())
    return calls


def test_a_repeated_train_job_answers_from_trains_cache_shared_with_the_cell(table, counted_training):
    board = JobBoard()
    arguments = [table, "spoiled", "3", "epochs=40; seed=2"]
    first = _finish(board.submit("shipments", arguments))
    assert first["state"] == "done" and first["epoch"] == 40 and len(counted_training) == 1
    again = _finish(board.submit("shipments", [[list(row) for row in table], "spoiled", "3", "epochs=40; seed=2"]))  # the same cells anew
    assert again["state"] == "done" and again["result"] == first["result"]
    assert again["epoch"] == 0 and again["curve"] == [] and len(counted_training) == 1  # answered without training
    assert functions.train(*arguments) == first["result"] and len(counted_training) == 1  # the cell finds the job's block
    other = _finish(board.submit("shipments", [table, "spoiled", "3", "epochs=41; seed=2"]))
    assert other["state"] == "done" and other["epoch"] == 41 and len(counted_training) == 2
    cell_first = functions.train(table, "spoiled", "2", "epochs=30")  # and a job finds the cell's
    assert _finish(board.submit("cellmade", [table, "spoiled", "2", "epochs=30"]))["result"] == cell_first and len(counted_training) == 3


def test_a_repeated_job_with_a_holdout_request_answers_from_trains_cache(table, counted_training):
    # the task pane's and Calc's path: the server makes the split; the same request again trains nothing
    from sheetnet.jobs import SplitRequest

    board = JobBoard()
    where = SplitRequest(0.25, "auto", 7, "'Shipments'!$A$1:$F$121")
    first = _finish(board.submit("spoilage", [table, "spoiled", "3", "epochs=40"], split=where))
    assert first["state"] == "done" and first["epoch"] == 40 and len(counted_training) == 1
    again = _finish(board.submit("spoilage", [[list(row) for row in table], "spoiled", "3", "epochs=40"], split=where))
    assert again["state"] == "done" and again["result"] == first["result"] and again["epoch"] == 0 and len(counted_training) == 1
    elsewhere = SplitRequest(0.25, "auto", 7, "'Shipments'!$A$1:$F$122")  # another recorded source: trained anew
    assert _finish(board.submit("spoilage", [table, "spoiled", "3", "epochs=40"], split=elsewhere))["epoch"] == 40
    assert len(counted_training) == 2


SEARCH_ARGS = [[["hidden"], [2], [4]], "epochs=30; decay=0.01; workers=1", 3]  # candidates, settings, folds


def test_a_search_job_answers_the_search_cells_ranking_with_progress_per_fold(table):
    from sheetnet.progress import reporting_to

    seen = []

    def recording_search(*args):  # the real search, its reports recorded beside the job's own listener
        with reporting_to(lambda what, done, total: seen.append((what, done, total))):
            return functions.raising(functions.search)(*args)

    board = JobBoard(searcher=recording_search)
    view = _finish(board.submit("rank", [table, "spoiled", *SEARCH_ARGS], function="SHEETNET.SEARCH"))
    assert view["state"] == "done" and view["message"] is None and view["function"] == "SHEETNET.SEARCH"
    assert view["result"] == functions.search(table, "spoiled", *SEARCH_ARGS)  # the cell's answer, to the last bit
    assert view["result"][0][:2] == ["rank", "hidden"] and view["result"][-1][:2] == ["folds", "3 folds, stratified"]
    assert seen == [("search folds", k, 6) for k in range(1, 7)]  # 2 candidates x 3 folds, one report per finished fold
    assert (view["stage"], view["done"], view["total"]) == ("search folds", 6, 6)
    assert board.models() == []  # a search stores no model


def test_a_running_search_job_can_be_cancelled(table):
    board = JobBoard()
    job = board.submit("rank", [table, "spoiled", None, "epochs=60; workers=1"], function="SHEETNET.SEARCH")  # 12 candidates x 5 folds
    for _ in range(WAIT * 20):
        if job.done >= 1 or job.finished.wait(0.05):
            break
    assert job.state == "running" and job.done >= 1 and job.total == 60
    assert board.cancel(job.id) == "cancelling"
    view = _finish(job)
    assert view["state"] == "cancelled" and view["message"] == "the search was cancelled" and view["result"] is None
    assert view["done"] < 60


ENDLESS = "algorithm=gd; rate=0.0001; gradient_threshold=0; decay=0; patience=100000; epochs=1000000; workers=1"


@pytest.mark.parametrize("function, args", [
    ("SHEETNET.SEARCH", [None, ENDLESS, 3]),  # its first fit alone would run for hours
    ("SHEETNET.TRAIN", ["3", f"{ENDLESS}; repeats=2"]),  # repeats report no epochs of their own
])
def test_a_cancel_stops_the_fit_under_way_not_only_at_the_next_finished_one(table, function, args):
    board = JobBoard()
    job = board.submit("endless", [table, "spoiled", *args], function=function)
    assert not job.finished.wait(0.5) and job.state == "running" and job.done == 0  # no fit has finished
    started = time.monotonic()
    assert board.cancel(job.id) == "cancelling"
    view = _finish(job)
    assert view["state"] == "cancelled" and view["result"] is None and view["done"] == 0
    assert time.monotonic() - started < 5  # within an epoch, not hours


def test_a_search_job_that_fails_says_what_the_search_cell_says_and_bad_requests_leave_nothing(table):
    board = JobBoard()
    failed = _finish(board.submit("rank", [table, "nope"], function="SHEETNET.SEARCH"))
    assert failed["state"] == "failed" and failed["message"] == functions.search(table, "nope")[0][0]
    assert failed["message"].startswith("#SHEETNET! the table has no column named 'nope'")
    refusals = [
        (dict(args=[table, "spoiled", None, None, None, 6], function="SHEETNET.SEARCH"), r"^SHEETNET.SEARCH takes at most 5 arguments; got 6$"),
        (dict(args=[table], function="SHEETNET.SEARCH"), r"^a search job needs at least the table and the target column's name"),
        (dict(args=[table, "spoiled"], function="SHEETNET.PREDICT"), r"^a job runs SHEETNET.TRAIN or SHEETNET.SEARCH, not SHEETNET.PREDICT"),
        (dict(args=[table, "spoiled"], function="SHEETNET.SEARCH", existing_names=[]), "a search job stores no model and makes its own folds"),
    ]
    for request, words in refusals:
        with pytest.raises(JobRequestError, match=words):
            board.submit("rank", **request)
    assert len(board.jobs()) == 1
