"""Where runs of jobs go (here, processes, a cluster), that they give the same bits everywhere, and progress counts."""

import time

import numpy as np
import pytest

import sheetnet
from sheetnet import parallel
from sheetnet.progress import TerminalProgress, reporting_to
from sheetnet.search import Candidate


def seeded_draw(seed, size):
    """A job whose answer depends only on its own seed, as every sheetnet job does."""
    return np.random.default_rng(seed).normal(size=size)


def napping(seconds, value):
    time.sleep(seconds)
    return value


def nested_run(n):
    return sum(parallel.run_jobs(pow, [(2, i) for i in range(n)], workers=1, what="inner"))


@pytest.fixture(autouse=True)
def _on_this_machine(monkeypatch):
    monkeypatch.delenv(parallel.CLUSTER_VARIABLE, raising=False)
    with parallel.cluster(None):
        yield


def _table(rows=240, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(rows, 3))
    y = 2 * X[:, 0] - X[:, 1] ** 2 + 0.1 * rng.normal(size=rows)
    return X, y


def test_results_keep_job_order_and_bits_in_processes():
    jobs = [(seed, 50) for seed in range(6)]
    here = parallel.run_jobs(seeded_draw, jobs, workers=1)
    there = parallel.run_jobs(seeded_draw, jobs, workers=2)
    assert parallel.last_placement.where == "processes"
    for a, b in zip(here, there):
        np.testing.assert_array_equal(a, b)
    assert here[3][0] == np.random.default_rng(3).normal(size=50)[0]


def test_free_cores_leave_out_what_other_programs_keep_busy():
    assert parallel.free_cores(cores=2, load=0.0) == 2
    assert parallel.free_cores(cores=2, load=1.4) == 2  # this process itself is one of the running tasks
    assert parallel.free_cores(cores=2, load=1.6) == 1
    assert parallel.free_cores(cores=8, load=5.0) == 4
    assert parallel.free_cores(cores=2, load=9.0) == 1


def test_processes_pay_only_when_they_save_more_than_their_start():
    # 5 jobs of 1 s left: 5 s here; 2 processes: 4 s to start + 3 rounds x 1.3 s = 7.9 s
    assert not parallel.processes_pay(1.0, 5, 2, parallel.POOL_START_SECONDS)
    # the same jobs on a pool that is already running: 0.05 + 3.9 s beats 5 s
    assert parallel.processes_pay(1.0, 5, 2, parallel.POOL_REUSE_SECONDS)
    assert not parallel.processes_pay(10.0, 1, 2, 0.0)  # one job left: nothing to share


def _cores(monkeypatch, usable, free_meanwhile):
    monkeypatch.setattr(parallel, "usable_cores", lambda: usable)
    monkeypatch.setattr(parallel, "free_cores_between", lambda before, after, cores: free_meanwhile)


def test_auto_runs_here_on_one_usable_core(monkeypatch):
    _cores(monkeypatch, 1, None)
    parallel.run_jobs(seeded_draw, [(s, 3) for s in range(4)])
    assert parallel.last_placement == parallel.Placement("here", 1, "one usable core")


def test_auto_runs_here_when_the_other_cores_were_busy_during_the_first_job(monkeypatch):
    _cores(monkeypatch, 2, 1)
    monkeypatch.setattr(parallel, "POOL_START_SECONDS", 0.0)
    monkeypatch.setattr(parallel, "CONTENTION", 0.0)  # processes would pay, were a core free
    parallel.run_jobs(seeded_draw, [(s, 3) for s in range(4)])
    assert parallel.last_placement.where == "here" and "1 free core:" in parallel.last_placement.reason


def test_free_cores_are_counted_from_idle_time_while_the_first_job_ran():
    before = {0: (100, 1000), 1: (200, 1000), 2: (300, 1000)}
    # cpu 0 ran our job (2 % idle), cpu 1 was 90 % idle, cpu 2 was 50 % idle: 1 + 1.4 cores
    after = {0: (102, 1100), 1: (290, 1100), 2: (350, 1100)}
    assert parallel.free_cores_between(before, after, 3) == 2
    assert parallel.free_cores_between(before, {0: (101, 1002), 1: (201, 1002), 2: (301, 1002)}, 3) is None  # too short to tell
    assert parallel.free_cores_between({}, {}, 2) is None
    found = parallel.cpu_times()
    assert all(0 <= idle <= total for idle, total in found.values())


def test_auto_keeps_small_jobs_here_even_with_free_cores(monkeypatch):
    _cores(monkeypatch, 2, 2)
    monkeypatch.setattr(parallel, "_pool_used_at", {})
    found = parallel.run_jobs(seeded_draw, [(s, 3) for s in range(4)])
    assert parallel.last_placement.where == "here" and "would not pay" in parallel.last_placement.reason
    np.testing.assert_array_equal(found[2], seeded_draw(2, 3))


