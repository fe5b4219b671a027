"""Server jobs: SHEETNET.TRAIN and SHEETNET.SEARCH in the background, with progress, cancelling and bounds.

A `JobBoard` holds one server's jobs and the models they trained; it knows
nothing of HTTP, so it is tested directly. `JobBoard.submit` checks the request
first (the number of TRAIN arguments, the model name by the service's rule, the
workbook's names) and refuses a bad one with `JobRequestError` before anything
is registered: a refused request leaves no job behind.

Bounds (the numbers live in `sheetnet.limits`): at most ``max_running`` jobs
train at once, each in a thread of its own, and at most ``max_waiting`` more
wait their turn in the order they came (a waiting job reads ``state: running``
with ``waiting: true``, so callers that poll until the state changes need not
know about waiting), and together they hold at most ``max_table_cells`` cells
of tables; beyond that `BoardFull` (the server answers 429 with ``Retry-After``). At most ``kept_finished`` finished jobs holding at most
``kept_cells`` cells of model blocks are remembered, and ``kept_models`` models
listed (the oldest are forgotten first), so memory stays bounded however many
requests arrive. Cancelling wins over finishing: a job whose cancel was
accepted ends ``cancelled``, its model neither answered nor listed.

A failed job's message is the very text the TRAIN cell would show for the same
arguments. A done job carries its model block, and the model's `Placements`
(as JSON) when the request gave the workbook's defined names (should they fail,
the job is still done, with no placements and the reason as its message).

A TRAIN job goes through TRAIN's content cache (`functions.cached_train_block`),
so a job with the table and arguments of one trained before, as a job or in a
cell, is done at once with the same block. A SEARCH job (``function``
``SHEETNET.SEARCH``, SEARCH's arguments) answers the ranking the SEARCH cell
shows, its progress one count per finished fold of a candidate (``stage``
"search folds", ``done`` of ``total``); cancelling stops it within an epoch
(fits in worker processes or on a cluster: as they finish).

>>> board = JobBoard()
>>> job = board.submit("grades", [table, "grade"])       # doctest: +SKIP
>>> job.finished.wait(); job.view()["state"]              # doctest: +SKIP
'done'
"""

from __future__ import annotations

import logging
import math
import threading
import time
import uuid
from collections import OrderedDict, deque
from dataclasses import dataclass, field
from typing import Any, Callable, Iterable, Sequence

from . import functions, service
from .cells import Cells
from .errors import SheetnetError
from .limits import KEPT_JOB_CELLS, KEPT_JOBS, KEPT_MODELS, MAX_JOB_TABLE_CELLS, MAX_RUNNING_JOBS, MAX_WAITING_JOBS, range_shape
from .progress import reporting_to, stopping_when
from .registry import BY_NAME
from .stopping import ProgressCallback

CURVE_POINTS_SHOWN = 500  # the latest loss-curve points in a job's view (and all a job keeps)
RETRY_AFTER_SECONDS = 10  # what a caller refused by a full board is told to wait
TRAIN = BY_NAME["SHEETNET.TRAIN"]
SEARCH = BY_NAME["SHEETNET.SEARCH"]
JOB_FUNCTIONS = (TRAIN.name, SEARCH.name)  # the cell functions a job runs
log = logging.getLogger(__name__)

Trainer = Callable[..., Cells]  # like functions.cached_train_block(table, target, hidden, settings, split, progress=...)
Searcher = Callable[..., Cells]  # like functions.search without its message cell: (table, target, candidates, settings, folds)


class JobRequestError(SheetnetError):
    """A training request that cannot start a job (nothing was registered)."""


class BoardFull(SheetnetError):
    """As many jobs are training and waiting as the board allows; ``retry_after``: seconds to wait."""

    retry_after = RETRY_AFTER_SECONDS


class UnknownJob(SheetnetError):
    """No job has this id (never had, or it finished long ago and was forgotten)."""


class Cancelled(SheetnetError):
    """A job was cancelled by its caller."""


def _cancelled(job: "Job") -> str:
    return "the training was cancelled" if job.function == TRAIN.name else "the search was cancelled"


@dataclass(frozen=True)
class SplitRequest:
    """How the server splits and seeds, as `service.TrainRequest` takes it."""

    holdout: float = service.DEFAULT_HOLDOUT
    mode: str = "auto"
    seed: int | None = None
    address: str | None = None


