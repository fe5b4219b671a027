"""Running independent jobs here, in local worker processes, or on a Dask cluster: the one place that decides.

Repeats, cross-validation folds, permutation-importance columns and search
candidates are lists of independent jobs. Every job is a call whose randomness
comes from its own arguments (a seed per job, never per worker), and
`run_jobs` returns the results in job order, so the answer is the same to the
last bit wherever the jobs ran.

Where they run:

- on a cluster, when one is set (`use_cluster`, the environment variable
  ``SHEETNET_CLUSTER``, or ``--cluster`` on the command line): through
  joblib's dask backend on a running Dask distributed scheduler, as many at
  once as its workers have threads (sized from the cluster, not from this
  machine); ``workers=1`` still runs here;
- ``workers=1``: here, one after another;
- ``workers=N``: in N local processes (as asked, even where they will not pay);
- ``workers=None`` (the default): processes only where they pay. On a shared
  2-core machine worker processes were slower than one process in every case
  measured (1.09-1.47x, plus seconds to start the pool), so the first jobs run
  here and are timed (until `PROBE_SECONDS` have passed or a quarter of the
  jobs ran), and the cores that are really free are counted meanwhile
  (the CPUs this process may use, capped by a CPU quota, and how idle the
  others were while the job ran; the one-minute load average where the
  kernel's counters cannot be read). The rest go to processes only if those
  cores would finish them sooner than this process alone, counting the pool's
  start and two processes slowing each other down.

>>> run_jobs(pow, [(2, 3), (3, 2)], workers=1)
[8, 9]
"""

from __future__ import annotations

import math
import os
import time
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Sequence

from .cell_text import cell_in_words
from .errors import SettingError
from .progress import report, run_scope

CLUSTER_VARIABLE = "SHEETNET_CLUSTER"  # address of a Dask scheduler, like tcp://10.1.2.3:8786
# Measured on the 2-core machines (tests/benchmarks/search.py): starting two loky workers that import
# sheetnet took 3.8 s on a quiet machine; a pool used within loky's idle timeout (300 s) answers in ~15 ms.
POOL_START_SECONDS = 4.0
POOL_REUSE_SECONDS = 0.05
POOL_IDLE_SECONDS = 250.0  # a little under loky's 300 s idle timeout, after which workers are stopped
# Two busy processes on two cores run each other slower (memory bandwidth, a shared cache): measured
# 1.1-1.3x per job; the larger figure keeps the choice on the side of one process.
CONTENTION = 1.3
CONNECT_SECONDS = 10  # how long to wait for a cluster's scheduler to answer
# Before choosing, auto runs jobs here until they took this long (or a quarter of them ran): one job can
# mislead when jobs differ (a search's candidates without a hidden layer fit in a few milliseconds).
PROBE_SECONDS = 0.1


class ClusterError(SettingError):
    """The cluster cannot be used: Dask distributed is not installed, or the scheduler cannot be reached."""


@dataclass(frozen=True)
class Placement:
    """Where a run of jobs goes: ``here``, ``processes`` or ``cluster``, and how many at once."""

    where: str
    at_once: int
    reason: str


# --- the cluster setting --------------------------------------------------------------------

_UNSET = object()
_cluster_setting: Any = _UNSET  # what use_cluster was given; unset: the environment variable decides
_clients: dict[str, Any] = {}


def use_cluster(address: str | None) -> None:
    """Send repeats, folds, importance and search to the Dask scheduler at ``address`` from now on
    (like ``"tcp://10.1.2.3:8786"``); ``None``: run on this machine again, whatever ``SHEETNET_CLUSTER`` says.

    >>> use_cluster("tcp://10.1.2.3:8786")   # doctest: +SKIP
    >>> sheetnet.search(X, y)                 # doctest: +SKIP
    """
    global _cluster_setting
    _cluster_setting = _check_address(address) if address is not None else None


@contextmanager
def cluster(address: str | None) -> Iterator[None]:
    """`use_cluster` for the length of a ``with`` block, then back to what was set before."""
    global _cluster_setting
    before = _cluster_setting
    use_cluster(address)
    try:
        yield
    finally:
        _cluster_setting = before


def cluster_address() -> str | None:
    """The scheduler address jobs go to, or None for this machine."""
    if _cluster_setting is not _UNSET:
        return _cluster_setting  # type: ignore[no-any-return]
    text = os.environ.get(CLUSTER_VARIABLE, "").strip()
    return _check_address(text) if text else None


def _check_address(address: Any) -> str:
    if not isinstance(address, str) or not address.strip():
        raise ClusterError(f"the cluster address must be a text like tcp://10.1.2.3:8786; got {cell_in_words(address)}")
    return address.strip()


