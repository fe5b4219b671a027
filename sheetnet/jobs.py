"""Training jobs: SHEETNET.TRAIN in the background, with progress, cancelling and bounds.

A `JobBoard` holds one server's jobs and the models they trained; it knows
nothing of HTTP, so it is tested directly. `JobBoard.submit` checks the request
first (the number of TRAIN arguments, the model name, the workbook's names)
and refuses a bad one with `JobRequestError` before anything is registered:
a refused request leaves no job behind. At most ``max_running`` jobs train at
once (`BoardFull` beyond that), and at most ``kept_finished`` finished jobs are
remembered (the oldest are forgotten first), so memory stays bounded however
many requests arrive.

A failed job's message is the very text the TRAIN cell would show for the same
arguments. A done job carries its model block, and the model's `Placements`
(as JSON) when the request gave the workbook's defined names (should they fail,
the job is still done, with no placements and the reason as its message).

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
from collections import OrderedDict
from dataclasses import dataclass, field
from typing import Any, Callable, Iterable, Sequence

from . import functions, service
from .cells import Cells
from .errors import SheetnetError
from .registry import BY_NAME
from .stopping import ProgressCallback

MAX_RUNNING_JOBS = 4  # trainings at the same time; each holds its table and a thread
KEPT_JOBS = 100  # finished jobs remembered for their callers
KEPT_MODELS = 100  # trained models listed by GET /v1/models
CURVE_POINTS_SHOWN = 500  # the latest loss-curve points in a job's view
TRAIN = BY_NAME["SHEETNET.TRAIN"]
log = logging.getLogger(__name__)

Trainer = Callable[..., Cells]  # like functions.train_block(table, target, hidden, settings, split, progress=...)


class JobRequestError(SheetnetError):
    """A training request that cannot start a job (nothing was registered)."""


class BoardFull(SheetnetError):
    """As many jobs are training as the board allows."""


class UnknownJob(SheetnetError):
    """No job has this id (never had, or it finished long ago and was forgotten)."""


class Cancelled(SheetnetError):
    """A training job was cancelled by its caller."""


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
    """One training request and what became of it. ``state``: running, done, failed or cancelled."""

    id: str
    name: str
    existing_names: tuple[str, ...] | None = None
    split: SplitRequest | None = None  # the door's holdout request, when the server makes the split
    state: str = "running"
    epoch: int = 0
    epochs: int = 0
    training_loss: float | None = None
    validation_loss: float | None = None
    curve: list[list[float | None]] = field(default_factory=list)
    message: str | None = None
    result: list[list[Any]] | None = None
    placements: dict[str, Any] | None = None
    cancel: threading.Event = field(default_factory=threading.Event)
    finished: threading.Event = field(default_factory=threading.Event)

    def view(self) -> dict[str, Any]:
        """Plain JSON types: what a caller polling the job sees."""
        return {
            "id": self.id, "name": self.name, "state": self.state, "epoch": self.epoch, "epochs": self.epochs,
            "training_loss": self.training_loss, "validation_loss": self.validation_loss,
            "curve": self.curve[-CURVE_POINTS_SHOWN:], "message": self.message, "result": self.result,
            "placements": self.placements,
        }


def finite(value: Any) -> Any:
    """JSON cannot carry NaN or infinity: they go out as blanks (None)."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, list):
        return [finite(v) for v in value]
    return value