def test_auto_sends_long_jobs_to_processes_when_they_pay(monkeypatch):
    _cores(monkeypatch, 2, 2)
    monkeypatch.setattr(parallel, "POOL_START_SECONDS", 0.0)
    monkeypatch.setattr(parallel, "POOL_REUSE_SECONDS", 0.0)
    monkeypatch.setattr(parallel, "CONTENTION", 0.0)  # as if processes were free: any measured job pays
    X, y = _table(120)
    model = sheetnet.fit(X, y, hidden=(3,), repeats=4, epochs=40)
    assert parallel.last_placement.where == "processes"
    alone = sheetnet.fit(X, y, hidden=(3,), repeats=4, epochs=40, workers=1)
    for a, b in zip(model.members, alone.members):
        np.testing.assert_array_equal(a.theta, b.theta)


def test_auto_times_several_jobs_before_choosing(monkeypatch):
    # the first job takes no time (like a search's candidate without a hidden layer), the others 20 ms each:
    # timed alone it would keep all 40 here; timed with the jobs after it, processes pay
    _cores(monkeypatch, 2, 2)
    monkeypatch.setattr(parallel, "_pool_used_at", {})
    monkeypatch.setattr(parallel, "POOL_START_SECONDS", 0.05)
    pooled = []

    def run_pool_here(function, jobs, results, at_once, what, reporting, done, backend):  # no processes in this test
        pooled.extend(i for i, r in enumerate(results) if r is parallel._UNSET)
        return parallel._run_here(function, jobs, results, what, reporting, done)

    monkeypatch.setattr(parallel, "_run_pool", run_pool_here)
    jobs = [(0.0, 0)] + [(0.02, i) for i in range(1, 40)]
    assert parallel.run_jobs(napping, jobs) == list(range(40))
    timed_here = 40 - len(pooled)
    assert parallel.last_placement.where == "processes" and 1 < timed_here <= parallel.probe_count(40)
    assert parallel.last_placement.reason.startswith(f"{timed_here} jobs here at ")
    assert pooled == list(range(timed_here, 40))


def test_workers_must_be_a_whole_number():
    with pytest.raises(sheetnet.SheetnetError, match="workers must be a whole number of 1 or more"):
        parallel.run_jobs(pow, [(1, 1), (2, 2)], workers=0)


def test_progress_counts_every_job_once_in_order():
    seen = []
    with reporting_to(lambda what, done, total: seen.append((what, done, total))):
        parallel.run_jobs(seeded_draw, [(s, 2) for s in range(3)], workers=1, what="folds")
        parallel.run_jobs(seeded_draw, [(s, 2) for s in range(4)], workers=2, what="repeats")
    assert seen == [("folds", 1, 3), ("folds", 2, 3), ("folds", 3, 3)] + [("repeats", k, 4) for k in range(1, 5)]


def test_only_the_outermost_run_reports():
    seen = []
    with reporting_to(lambda what, done, total: seen.append((what, done, total))):
        assert parallel.run_jobs(nested_run, [(2,), (3,)], workers=1, what="outer") == [3, 7]
    assert seen == [("outer", 1, 2), ("outer", 2, 2)]


def test_progress_of_folds_importance_and_search():
    X, y = _table(120)
    seen = []
    with reporting_to(lambda what, done, total: seen.append((what, done, total))):
        sheetnet.cross_validate(X, y, k=3, hidden=(2,), workers=1, epochs=20)
        model = sheetnet.fit(X, y, hidden=(2,), repeats=2, workers=1, epochs=20, decay=1e-4)  # a given decay: no inner folds
        sheetnet.permutation_importance(model, X, y, repeats=2, workers=1)
        sheetnet.search(X, y, [Candidate((2,)), Candidate((3,))], k=2, workers=1, epochs=20)
    assert seen == (
        [("folds", k, 3) for k in (1, 2, 3)] + [("repeats", 1, 2), ("repeats", 2, 2)]
        + [("importance", k, 3) for k in (1, 2, 3)] + [("search folds", k, 4) for k in (1, 2, 3, 4)]
    )


class _Terminal:
    def __init__(self):
        self.text = ""

    def isatty(self):
        return True

    def write(self, text):
        self.text += text

    def flush(self):
        pass