def _client(address: str) -> Any:
    """A connected Dask client for ``address``, made once per address."""
    found = _clients.get(address)
    if found is not None and getattr(found, "status", "") == "running":
        return found
    try:
        from distributed import Client
    except ImportError:
        raise ClusterError(
            "running on a cluster needs Dask distributed, which is not installed; install sheetnet with its cluster extra "
            "(pip install '.[cluster]' in sheetnet's folder), or leave the cluster address out to run on this machine"
        ) from None
    try:
        client = Client(address, timeout=f"{CONNECT_SECONDS}s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as error:
        raise ClusterError(
            f"no Dask scheduler answered at {address} ({error}); start the scheduler (dask scheduler) and its workers, "
            f"check the address and port (like tcp://10.1.2.3:8786), or leave the cluster out (unset {CLUSTER_VARIABLE}) to run here"
        ) from None
    _clients[address] = client
    return client


def cluster_threads(address: str) -> int:
    """How many jobs the cluster runs at once: the threads of all its workers (at least 1)."""
    return max(1, sum(_client(address).nthreads().values()))


def close_clusters() -> None:
    """Disconnect from every cluster connected so far (the cluster itself keeps running)."""
    while _clients:
        _, client = _clients.popitem()
        client.close()


# --- free cores -----------------------------------------------------------------------------

def _cpu_quota() -> float | None:
    """Cores granted by a cgroup v2 CPU quota (containers), or None when there is no quota."""
    try:
        with open("/sys/fs/cgroup/cpu.max", encoding="ascii") as handle:
            quota, period = handle.read().split()[:2]
    except (OSError, ValueError):
        return None
    return None if quota == "max" else max(1.0, float(quota) / float(period))


def usable_cores() -> int:
    """Cores this process may run on: its CPU affinity, capped by a container's CPU quota."""
    allowed = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    quota = _cpu_quota()
    return max(1, min(allowed, int(quota)) if quota is not None else allowed)


def free_cores(cores: int | None = None, load: float | None = None) -> int:
    """Cores not busy with other programs: the usable cores less the one-minute load average,
    less one for this process, which is busy itself when it asks (at least 1).

    >>> free_cores(cores=2, load=0.3), free_cores(cores=2, load=1.2), free_cores(cores=2, load=1.7)
    (2, 2, 1)
    """
    cores = usable_cores() if cores is None else cores
    if load is None:
        try:
            load = os.getloadavg()[0]
        except (OSError, AttributeError):
            load = 0.0
    busy_elsewhere = max(0.0, load - 1.0)
    return max(1, min(cores, int(cores - busy_elsewhere + 0.5)))


def cpu_times() -> dict[int, tuple[int, int]]:
    """Idle and total clock ticks so far of each CPU this process may run on (empty where /proc/stat is missing)."""
    allowed = os.sched_getaffinity(0) if hasattr(os, "sched_getaffinity") else set()
    found: dict[int, tuple[int, int]] = {}
    try:
        with open("/proc/stat", encoding="ascii") as handle:
            for line in handle:
                name, *fields = line.split()
                if not name.startswith("cpu") or name == "cpu" or int(name[3:]) not in allowed:
                    continue
                ticks = [int(f) for f in fields[:8]]  # user nice system idle iowait irq softirq steal (guest is inside user)
                found[int(name[3:])] = (ticks[3] + ticks[4], sum(ticks))
    except (OSError, ValueError, IndexError):
        return {}
    return found


def free_cores_between(before: dict[int, tuple[int, int]], after: dict[int, tuple[int, int]], cores: int) -> int | None:
    """Cores free for this run, from the CPUs' idle time while this process ran a job (its own core counts as free
    to it); None when the interval is too short to tell (under 5 ticks a CPU).

    >>> free_cores_between({0: (0, 0), 1: (0, 0)}, {0: (5, 100), 1: (60, 100)}, 2)  # the other CPU 60 % idle
    2
    >>> free_cores_between({0: (0, 0), 1: (0, 0)}, {0: (5, 100), 1: (30, 100)}, 2)  # only 30 % idle
    1
    """
    shares = []
    for cpu, (idle_after, total_after) in after.items():
        if cpu not in before:
            continue
        idle, total = idle_after - before[cpu][0], total_after - before[cpu][1]
        if total < 5:
            return None
        shares.append(idle / total)
    if not shares:
        return None
    idle_cores = sum(shares) - min(shares)  # the busiest CPU is taken to be the one this process kept busy
    return max(1, min(cores, int(1 + idle_cores + 0.5)))


# --- the choice -----------------------------------------------------------------------------

last_placement: Placement | None = None  # where the latest run went (for benchmarks and tests)
_pool_used_at: dict[int, float] = {}  # processes in a loky pool -> when it last ran jobs


def pool_start_seconds(processes: int, now: float | None = None) -> float:
    """What starting (or reusing) a pool of ``processes`` local workers costs, as far as known."""
    used = _pool_used_at.get(processes)
    now = time.monotonic() if now is None else now
    return POOL_REUSE_SECONDS if used is not None and now - used < POOL_IDLE_SECONDS else POOL_START_SECONDS


def processes_pay(job_seconds: float, remaining: int, processes: int, start_seconds: float) -> bool:
    """Whether ``remaining`` jobs of ``job_seconds`` each finish sooner in ``processes`` processes
    (after ``start_seconds`` of starting them, each job slowed by `CONTENTION`) than here one after another.

    >>> processes_pay(5.0, 4, 2, 4.0), processes_pay(0.1, 4, 2, 4.0), processes_pay(0.1, 4, 2, 0.05)
    (True, False, True)
    """
    if remaining < 2 or processes < 2:
        return False
    here = job_seconds * remaining
    there = start_seconds + job_seconds * CONTENTION * math.ceil(remaining / processes)
    return there < here


def probe_count(jobs: int) -> int:
    """How many of ``jobs`` auto may run here to time them before choosing: a quarter, at least one.

    >>> probe_count(4), probe_count(60), probe_count(2)
    (1, 15, 1)
    """
    return max(1, jobs // 4)


def placement(jobs: int, workers: int | None) -> Placement:
    """Where a run of ``jobs`` goes before any of them ran (auto ends at ``here`` or ``measure``)."""
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise SettingError(f"workers must be a whole number of 1 or more, or left out for an automatic choice; got {cell_in_words(workers)}")
    if jobs <= 1 or workers == 1:
        return Placement("here", 1, "one job" if jobs <= 1 else "workers=1")
    address = cluster_address()
    if address is not None:
        return Placement("cluster", min(jobs, cluster_threads(address)), f"cluster at {address}")
    if workers is not None:
        return Placement("processes", min(jobs, workers), f"workers={workers}")
    cores = usable_cores()
    if cores < 2:
        return Placement("here", 1, "one usable core")
    return Placement("measure", min(jobs - 1, cores), "time the first jobs and count the free cores meanwhile, then decide")


# --- running --------------------------------------------------------------------------------

def _numbered(function: Callable[..., Any], index: int, args: tuple[Any, ...]) -> tuple[int, Any]:
    return index, function(*args)


def _run_here(function: Callable[..., Any], jobs: Sequence[tuple[Any, ...]], results: list[Any], what: str, reporting: bool, done: int) -> int:
    for index, args in enumerate(jobs):
        if results[index] is _UNSET:
            results[index] = function(*args)
            done += 1
            if reporting:
                report(what, done, len(jobs))
    return done


def _run_pool(
    function: Callable[..., Any], jobs: Sequence[tuple[Any, ...]], results: list[Any], at_once: int, what: str, reporting: bool, done: int,
    backend: dict[str, Any],
) -> int:
    from joblib import Parallel, delayed, parallel_config

    waiting = [(i, args) for i, args in enumerate(jobs) if results[i] is _UNSET]
    with parallel_config(**backend):
        finished = Parallel(n_jobs=at_once, return_as="generator_unordered")(delayed(_numbered)(function, i, args) for i, args in waiting)
        for index, result in finished:
            results[index] = result
            done += 1
            if reporting:
                report(what, done, len(jobs))
    return done


def run_jobs(function: Callable[..., Any], jobs: Sequence[tuple[Any, ...]], workers: int | None = None, what: str = "jobs") -> list[Any]:
    """``[function(*args) for args in jobs]``, run where it is fastest (see the module text), in job order.

    ``function`` must be importable by name (a module-level function) and pure
    apart from its arguments. ``what`` names the jobs in progress reports
    ("folds: 3 of 5 done"); only the outermost run reports.

    >>> run_jobs(max, [(1, 5), (7, 2)], workers=1)
    [5, 7]
    """
    jobs = [tuple(args) for args in jobs]
    chosen = placement(len(jobs), workers)
    results: list[Any] = [_UNSET] * len(jobs)
    with run_scope() as reporting:
        done = 0
        if chosen.where == "measure":
            ticks, started = cpu_times(), time.perf_counter()
            probed = probe_count(len(jobs))
            for index in range(probed):
                results[index] = function(*jobs[index])
                done += 1
                if reporting:
                    report(what, done, len(jobs))
                if time.perf_counter() - started >= PROBE_SECONDS:
                    break
            job_seconds, measured = (time.perf_counter() - started) / done, free_cores_between(ticks, cpu_times(), chosen.at_once)
            free = min(chosen.at_once, measured if measured is not None else free_cores())
            seen = f"{done} job{'s' if done > 1 else ''} here at {job_seconds:.3f} s each, {free} free core{'s' if free > 1 else ''}"
            if free >= 2 and processes_pay(job_seconds, len(jobs) - done, free, pool_start_seconds(free)):
                chosen = Placement("processes", free, seen)
            else:
                chosen = Placement("here", 1, f"{seen}: processes would not pay")
        if chosen.where == "processes":
            done = _run_pool(function, jobs, results, chosen.at_once, what, reporting, done, {"backend": "loky", "inner_max_num_threads": 1})
            _pool_used_at[chosen.at_once] = time.monotonic()
        elif chosen.where == "cluster":
            address = cluster_address()
            assert address is not None
            done = _run_pool(function, jobs, results, chosen.at_once, what, reporting, done, {"backend": "dask", "client": _client(address)})
        else:
            _run_here(function, jobs, results, what, reporting, done)
    global last_placement
    last_placement = chosen
    return results
