"""Per-atom masses for an imported matrix: one number, a text file, a ``.npy`` file, or an array.

Errors name the file and the line (text) or entry (``.npy``) at fault.
"""

from __future__ import annotations

import os

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.store.provenance import file_record


def _as_number(spec) -> float | None:
    if isinstance(spec, (int, float, np.floating, np.integer)):
        return float(spec)
    if isinstance(spec, str) and not os.path.exists(spec):
        try:
            return float(spec)
        except ValueError:
            return None
    return None


def _text_masses(path: str) -> tuple[np.ndarray, list[int]]:
    """Masses and their line numbers from a text file with one mass per line (blank lines skipped)."""
    values, lines = [], []
    try:
        with open(path, encoding="utf-8") as handle:
            for lineno, text in enumerate(handle, 1):
                word = text.strip()
                if not word:
                    continue
                try:
                    values.append(float(word))
                except ValueError:
                    raise InputError(f"{path}: line {lineno}: {word[:40]!r} is not a mass (one number per line)") from None
                lines.append(lineno)
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror}") from None
    except UnicodeDecodeError:
        raise InputError(f"{path}: not a text file (UTF-8 decoding failed)") from None
    return np.array(values, dtype=float), lines


def _npy_masses(path: str) -> np.ndarray:
    try:
        data = np.load(path, allow_pickle=False)
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: cannot read as a .npy array ({exc})") from None
    if data.ndim != 1 or not np.issubdtype(data.dtype, np.number):
        raise InputError(f"{path}: expected a 1-D numeric array of masses, got shape {data.shape} {data.dtype}")
    return data.astype(float)


def read_masses(spec, n_atoms: int, dimension: int, matrix: str) -> tuple[np.ndarray, dict]:
    """Masses (n_atoms,) in mass units, and a provenance record.

    ``spec``: a positive number (all atoms), a path to a text file (one mass per line) or ``.npy``
    array, or an array-like.  ``dimension`` is the matrix size 3·n_atoms of ``matrix`` (a file name),
    quoted when the count does not match.
    """
    number = _as_number(spec)
    if number is not None:
        if not (np.isfinite(number) and number > 0):
            raise InputError(f"mass {number} is not positive")
        return np.full(n_atoms, number), {"kind": "number", "value": number}
    if isinstance(spec, (str, os.PathLike)):
        path = str(spec)
        if path.endswith(".npy"):
            masses, where = _npy_masses(path), None
        else:
            masses, where = _text_masses(path)
        label, record = path, {"kind": "file", **file_record(path)}
    else:
        masses, where, label = np.asarray(spec, dtype=float).reshape(-1), None, "masses"
        record = {"kind": "array"}
    if len(masses) != n_atoms:
        raise InputError(f"{label}: {len(masses)} masses, but {matrix} has dimension {dimension} = 3 × "
                         f"{n_atoms} atoms")
    bad = np.flatnonzero(~(np.isfinite(masses) & (masses > 0)))
    if len(bad):
        at = f"line {where[bad[0]]}" if where else f"entry {bad[0]}"
        raise InputError(f"{label}: {at}: mass {masses[bad[0]]} is not positive")
    return masses, record
