"""Safe output writing: staged, locked, all or nothing, and never over an input.

Every output is written to ``<name>.ebglayout-unfinished-<pid>`` beside its
final name and moved into place only when every output of the run succeeded.
While a run writes an output it holds an exclusive lock on
``.<name>.ebglayout-lock`` beside it, so of two runs that would write the same
file one wins and the other stops at once, before any work.  Unfinished files
that a killed run left behind are removed by the next run that writes the same
outputs.  Existing files are replaced only with ``force``, and no output may
resolve to one of the run's inputs (symlinks, hard links and ``..`` included).
"""
from __future__ import annotations

import os
import sys
from contextlib import contextmanager
from pathlib import Path
from typing import Iterable, Iterator

from .errors import EbgError

UNFINISHED = ".ebglayout-unfinished-"
"""Marks a staged file: ``<output name>.ebglayout-unfinished-<pid>``."""
LOCK_SUFFIX = ".ebglayout-lock"


class OutputExists(EbgError):
    """An output file exists and --force was not given."""


class OutputBusy(EbgError):
    """Another run holds the lock on one of this run's outputs."""


class OutputWriteError(EbgError):
    """Writing an output failed (disk full, no permission...); the message names the output, not a staged file."""


def unfinished_name(name: str) -> str:
    """The staged name of output ``name`` for this process."""
    return f"{name}{UNFINISHED}{os.getpid()}"