def test_terminal_progress_shows_k_of_n_and_clears_its_line():
    terminal = _Terminal()
    line = TerminalProgress(terminal, every=0.0)
    with reporting_to(line):
        parallel.run_jobs(pow, [(2, 1), (2, 2)], workers=1, what="folds")
    assert "folds: 1 of 2 done" in terminal.text and terminal.text.rstrip(" ").endswith("folds: 2 of 2 done")
    line.done()
    assert terminal.text.endswith("\r")


def test_the_environment_variable_names_the_cluster(monkeypatch):
    monkeypatch.setenv(parallel.CLUSTER_VARIABLE, " tcp://127.0.0.1:8786 ")
    with parallel.cluster(None):
        assert parallel.cluster_address() is None  # set in Python: wins over the environment
    parallel._cluster_setting = parallel._UNSET
    try:
        assert parallel.cluster_address() == "tcp://127.0.0.1:8786"
    finally:
        parallel._cluster_setting = None


def test_a_missing_dask_is_a_message_that_says_what_to_install(monkeypatch):
    import sys

    monkeypatch.setitem(sys.modules, "distributed", None)
    with parallel.cluster("tcp://127.0.0.1:9"):
        with pytest.raises(parallel.ClusterError, match=r"needs Dask distributed.*cluster extra"):
            parallel.run_jobs(pow, [(1, 1), (2, 2)])


def test_a_scheduler_that_does_not_answer_is_a_message(monkeypatch):
    pytest.importorskip("distributed")
    monkeypatch.setattr(parallel, "CONNECT_SECONDS", 1)
    with parallel.cluster("tcp://127.0.0.1:9"):  # the discard port: nothing listens there
        with pytest.raises(parallel.ClusterError, match="no Dask scheduler answered at tcp://127.0.0.1:9"):
            parallel.run_jobs(pow, [(1, 1), (2, 2)])


# --- a real cluster: a LocalCluster on loopback with several worker processes ----------------

@pytest.fixture(scope="module")
def local_cluster():
    distributed = pytest.importorskip("distributed")
    cluster = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None, silence_logs=40,
    )
    client = distributed.Client(cluster)
    yield cluster, client
    parallel.close_clusters()
    client.close()
    cluster.close()


def test_the_cluster_gives_the_same_bits_as_one_process(local_cluster):
    from distributed import get_task_stream

    cluster, client = local_cluster
    X, y = _table(160)
    candidates = [Candidate((2,)), Candidate((3,), 0.01)]
    local_cv = sheetnet.cross_validate(X, y, k=3, hidden=(3,), workers=1, epochs=30, mode="ordered")
    local_search = sheetnet.search(X, y, candidates, k=2, workers=1, epochs=30)
    local_fit = sheetnet.fit(X, y, hidden=(3,), repeats=3, workers=1, epochs=30)
    with parallel.cluster(cluster.scheduler_address):
        assert parallel.cluster_threads(cluster.scheduler_address) == 2  # sized from the cluster's workers
        with get_task_stream(client) as tasks:
            cv = sheetnet.cross_validate(X, y, k=3, hidden=(3,), epochs=30, mode="ordered")
            assert parallel.last_placement.where == "cluster" and parallel.last_placement.at_once == 2
            found = sheetnet.search(X, y, candidates, k=2, epochs=30)
            model = sheetnet.fit(X, y, hidden=(3,), repeats=3, epochs=30)
        assert len(tasks.data) >= 3 + 4 + 3  # every fold, search fit and repeat ran on the cluster's workers
        assert {t["worker"] for t in tasks.data} == set(client.scheduler_info()["workers"])  # on both of them
    assert [f["rmse"] for f in cv["folds"]] == [f["rmse"] for f in local_cv["folds"]]
    assert [s.fold_scores for s in found.ranking] == [s.fold_scores for s in local_search.ranking]
    assert found.chosen.candidate == local_search.chosen.candidate
    for a, b in zip(model.members, local_fit.members):
        np.testing.assert_array_equal(a.theta, b.theta)


def test_a_server_job_shows_how_many_repeats_are_done():
    from sheetnet.jobs import JobBoard

    X, y = _table(60)
    table = [["a", "b", "c", "y"]] + [[*map(float, row), float(v)] for row, v in zip(X, y)]
    board = JobBoard()
    job = board.submit("quick", [table, "y", "2", "repeats=3; workers=1; epochs=20"])
    assert job.finished.wait(60)
    view = job.view()
    assert view["state"] == "done", view["message"]
    assert (view["stage"], view["done"], view["total"]) == ("repeats", 3, 3)


@pytest.mark.parametrize("module", ["sheetnet.parallel", "sheetnet.progress", "sheetnet.search", "sheetnet.search_cells"])
def test_docstring_examples_run(module):
    import doctest
    import importlib

    result = doctest.testmod(importlib.import_module(module))
    assert result.attempted > 0 and result.failed == 0