def _check_split_request(split: SplitRequest, args: list[Any]) -> None:
    if args[4] is not None:
        raise JobRequestError("give either a split column (TRAIN's fifth argument) or a holdout share for the server to split by, not both")
    if isinstance(split.holdout, bool) or not isinstance(split.holdout, (int, float)) or not 0 <= split.holdout < 1:
        raise JobRequestError(f"the holdout share must be a number from 0 up to (not including) 1, such as 0.2; got {split.holdout}")
    if split.mode not in service.HOLDOUT_MODES:
        raise JobRequestError(f"holdout mode '{split.mode}' is not known; choose one of: {', '.join(service.HOLDOUT_MODES)}")
    if split.seed is not None and (isinstance(split.seed, bool) or not isinstance(split.seed, int) or split.seed < 0):
        raise JobRequestError(f"the seed must be a whole number of 0 or more; got {split.seed}")


@dataclass
class Job:
    """One training request and what became of it. ``state``: running (``waiting`` until a trainer is free),
    done, failed or cancelled."""

    id: str
    name: str
    function: str = TRAIN.name  # the cell function the job runs: SHEETNET.TRAIN or SHEETNET.SEARCH
    existing_names: tuple[str, ...] | None = None
    split: SplitRequest | None = None  # the door's holdout request, when the server makes the split
    state: str = "running"
    waiting: bool = True
    cells: int = 0  # cells of the model block it holds
    table_cells: int = 0  # cells of the table (and split) it holds until it ends
    epoch: int = 0
    epochs: int = 0
    training_loss: float | None = None
    validation_loss: float | None = None
    curve: list[list[float | None]] = field(default_factory=list)
    stage: str | None = None  # the run of jobs under way ("repeats"), and how many of them are done
    done: int = 0
    total: int = 0
    message: str | None = None
    result: list[list[Any]] | None = None
    placements: dict[str, Any] | None = None
    cancel: threading.Event = field(default_factory=threading.Event)
    finished: threading.Event = field(default_factory=threading.Event)

    def view(self) -> dict[str, Any]:
        """Plain JSON types: what a caller polling the job sees."""
        return {
            "id": self.id, "name": self.name, "function": self.function, "state": self.state, "waiting": self.waiting,
            "epoch": self.epoch, "epochs": self.epochs,
            "training_loss": self.training_loss, "validation_loss": self.validation_loss,
            "curve": self.curve[-CURVE_POINTS_SHOWN:], "message": self.message, "result": self.result,
            "placements": self.placements, "stage": self.stage, "done": self.done, "total": self.total,
        }


def finite(value: Any) -> Any:
    """JSON cannot carry NaN or infinity: they go out as blanks (None)."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, list):
        return [finite(v) for v in value]
    return value


def check_train_arguments(args: Sequence[Any], function: str = TRAIN.name) -> list[Any]:
    """The job's arguments (TRAIN's, or SEARCH's) padded with blanks to their full count, or a `JobRequestError`."""
    if function not in JOB_FUNCTIONS:
        raise JobRequestError(f"a job runs {' or '.join(JOB_FUNCTIONS)}, not {function}; call other cell functions at /v1/functions")
    entry = BY_NAME[function]
    if not isinstance(args, (list, tuple)):
        listed = ", ".join(a.name if not a.optional else f"[{a.name}]" for a in entry.arguments)
        raise JobRequestError(f"the {'training' if entry is TRAIN else 'search'} arguments must be a list: {listed}")
    most = len(entry.arguments)
    required = sum(not a.optional for a in entry.arguments)
    if len(args) > most:
        raise JobRequestError(f"{entry.name} takes at most {most} arguments; got {len(args)}")
    if len(args) < required:
        needed = ", ".join(a.name for a in entry.arguments[:required])
        raise JobRequestError(
            f"a {'training' if entry is TRAIN else 'search'} job needs at least the table and the target column's name ({needed}); got {len(args)} argument"
            + ("" if len(args) == 1 else "s")
        )
    return list(args) + [None] * (most - len(args))


def _check_names(existing_names: Iterable[str] | None) -> tuple[str, ...] | None:
    if existing_names is None:
        return None
    names = tuple(existing_names) if not isinstance(existing_names, str) else None
    if names is None or not all(isinstance(n, str) for n in names):
        raise JobRequestError("existing_names must be a list of the workbook's defined names, each a text")
    return names


def cell_message(error: BaseException) -> str:
    """The text the TRAIN cell shows for this error (the cell layer's own wording, rows as the user counts them)."""

    def fail() -> Cells:
        raise error

    return str(functions.cell_function(fail)()[0][0])


