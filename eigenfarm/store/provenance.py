"""Provenance records: where a store's matrix came from, as JSON-ready dicts."""

from __future__ import annotations

import hashlib
import json
import os
from datetime import datetime, timezone

import numpy as np

import eigenfarm
from eigenfarm.errors import InputError
from eigenfarm.structure.configuration import Configuration


def file_sha256(path) -> str:
    """sha256 (hex) of a file's bytes, read in 16 MiB pieces."""
    h = hashlib.sha256()
    try:
        with open(path, "rb") as handle:
            for piece in iter(lambda: handle.read(1 << 24), b""):
                h.update(piece)
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror}") from None
    return h.hexdigest()


def configuration_sha256(config: Configuration) -> str:
    """sha256 (hex) of a configuration's content in input order: positions, species, masses, cell, pbc."""
    h = hashlib.sha256()
    h.update(np.ascontiguousarray(config.positions, dtype="<f8").tobytes())
    h.update("\n".join(config.species.tolist()).encode())
    h.update(np.ascontiguousarray(config.masses, dtype="<f8").tobytes())
    h.update(np.ascontiguousarray(config.box.cell, dtype="<f8").tobytes())
    h.update(np.asarray(config.box.pbc, dtype=np.uint8).tobytes())
    return h.hexdigest()


def file_record(path) -> dict:
    """{"file": absolute path, "sha256": digest} of a source file."""
    return {"file": os.path.abspath(str(path)), "sha256": file_sha256(path)}


def stamp() -> dict:
    """The tool version and the creation time (UTC, ISO 8601)."""
    return {"eigenfarm_version": eigenfarm.__version__,
            "created": datetime.now(timezone.utc).isoformat(timespec="seconds")}


def _plain(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"not JSON-serialisable: {type(value).__name__}")


def jsonable(record: dict) -> dict:
    """``record`` with numpy scalars/arrays turned into plain JSON values."""
    return json.loads(json.dumps(record, default=_plain))
