"""The workbook file on disk: one sheetnet command at a time, refusals before writing, atomic replacement.

- `WorkbookLock`: an advisory lock (``flock``) on the workbook file itself, held from
  opening to the end of a command, so a second sheetnet command on the same workbook
  waits (at most `LOCK_WAIT_SECONDS`) and then refuses. The lock moves to the new file
  before it replaces the old one, so there is no moment without it.
- `check_can_replace`: refuses read-only files, folders that cannot be written, and
  workbooks open in a spreadsheet program (its lock file lies beside the workbook).
- `Fingerprint`: size, modification time and SHA-256 taken when the file was read;
  a save refuses when the file changed on disk since.
- `replace_file`: writes a temporary file beside the workbook (our prefix), flushes it
  to disk, keeps the file's permissions, keeps the last `BACKUPS_KEPT` versions as
  ``NAME.sheetnet-backup-N.xlsx`` (N = 1 is the newest; a backup the user made, such as
  ``NAME.xlsx.bak``, is never touched), then renames it over the workbook. Symbolic links
  are followed: the file they point to is replaced and the link stays. A workbook with
  several hard links is written in place (same file, so every link sees the new content)
  after its backup is on disk; that one case is not atomic, and the backup is what
  remains if the machine stops mid-write. Temporary files a killed save left behind are
  removed by the next save of the same workbook.
"""

from __future__ import annotations

import hashlib
import os
import secrets
import shutil
import stat
import threading
import time
import weakref
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO, Callable, Iterator

from .errors import SheetnetError

try:
    import fcntl
except ImportError:  # pragma: no cover - Windows: a lock file of ours instead
    fcntl = None  # type: ignore[assignment]

LOCK_WAIT_SECONDS = 30.0
BACKUPS_KEPT = 3
TEMP_PREFIX = ".~sheetnet-save-"
LOCK_FILE_PREFIX = ".~sheetnet-lock-"  # only where flock is missing


class WorkbookFileError(SheetnetError):
    """The workbook file cannot be written as asked (nothing was changed)."""


@dataclass(frozen=True)
class Fingerprint:
    size: int
    mtime_ns: int
    sha256: str


def fingerprint(path: Path, data: bytes) -> Fingerprint:
    """The fingerprint of ``data``, read from ``path`` just now."""
    info = os.stat(path)
    return Fingerprint(len(data), info.st_mtime_ns, hashlib.sha256(data).hexdigest())


def check_unchanged(path: Path, seen: Fingerprint) -> None:
    """Refuse when the file differs from what was read (size and time first, the hash when those agree)."""
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise WorkbookFileError(f"{path.name} was moved or deleted while sheetnet worked on it; nothing was written") from None
    same = info.st_size == seen.size and info.st_mtime_ns == seen.mtime_ns
    if same:
        with open(path, "rb") as current:
            same = hashlib.file_digest(current, "sha256").hexdigest() == seen.sha256
    if not same:
        raise WorkbookFileError(
            f"{path.name} changed on disk since sheetnet read it (another program saved it); nothing was written. Run the command again"
        )


# --- the lock -----------------------------------------------------------------------------

class _Held:
    """One lock this process holds on one file, shared by every book of the process open on it."""

    def __init__(self, key: tuple[int, int], descriptor: int | None, lock_file: Path | None = None) -> None:
        self.key, self.descriptor, self.lock_file, self.count = key, descriptor, lock_file, 0


_HELD: dict[tuple[int, int], _Held] = {}
_HELD_GUARD = threading.Lock()
_HANDLES: "weakref.WeakSet[WorkbookLock]" = weakref.WeakSet()


@contextmanager
def command_scope() -> Iterator[None]:
    """Release, when the block ends, every workbook lock taken inside it (one command: read, train, write, done)."""
    before = set(_HANDLES)
    try:
        yield
    finally:
        for handle in list(_HANDLES):
            if handle not in before:
                handle.release()


