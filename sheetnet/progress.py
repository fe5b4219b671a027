""""k of n done" for runs of independent jobs (repeats, folds, permutations, search candidates).

A door says who listens with `reporting_to`; `sheetnet.parallel` calls `report`
as jobs finish. Only the outermost run reports: a fold that trains several
repeats one after another does not interleave its own counts with the folds'.
Listeners live in a context variable, so each thread (each server job) has its
own and nothing is global. `stopping_when` does the same for a check that
every epoch of every network trained in this thread calls (`check_stop`), so a
cancelled job stops within an epoch, not at the next finished fold; jobs in
worker processes or on a cluster only see it as they finish.

>>> seen = []
>>> with reporting_to(lambda what, done, total: seen.append((what, done, total))):
...     report("folds", 1, 5)
>>> seen
[('folds', 1, 5)]
"""

from __future__ import annotations

import sys
import time
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Callable, Iterator, TextIO

ProgressReport = Callable[[str, int, int], None]  # (what is being done, jobs done, jobs in all)

_listeners: ContextVar[tuple[ProgressReport, ...]] = ContextVar("sheetnet_progress_listeners", default=())
_depth: ContextVar[int] = ContextVar("sheetnet_progress_depth", default=0)
StopCheck = Callable[[], None]  # raises to stop the work under way (a cancelled server job)
_stop_checks: ContextVar[tuple[StopCheck, ...]] = ContextVar("sheetnet_stop_checks", default=())


@contextmanager
def reporting_to(listener: ProgressReport) -> Iterator[None]:
    """Send "k of n done" reports to ``listener`` inside this block (added to any listener already there)."""
    token = _listeners.set((*_listeners.get(), listener))
    try:
        yield
    finally:
        _listeners.reset(token)


@contextmanager
def stopping_when(check: StopCheck) -> Iterator[None]:
    """Inside this block every training epoch in this thread calls ``check``, which raises to stop the work.

    >>> def refuse():
    ...     raise RuntimeError("stopped")
    >>> with stopping_when(refuse):
    ...     check_stop()
    Traceback (most recent call last):
    RuntimeError: stopped
    """
    token = _stop_checks.set((*_stop_checks.get(), check))
    try:
        yield
    finally:
        _stop_checks.reset(token)


def check_stop() -> None:
    """Call every check of `stopping_when` (after each epoch); nothing when there is none."""
    for check in _stop_checks.get():
        check()


def report(what: str, done: int, total: int) -> None:
    """Tell every listener that ``done`` of ``total`` jobs of ``what`` are finished."""
    for listener in _listeners.get():
        listener(what, done, total)


@contextmanager
def run_scope() -> Iterator[bool]:
    """Mark a run of jobs; yields whether it is the outermost one (the one that reports)."""
    outermost = _depth.get() == 0
    token = _depth.set(_depth.get() + 1)
    try:
        yield outermost
    finally:
        _depth.reset(token)


class TerminalProgress:
    """Progress on one line of a terminal, like ``folds: 3 of 5 done`` (quiet when the stream is not a terminal)."""

    def __init__(self, stream: TextIO | None = None, every: float = 0.1) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.live = bool(getattr(self.stream, "isatty", lambda: False)())
        self.every = every
        self._last = 0.0
        self._shown = False

    def __call__(self, what: str, done: int, total: int) -> None:
        now = time.monotonic()
        if not self.live or (done < total and now - self._last < self.every):
            return
        self._last = now
        self._shown = True
        self.stream.write(f"\r{what}: {done} of {total} done   ")
        self.stream.flush()

    def done(self) -> None:
        """Clear the line, so the command's answer starts on a clean one."""
        if self.live and self._shown:
            self.stream.write("\r" + " " * 60 + "\r")
            self.stream.flush()