def check_train_arguments(args: Sequence[Any]) -> list[Any]:
    """TRAIN's arguments padded with blanks to their full count, or a `JobRequestError`."""
    if not isinstance(args, (list, tuple)):
        raise JobRequestError("the training arguments must be a list: table, target, [hidden], [settings], [split]")
    most = len(TRAIN.arguments)
    required = sum(not a.optional for a in TRAIN.arguments)
    if len(args) > most:
        raise JobRequestError(f"{TRAIN.name} takes at most {most} arguments; got {len(args)}")
    if len(args) < required:
        needed = ", ".join(a.name for a in TRAIN.arguments[:required])
        raise JobRequestError(
            f"a training job needs at least the table and the target column's name ({needed}); got {len(args)} argument"
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

    ``trainer`` is `functions.train_block` (tests pass a stand-in that waits or fails on purpose)."""

    def __init__(
        self,
        max_running: int = MAX_RUNNING_JOBS,
        kept_finished: int = KEPT_JOBS,
        kept_models: int = KEPT_MODELS,
        trainer: Trainer = functions.train_block,
    ) -> None:
        if max_running < 1 or kept_finished < 0 or kept_models < 0:
            raise ValueError("max_running must be at least 1; kept_finished and kept_models at least 0")
        self.max_running, self.kept_finished, self.kept_models = max_running, kept_finished, kept_models
        self.trainer = trainer
        self._jobs: OrderedDict[str, Job] = OrderedDict()  # in the order submitted
        self._models: OrderedDict[str, dict[str, Any]] = OrderedDict()  # by folded name, newest last
        self._lock = threading.Lock()

    def submit(self, name: str, args: Sequence[Any], existing_names: Iterable[str] | None = None, split: SplitRequest | None = None) -> Job:
        """Check the request, register a job and start training it in a thread of its own.

        With ``split`` (holdout share, mode, seed, address) the server makes the holdout split and seeds
        the training exactly as every other door does (`service.train_model`); TRAIN's own split argument
        must then be left out. Raises `JobRequestError` (bad arguments or names), `InputError` (a name
        that cannot be a model's, the service's message) or `BoardFull`; in every case nothing is registered."""
        padded = check_train_arguments(args)
        service.check_model_name(name)
        names = _check_names(existing_names)
        if split is not None:
            _check_split_request(split, padded)
        job = Job(uuid.uuid4().hex, name, names, split=split)
        with self._lock:
            if self._running() >= self.max_running:
                raise BoardFull(
                    f"{self.max_running} models are training already, the most this server runs at once; "
                    "wait for one to finish or cancel one, then start again"
                )
            self._jobs[job.id] = job
            self._forget_old_jobs()
        thread = threading.Thread(target=self._work, args=(job, padded), daemon=True, name=f"sheetnet-job-{job.id[:8]}")
        thread.start()
        return job

    def get(self, job_id: str) -> Job:
        with self._lock:
            job = self._jobs.get(job_id)
        if job is None:
            raise UnknownJob(f"there is no training job '{job_id}'; it may have finished long ago and been forgotten, so start it again")
        return job

    def cancel(self, job_id: str) -> str:
        """Ask a job to stop; the state to report: ``cancelling`` while it still runs, else its final state."""
        job = self.get(job_id)
        job.cancel.set()
        return "cancelling" if job.state == "running" else job.state

    def jobs(self) -> list[Job]:
        with self._lock:
            return list(self._jobs.values())

    def running_count(self) -> int:
        with self._lock:
            return self._running()

    def _running(self) -> int:
        return sum(job.state == "running" for job in self._jobs.values())

    def models(self) -> list[dict[str, Any]]:
        """The models trained here, newest first: name, ABOUT's summary, and when (seconds since 1970)."""
        with self._lock:
            return [dict(m) for m in reversed(self._models.values())]

    def _forget_old_jobs(self) -> None:
        finished = [j for j in self._jobs.values() if j.state != "running"]
        for old in finished[: max(0, len(finished) - self.kept_finished)]:
            del self._jobs[old.id]

    def _remember_model(self, job: Job, block: Cells) -> None:
        about = functions.raising(functions.about)(block)
        with self._lock:
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

    def _work(self, job: Job, args: list[Any]) -> None:
        def progress(epoch: int, most: int, training: float, validation: float | None) -> None:
            if job.cancel.is_set():
                raise Cancelled("the training was cancelled")
            job.epoch, job.epochs, job.training_loss, job.validation_loss = epoch, most, training, validation
            job.curve.append([epoch, finite(training), finite(validation)])

        reporting: ProgressCallback = progress
        try:
            table, target, hidden, settings, split = args
            if job.split is not None:
                request = service.TrainRequest(table, target, hidden, settings, job.split.holdout, job.split.mode, job.split.seed, job.split.address)
                block = service.train_model(request, reporting).block
            else:
                block = self.trainer(table, target, hidden, settings, split, progress=reporting)
            if job.existing_names is not None:
                job.placements, job.message = self._placements(job, block)
            self._remember_model(job, block)
            job.result = finite(block)
            job.state = "done"
        except Cancelled as error:
            job.message, job.state = str(error), "cancelled"
        except SheetnetError as error:
            job.message, job.state = cell_message(error), "failed"
        except Exception as error:  # a bug: reported in the job and the log, never a job left running
            log.exception("training job %s stopped on an unexpected error", job.id)
            job.message, job.state = cell_message(error), "failed"
        finally:
            with self._lock:
                self._forget_old_jobs()
            job.finished.set()