class WorkbookLock:
    """Held while one command reads, trains and writes a workbook; see the module docstring.

    Exclusive between processes; within one process, books open on the same file share it
    (a second `acquire` there does not wait), and the fingerprint check keeps their saves apart."""

    def __init__(self, path: Path, held: _Held) -> None:
        self.path = path
        self._held: _Held | None = held
        _HANDLES.add(self)

    @property
    def descriptor(self) -> int | None:
        return None if self._held is None else self._held.descriptor

    @classmethod
    def acquire(cls, path: Path, wait: float | None = None) -> "WorkbookLock":
        deadline = time.monotonic() + (LOCK_WAIT_SECONDS if wait is None else wait)
        while True:
            with _HELD_GUARD:
                try:
                    info = os.stat(path)
                except FileNotFoundError:
                    raise WorkbookFileError(f"{path.name} was moved or deleted; check the file name") from None
                held = _HELD.get((info.st_dev, info.st_ino))
                if held is not None:
                    held.count += 1
                    return cls(path, held)
                held = cls._try(path)
                if held is not None:
                    held.count = 1
                    _HELD[held.key] = held
                    return cls(path, held)
            if time.monotonic() > deadline:
                raise WorkbookFileError(_busy(path))
            time.sleep(0.05)

    @staticmethod
    def _try(path: Path) -> _Held | None:
        """The lock if free now, else None (also when the file was replaced meanwhile: the caller tries again)."""
        if fcntl is None:  # pragma: no cover - Windows
            lock_file = path.with_name(LOCK_FILE_PREFIX + path.name)
            try:
                os.close(os.open(lock_file, os.O_CREAT | os.O_EXCL | os.O_WRONLY))
            except FileExistsError:
                return None
            info = os.stat(path)
            return _Held((info.st_dev, info.st_ino), None, lock_file)
        try:
            descriptor = os.open(path, os.O_RDONLY)
        except PermissionError:
            raise WorkbookFileError(f"{path.name} cannot be read (no permission); ask its owner for access") from None
        try:
            fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(descriptor)
            return None
        except OSError:  # a file system without locks: go on unlocked rather than refuse every command
            pass
        mine = os.fstat(descriptor)
        try:
            current = os.stat(path)
        except FileNotFoundError:
            current = None
        if current is None or (current.st_dev, current.st_ino) != (mine.st_dev, mine.st_ino):
            os.close(descriptor)
            return None
        return _Held((mine.st_dev, mine.st_ino), descriptor)

    def move_to(self, descriptor: int) -> None:
        """Hold the lock on the new file that replaced the old one (``descriptor`` is open on it, locked)."""
        with _HELD_GUARD:
            held = self._held
            if held is None:
                os.close(descriptor)
                return
            old = held.descriptor
            _HELD.pop(held.key, None)
            info = os.fstat(descriptor)
            held.key, held.descriptor = (info.st_dev, info.st_ino), descriptor
            _HELD[held.key] = held
        if old is not None:
            os.close(old)

    def release(self) -> None:
        with _HELD_GUARD:
            held, self._held = self._held, None
            if held is None:
                return
            held.count -= 1
            if held.count > 0:
                return
            _HELD.pop(held.key, None)
        if held.descriptor is not None:
            os.close(held.descriptor)
        if held.lock_file is not None:  # pragma: no cover - Windows
            held.lock_file.unlink(missing_ok=True)


def _busy(path: Path) -> str:
    return f"another sheetnet command is working on {path.name}; wait until it has finished, then run this one again"


# --- refusals before writing --------------------------------------------------------------

def program_lock_files(path: Path) -> list[Path]:
    """Lock files a spreadsheet program leaves beside a workbook it has open.

    ``.~lock.NAME#`` and ``~$NAME`` (with long names the second drops NAME's first two
    characters: from memory of how those files look, no source)."""
    name = path.name
    candidates = [path.with_name(f".~lock.{name}#"), path.with_name(f"~${name}")]
    if len(name) > 2:
        candidates.append(path.with_name(f"~${name[2:]}"))
    return [c for c in candidates if c.exists()]


def check_can_replace(path: Path, link: Path | None = None) -> None:
    """Refuse (nothing written) what sheetnet must not or cannot replace; ``link`` is the name the user gave, if a symbolic link."""
    locks = program_lock_files(path) + (program_lock_files(link) if link is not None else [])
    if locks:
        raise WorkbookFileError(
            f"the workbook {path.name} is open in a spreadsheet program (its lock file {locks[0].name} lies beside it); "
            f"close the workbook there, then run sheetnet again. If no spreadsheet program has it open, delete {locks[0].name}"
        )
    mode = os.stat(path).st_mode
    if not mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH) or not os.access(path, os.W_OK):
        raise WorkbookFileError(f"the workbook {path.name} is read-only, so sheetnet left it as it is; make it writable or work on a copy")
    if not os.access(path.parent, os.W_OK | os.X_OK):
        raise WorkbookFileError(f"the folder of {path.name} cannot be written, so sheetnet cannot save beside it; work on a copy in a folder of yours")