def move_into_place(staged: Path, final: Path) -> None:
    """Give a staged file the usual permissions and rename it onto its final name (atomic on one file system)."""
    os.chmod(staged, 0o644)
    os.replace(staged, final)


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a staged path beside ``path``; move it onto ``path`` only if the block succeeds.

    For one file outside a run's ``StagedOutputs``.  A path that is already a staged output is written directly:
    the run that staged it moves it into place.
    """
    path = Path(path)
    if UNFINISHED in path.name:
        yield path
        return
    tmp_path = path.with_name(unfinished_name(path.name))
    try:
        yield tmp_path
        move_into_place(tmp_path, path)
    finally:
        tmp_path.unlink(missing_ok=True)


def refuse_inputs(option: str, outputs: Iterable[Path], inputs: Iterable[Path]) -> None:
    """Raise when an output would be one of the inputs: same resolved path (symlinks and ``..`` followed) or, when
    both exist, the same file (a hard link).  The one check every command runs before it writes."""
    known = [(Path(p), Path(p).resolve()) for p in inputs]
    for target in outputs:
        resolved = target.resolve()
        for given, source in known:
            if resolved == source or (target.exists() and source.exists() and os.path.samefile(target, source)):
                raise EbgError(f"{option} {target}: is the input {given}; ebglayout never writes over its input")


def _note(text: str) -> None:
    print(f"ebglayout: note: {text}", file=sys.stderr)


class _Lock:
    """An exclusive, non-blocking lock on a lock file (flock on POSIX, msvcrt on Windows), released by unlinking
    the file and closing it; a run that opened the unlinked file sees that it is gone and opens the new one."""

    def __init__(self, path: Path):
        self.path = path
        self.fd: int | None = None

    def acquire(self) -> bool:
        while True:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            if not _try_lock(fd):
                os.close(fd)
                return False
            try:
                same = os.path.samestat(os.fstat(fd), os.stat(self.path))
            except FileNotFoundError:
                same = False
            if same:
                os.ftruncate(fd, 0)
                os.write(fd, f"{os.getpid()}\n".encode())
                self.fd = fd
                return True
            os.close(fd)

    def holder(self) -> str:
        try:
            return self.path.read_text().strip() or "?"
        except OSError:
            return "?"

    def release(self) -> None:
        if self.fd is None:
            return
        try:
            self.path.unlink()
        except OSError:  # Windows cannot unlink an open file; the next run simply reuses it
            pass
        os.close(self.fd)
        self.fd = None


def _try_lock(fd: int) -> bool:
    try:
        import fcntl
    except ImportError:  # Windows
        import msvcrt

        try:
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
            return True
        except OSError:
            return False
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        return True
    except OSError:
        return False


class StagedOutputs:
    """Context manager for one run's outputs under ``folder`` (names may hold a sub-folder: ``"sub/file"``).

    Inside the block: ``require_free(names)`` first (input, lock and existence checks, before any work), then
    ``path(name)`` / ``writing(name)`` / ``write_text(name, text)`` for each output.  Leaving the block cleanly
    moves every staged file into place; an error removes them, and any folder the run created that stayed empty.
    """

    def __init__(self, folder: str | Path, force: bool = False, inputs: Iterable[str | Path] = (),
                 option: str = "--out"):
        self.folder = Path(folder)
        self.force = force
        self.inputs = tuple(Path(p) for p in inputs)
        self.option = option
        self.staged: dict[Path, Path] = {}
        self.locks: dict[Path, _Lock] = {}
        self.created: list[Path] = []

    def final(self, name: str) -> Path:
        return self.folder / name

    def require_free(self, names: Iterable[str]) -> None:
        """Refuse (before any work) an output that is an input, is being written by another run, or exists
        without --force; take the lock on each and clear what a killed run left of them."""
        targets = sorted({self.final(n) for n in names} - set(self.locks))
        refuse_inputs(self.option, targets, self.inputs)
        for target in targets:
            self._make_folder(target.parent)
            lock = _Lock(target.with_name(f".{target.name}{LOCK_SUFFIX}"))
            with self._naming(target):
                got = lock.acquire()
            if not got:
                raise OutputBusy(f"{self.option} {target}: another ebglayout run (pid {lock.holder()}) is writing "
                                 "it; wait for that run to finish")
            self.locks[target] = lock
        for target in targets:
            if target.exists() and not self.force:
                raise OutputExists(f"{self.option} {target}: exists; pass --force to replace it")
        self._clear_leftovers(targets)

    def path(self, name: str) -> Path:
        """An empty staged file for output ``name``; written there, it is moved onto ``name`` when the block ends."""
        self.require_free([name])
        final = self.final(name)
        tmp = self.staged.get(final) or final.with_name(unfinished_name(final.name))  # a forked writer reuses it
        with self._naming(final):
            os.close(os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644))
        self.staged[final] = tmp
        return tmp

    @contextmanager
    def writing(self, name: str) -> Iterator[Path]:
        """``path(name)``, with any OS error while writing it reported against ``name`` itself."""
        tmp = self.path(name)
        with self._naming(self.final(name)):
            yield tmp

    def write_text(self, name: str, text: str) -> None:
        with self.writing(name) as tmp:
            tmp.write_text(text, encoding="utf-8", newline="\n")

    @contextmanager
    def _naming(self, final: Path) -> Iterator[None]:
        try:
            yield
        except OSError as err:
            raise OutputWriteError(f"cannot write {final}: {err.strerror or err}") from err

    def _make_folder(self, folder: Path) -> None:
        missing = []
        while not folder.exists():
            missing.append(folder)
            folder = folder.parent
        for path in reversed(missing):
            with self._naming(path):
                path.mkdir()
            self.created.append(path)

    def _clear_leftovers(self, targets: list[Path]) -> None:
        """Remove the staged files of these outputs that a killed run left (we hold their locks, so no live run
        writes them), and say so."""
        removed = []
        for target in targets:
            name = _glob_escape(target.name)
            legacy = (f".{name}.*.part", f".{name}.*.tmp")  # how versions before the lock named them
            for pattern in (f"{name}{UNFINISHED}*", *legacy):
                for stale in target.parent.glob(pattern):
                    stale.unlink(missing_ok=True)
                    removed.append(stale.name)
        if removed:
            _note(f"removed {len(removed)} unfinished file(s) an interrupted run left in "
                  f"{targets[0].parent}: {', '.join(sorted(removed))}")

    def __enter__(self) -> "StagedOutputs":
        return self

    def __exit__(self, kind, value, traceback) -> None:
        try:
            if kind is None:
                for final, tmp in self.staged.items():
                    with self._naming(final):
                        move_into_place(tmp, final)
        finally:
            for tmp in self.staged.values():
                tmp.unlink(missing_ok=True)
            self.staged.clear()
            for lock in self.locks.values():
                lock.release()
            self.locks.clear()
            for folder in reversed(self.created):
                if not any(folder.iterdir()):
                    folder.rmdir()
            self.created.clear()


def _glob_escape(name: str) -> str:
    return "".join(f"[{c}]" if c in "*?[" else c for c in name)
