"""Safe output writing: every file is staged beside its final name and moved into place only when all succeeded.

An error part-way leaves no partial file and no half-updated set of outputs;
existing files are replaced only with ``force``.
"""
from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import EbgError


class OutputExists(EbgError):
    """An output file exists and --force was not given."""


class StagedOutputs:
    """Context manager: ``path(name)`` gives a temporary file in ``folder``; leaving the block cleanly renames them all."""

    def __init__(self, folder: str | Path, force: bool = False, protect: tuple[Path, ...] = ()):
        self.folder = Path(folder)
        self.force = force
        self.protect = tuple(p.resolve() for p in protect)
        self.staged: dict[Path, Path] = {}
        self.created_folder = False

    def final(self, name: str) -> Path:
        return self.folder / name

    def require_free(self, names: list[str]) -> None:
        """Refuse early (before any work) when an output exists without --force, or would overwrite a protected input."""
        for name in names:
            target = self.final(name)
            if target.resolve() in self.protect:
                raise EbgError(f"--out {target}: is an input file; ebglayout never writes over its input")
            if target.exists() and not self.force:
                raise OutputExists(f"--out {target}: exists; pass --force to replace it")

    def path(self, name: str) -> Path:
        self.require_free([name])
        if not self.folder.exists():
            self.folder.mkdir(parents=True)
            self.created_folder = True
        fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".part", dir=self.folder)
        os.close(fd)
        self.staged[self.final(name)] = Path(tmp)
        return Path(tmp)

    def write_text(self, name: str, text: str) -> None:
        self.path(name).write_text(text, encoding="utf-8", newline="\n")

    def __enter__(self) -> "StagedOutputs":
        return self

    def __exit__(self, kind, value, traceback) -> None:
        if kind is None:
            for final, tmp in self.staged.items():
                os.chmod(tmp, 0o644)
                os.replace(tmp, final)
        else:
            for tmp in self.staged.values():
                tmp.unlink(missing_ok=True)
            if self.created_folder and not any(self.folder.iterdir()):
                self.folder.rmdir()
        self.staged.clear()

    @property
    def written(self) -> list[Path]:
        return sorted(self.staged)