# --- writing ------------------------------------------------------------------------------

def backup_path(path: Path, number: int) -> Path:
    """``lots.xlsx`` -> ``lots.sheetnet-backup-1.xlsx`` (1 is the newest)."""
    return path.with_name(f"{path.stem}.sheetnet-backup-{number}{path.suffix}")


def remove_stale_temporaries(path: Path) -> list[Path]:
    """Temporary files of earlier saves of this workbook that were killed (we hold its lock, so none is live)."""
    removed = []
    for leftover in path.parent.glob(f"{TEMP_PREFIX}{_glob_escape(path.name)}.*"):
        try:
            leftover.unlink()
            removed.append(leftover)
        except OSError:
            pass
    return removed


def _glob_escape(name: str) -> str:
    return "".join(f"[{c}]" if c in "*?[" else c for c in name)


def replace_file(path: Path, write: Callable[[BinaryIO], object], lock: WorkbookLock | None = None) -> None:
    """Write a new version of ``path`` (an existing file, or a new one) with ``write``; see the module docstring."""
    try:
        _replace(path, write, lock)
    except PermissionError as error:
        raise WorkbookFileError(
            f"{path.name} could not be saved: the system refused access to {Path(error.filename or path).name}; "
            "check that the file and its folder are writable and not in use, then run sheetnet again"
        ) from None
    except OSError as error:
        reason = error.strerror or str(error)
        raise WorkbookFileError(f"{path.name} could not be saved ({reason}); nothing was changed. Free some space or check the disk, then try again") from None


def _replace(path: Path, write: Callable[[BinaryIO], object], lock: WorkbookLock | None) -> None:
    remove_stale_temporaries(path)
    temporary = path.with_name(f"{TEMP_PREFIX}{path.name}.{secrets.token_hex(4)}.tmp")
    descriptor = os.open(temporary, os.O_CREAT | os.O_EXCL | os.O_RDWR, 0o600)
    handed_over = False
    try:
        with os.fdopen(os.dup(descriptor), "w+b") as stream:
            write(stream)
            stream.flush()
            os.fsync(stream.fileno())
        exists = path.exists()
        if exists and os.stat(path).st_nlink > 1:
            _write_in_place(path, temporary)
            return
        _keep_attributes(path if exists else None, temporary)
        if exists:
            _rotate_backups(path)
            _backup(path)
        if lock is not None and fcntl is not None:
            try:
                fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)  # nobody else knows this file yet
            except OSError:
                pass
        os.replace(temporary, path)
        _sync_folder(path.parent)
        if lock is not None:
            lock.move_to(descriptor)
            handed_over = True
    finally:
        if not handed_over:
            os.close(descriptor)
        if temporary.exists():
            temporary.unlink()


def _write_in_place(path: Path, temporary: Path) -> None:
    _rotate_backups(path)
    shutil.copy2(path, backup_path(path, 1))
    with open(backup_path(path, 1), "rb") as backup:
        os.fsync(backup.fileno())
    with open(temporary, "rb") as source, open(path, "r+b") as target:
        shutil.copyfileobj(source, target, 1 << 20)
        target.truncate()
        target.flush()
        os.fsync(target.fileno())


def _keep_attributes(original: Path | None, temporary: Path) -> None:
    if original is None:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(temporary, 0o666 & ~umask)
        return
    info = os.stat(original)
    os.chmod(temporary, stat.S_IMODE(info.st_mode))
    if hasattr(os, "chown"):
        try:
            os.chown(temporary, info.st_uid, info.st_gid)
        except OSError:
            pass  # only the owner's group can be kept by an ordinary user; the permissions are kept either way


def _rotate_backups(path: Path) -> None:
    oldest = backup_path(path, BACKUPS_KEPT)
    oldest.unlink(missing_ok=True)
    for number in range(BACKUPS_KEPT - 1, 0, -1):
        if backup_path(path, number).exists():
            os.replace(backup_path(path, number), backup_path(path, number + 1))


def _backup(path: Path) -> None:
    # a copy, not a hard link: a link would make the next save take the workbook for a hard-linked file
    backup = backup_path(path, 1)
    shutil.copy2(path, backup)
    with open(backup, "rb") as written:
        os.fsync(written.fileno())


def _sync_folder(folder: Path) -> None:
    try:
        descriptor = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(descriptor)
    except OSError:
        pass
    finally:
        os.close(descriptor)