class JobBoard:
    """The training jobs of one server, safe to use from several threads.

    ``trainer`` is `functions.cached_train_block` and ``searcher`` SEARCH without its message cell (tests pass
    stand-ins that wait or fail on purpose)."""

    def __init__(
        self,
        max_running: int = MAX_RUNNING_JOBS,
        kept_finished: int = KEPT_JOBS,
        kept_models: int = KEPT_MODELS,
        trainer: Trainer = functions.cached_train_block,
        max_waiting: int = MAX_WAITING_JOBS,
        kept_cells: int = KEPT_JOB_CELLS,
        max_table_cells: int = MAX_JOB_TABLE_CELLS,
        searcher: Searcher | None = None,
    ) -> None:
        if max_running < 1 or min(kept_finished, kept_models, max_waiting, kept_cells) < 0:
            raise ValueError("max_running must be at least 1; kept_finished, kept_models, max_waiting and kept_cells at least 0")
        self.max_running, self.max_waiting = max_running, max_waiting
        self.kept_finished, self.kept_models, self.kept_cells = kept_finished, kept_models, kept_cells
        self.max_table_cells = max_table_cells
        self._table_cells = 0  # held by the running and waiting jobs
        self.trainer = trainer
        self.searcher = searcher if searcher is not None else functions.raising(functions.search)
        self._jobs: OrderedDict[str, Job] = OrderedDict()  # in the order submitted
        self._queue: deque[tuple[Job, list[Any]]] = deque()  # accepted, waiting for a trainer
        self._trainers = 0  # threads training now (each takes the next waiting job when done)
        self._models: OrderedDict[str, dict[str, Any]] = OrderedDict()  # by folded name, newest last
        self._lock = threading.Lock()

    def submit(
        self,
        name: str,
        args: Sequence[Any],
        existing_names: Iterable[str] | None = None,
        split: SplitRequest | None = None,
        function: str = TRAIN.name,
    ) -> Job:
        """Check the request, register a job and train it as soon as a trainer is free (at once, mostly).

        ``function`` SHEETNET.SEARCH: a search job, ``args`` SEARCH's arguments (no names, no split: a search
        stores no model and makes its own folds).

        With ``split`` (holdout share, mode, seed, address) the server makes the holdout split and seeds
        the training exactly as every other door does (`service.train_model`); TRAIN's own split argument
        must then be left out. Raises `JobRequestError` (bad arguments or names), `InputError` (a name
        that cannot be a model's, the service's message) or `BoardFull`; in every case nothing is registered."""
        padded = check_train_arguments(args, function)
        service.check_model_name(name)
        names = _check_names(existing_names)
        if function == SEARCH.name and (names is not None or split is not None):
            raise JobRequestError("a search job stores no model and makes its own folds: leave out existing_names and the holdout share")
        if split is not None:
            _check_split_request(split, padded)
        job = Job(uuid.uuid4().hex, name, function, names, split=split)
        ranges = (padded[0], padded[4]) if function == TRAIN.name else (padded[0], padded[2])  # the table, and the split or the candidates
        job.table_cells = sum(rows * columns for rows, columns in map(range_shape, (a for a in ranges if a is not None)))
        with self._lock:
            if self._trainers + len(self._queue) >= self.max_running + self.max_waiting:
                waiting = f" and {len(self._queue)} are waiting" if self._queue else ""
                raise BoardFull(
                    f"{self._trainers} models are training{waiting} already, the most this server takes at once; "
                    f"wait for one to finish (try again in {RETRY_AFTER_SECONDS} seconds) or cancel one"
                )
            if self._table_cells and self._table_cells + job.table_cells > self.max_table_cells:
                raise BoardFull(
                    f"the training jobs under way hold {self._table_cells:,} cells of tables already, and this one would add "
                    f"{job.table_cells:,}: more than the {self.max_table_cells:,} this server holds at once; "
                    f"wait for one to finish (try again in {RETRY_AFTER_SECONDS} seconds) or cancel one"
                )
            self._table_cells += job.table_cells
            self._jobs[job.id] = job
            self._queue.append((job, padded))
            self._forget_old_jobs()
            start = self._trainers < self.max_running
            if start:
                self._trainers += 1
        if start:
            threading.Thread(target=self._train_waiting, daemon=True, name=f"sheetnet-jobs-{job.id[:8]}").start()
        return job

    def get(self, job_id: str) -> Job:
        with self._lock:
            job = self._jobs.get(job_id)
        if job is None:
            raise UnknownJob(f"there is no training job '{job_id}'; it may have finished long ago and been forgotten, so start it again")
        return job

    def cancel(self, job_id: str) -> str:
        """Stop a job; the state to report: ``cancelling`` while it still trains (it then ends ``cancelled``,
        never done), else its final state (a waiting job is cancelled at once)."""
        job = self.get(job_id)
        with self._lock:
            if job.state != "running":
                return job.state
            job.cancel.set()
            if not job.waiting:
                return "cancelling"
            self._queue = deque(entry for entry in self._queue if entry[0] is not job)
            job.message, job.state = _cancelled(job), "cancelled"
            self._table_cells -= job.table_cells
            self._forget_old_jobs()
        job.finished.set()
        return job.state

    def jobs(self) -> list[Job]:
        with self._lock:
            return list(self._jobs.values())

    def running_count(self) -> int:
        """Jobs training now (waiting ones not counted)."""
        with self._lock:
            return self._trainers

    def waiting_count(self) -> int:
        with self._lock:
            return len(self._queue)

    def models(self) -> list[dict[str, Any]]:
        """The models trained here, newest first: name, ABOUT's summary, and when (seconds since 1970)."""
        with self._lock:
            return [dict(m) for m in reversed(self._models.values())]

    def _forget_old_jobs(self) -> None:
        finished = [j for j in self._jobs.values() if j.state != "running"]
        held = sum(j.cells for j in finished)
        for old in finished:
            if len(finished) <= self.kept_finished and held <= self.kept_cells:
                break
            del self._jobs[old.id]
            finished = finished[1:]
            held -= old.cells

    def _remember_model(self, job: Job, about: Cells) -> None:
        key = job.name.casefold()  # one entry per model, as a workbook holds one per name
        self._models.pop(key, None)
        self._models[key] = {"name": job.name, "about": finite(about), "trained": time.time()}
        while len(self._models) > self.kept_models:
            self._models.popitem(last=False)

    @staticmethod
    def _placements(job: Job, block: Cells) -> tuple[dict[str, Any] | None, str | None]:
        """The model's placements, or none and the reason: a trained model is never thrown away for them."""
        try:
            return service.model_placements(job.name, block, job.existing_names or ()).to_json(), None
        except Exception as error:
            log.exception("training job %s: the placements could not be made", job.id)
            return None, cell_message(error)

    def _train_waiting(self) -> None:
        """One trainer: the waiting jobs in turn, until none is left."""
        while True:
            with self._lock:
                if not self._queue:
                    self._trainers -= 1
                    return
                job, args = self._queue.popleft()
                job.waiting = False
            self._work(job, args)

    def _work(self, job: Job, args: list[Any]) -> None:
        def progress(epoch: int, most: int, training: float, validation: float | None) -> None:
            if job.cancel.is_set():
                raise Cancelled(_cancelled(job))
            job.epoch, job.epochs, job.training_loss, job.validation_loss = epoch, most, training, validation
            job.curve.append([epoch, finite(training), finite(validation)])
            if len(job.curve) > 2 * CURVE_POINTS_SHOWN:  # a long training keeps only what its view shows
                del job.curve[:-CURVE_POINTS_SHOWN]

        def jobs_done(what: str, done: int, total: int) -> None:  # "k of n done" from sheetnet.parallel
            if job.cancel.is_set():
                raise Cancelled(_cancelled(job))
            job.stage, job.done, job.total = what, done, total

        def still_wanted() -> None:  # after every epoch of every network this job trains here
            if job.cancel.is_set():
                raise Cancelled(_cancelled(job))

        reporting: ProgressCallback = progress
        state, message, result, placements, about = "failed", None, None, None, None
        try:
            with reporting_to(jobs_done), stopping_when(still_wanted):
                if job.function == SEARCH.name:  # the ranking as SEARCH's cells: no model to describe or place
                    block = self.searcher(*args)
                elif job.split is not None:
                    table, target, hidden, settings, _ = args
                    request = service.TrainRequest(table, target, hidden, settings, job.split.holdout, job.split.mode, job.split.seed, job.split.address)
                    block = service.train_model(request, reporting).block
                else:
                    block = self.trainer(*args, progress=reporting)
            if job.existing_names is not None:
                placements, message = self._placements(job, block)
            if job.function == TRAIN.name:
                about = functions.raising(functions.about)(block)
            state, result = "done", finite(block)
        except Cancelled as error:
            state, message = "cancelled", str(error)
        except SheetnetError as error:
            message = cell_message(error)
        except Exception as error:  # a bug: reported in the job and the log, never a job left running
            log.exception("%s job %s stopped on an unexpected error", job.function, job.id)
            message = cell_message(error)
        with self._lock:  # the job's end and its cancel decide under one lock: a cancel accepted before wins
            if state == "done" and job.cancel.is_set():
                state, message, result, placements = "cancelled", _cancelled(job), None, None
            if state == "done" and about is not None:
                self._remember_model(job, about)
            job.result, job.placements, job.message = result, placements, message
            job.cells = sum(len(row) for row in result) if result else 0
            job.state = state
            self._table_cells -= job.table_cells
            self._forget_old_jobs()
        job.finished.set()
