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


def check_destination(out, overwrite: bool, is_ours=None, label: str = "Hessian store") -> None:
    """Refuse (InputError) an output path we may not write: an existing one unless ``overwrite``, an
    existing one that ``is_ours`` (default :func:`is_store`) does not recognise as a ``label`` (it would
    not be ours to delete), or one whose parent directory is missing."""
    out = Path(out)
    if out.exists() or out.is_symlink():
        if not overwrite:
            raise InputError(f"{out}: already exists (pass --overwrite to replace it)")
        if not (is_ours or is_store)(out):
            raise InputError(f"{out}: exists and is not a {label}; not replacing it")
    if not out.parent.is_dir():
        raise InputError(f"{out}: directory {out.parent} does not exist")


class PartialStore:
    """The hidden directory a new store (or other ``label`` directory recognised by ``is_ours``) at
    ``out`` is written to; :func:`check_destination` runs first."""

    def __init__(self, out, overwrite: bool = False, is_ours=None, label: str = "Hessian store"):
        check_destination(out, overwrite, is_ours, label)
        self.out = Path(out)
        self.path = self.out.with_name(f".{self.out.name}.partial-{os.getpid()}")
        if self.path.exists():
            shutil.rmtree(self.path)

    def abort(self, runner=None) -> None:
        """Flag the partial directory abandoned, wait for ``runner``'s running tasks, delete it."""
        if self.path.is_dir():
            (self.path / ABORT_FLAG).touch()
        if runner is not None:
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
