"""Writing a store atomically: build under a hidden sibling directory, rename into place when complete.

``H.zarr`` is written as ``.H.zarr.partial-<pid>``; only a complete store is renamed to ``H.zarr``.
With ``overwrite`` an existing store is moved aside (``.H.zarr.old-<pid>``) only after the new one is
complete, then deleted.  On failure the partial directory gets an abort flag (so tasks still queued on
workers stop before writing), running tasks are waited for, and the directory is removed.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

from eigenfarm.errors import InputError
from eigenfarm.store import layout

ABORT_FLAG = ".aborted"


class StoreAborted(RuntimeError):
    """A task found that the store it was writing has been abandoned."""


def is_store(path) -> bool:
    """Whether ``path`` is a Hessian store directory (complete or not)."""
    try:
        return Path(path).is_dir() and layout.read_attrs(path).get("kind") == layout.KIND
    except Exception:  # any unreadable directory is simply not a store
        return False


def check_live(path) -> None:
    """Raise :class:`StoreAborted` when the partial store at ``path`` has been abandoned."""
    if os.path.exists(os.path.join(str(path), ABORT_FLAG)) or not os.path.isdir(str(path)):
        raise StoreAborted(f"{path}: store abandoned")


class PartialStore:
    """The hidden directory a new store at ``out`` is written to.

    Refuses at once an existing ``out`` unless ``overwrite``, and any existing ``out`` that is not a
    Hessian store (it would not be ours to delete).
    """

    def __init__(self, out, overwrite: bool = False):
        self.out = Path(out)
        if self.out.exists() or self.out.is_symlink():
            if not overwrite:
                raise InputError(f"{self.out}: already exists (pass overwrite to replace it)")
            if not is_store(self.out):
                raise InputError(f"{self.out}: exists and is not a Hessian store; not replacing it")
        if not self.out.parent.is_dir():
            raise InputError(f"{self.out}: directory {self.out.parent} does not exist")
        self.path = self.out.with_name(f".{self.out.name}.partial-{os.getpid()}")
        if self.path.exists():
            shutil.rmtree(self.path)

    def abort(self, runner) -> None:
        """Flag the partial store abandoned, wait for running tasks, delete it."""
        if self.path.is_dir():
            (self.path / ABORT_FLAG).touch()
        runner.settle()
        shutil.rmtree(self.path, ignore_errors=True)

    def commit(self) -> Path:
        """Move the complete store into place (replacing an old one only now); returns its path."""
        if self.out.exists():
            old = self.out.with_name(f".{self.out.name}.old-{os.getpid()}")
            os.rename(self.out, old)
            os.rename(self.path, self.out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(self.path, self.out)
        return self.out
