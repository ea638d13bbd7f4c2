"""Participation ratio of mass-weighted mode vectors.

P = (Σ_a |e_a|²)² / (N Σ_a |e_a|⁴), with |e_a|² the squared norm of atom a's three components and N the
number of atoms (Bell & Dean, Discuss. Faraday Soc. 50, 55, 1970).  P = 1 when every atom moves
equally, 1/N when one atom moves alone, 2/3 for a standing plane wave; quasi-localised modes in glasses
have P of order 10⁻²–10⁻³ at 10⁴ atoms.
"""

from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import numpy as np
import zarr

from eigenfarm.catalogue import layout
from eigenfarm.store.layout import codecs


def participation_ratio(vectors: np.ndarray) -> np.ndarray:
    """P of each row of ``vectors`` (b, 3N): dof 3a + c is component c of atom a.  Returns (b,).

    The vectors need not be normalised (P is scale-free); a zero vector gives NaN.
    """
    return participation_from_weights(atom_weights(vectors))


def atom_weights(vectors: np.ndarray) -> np.ndarray:
    """|e_a|² of each atom for each row of ``vectors`` (b, 3N); returns (b, N)."""
    vectors = np.asarray(vectors, dtype=float)
    if vectors.ndim != 2 or vectors.shape[1] % 3:
        raise ValueError(f"vectors must have shape (b, 3N), got {vectors.shape}")
    shaped = vectors.reshape(len(vectors), vectors.shape[1] // 3, 3)
    return np.einsum("bac,bac->ba", shaped, shaped)


def participation_from_weights(weight: np.ndarray) -> np.ndarray:
    """P of each row of per-atom weights |e_a|² (b, N); returns (b,)."""
    total = weight.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return total**2 / (weight.shape[1] * np.einsum("ba,ba->b", weight, weight))


def store_participation(path, values: np.ndarray) -> None:
    """Write ``values`` (M,) as the catalogue's ``participation`` variable, replacing a missing or
    incomplete one: written beside it under a temporary name, then swapped in by directory renames,
    so a reader never sees a half-written array; the consolidated metadata is refreshed."""
    root = Path(path)
    group = zarr.open_group(str(root), mode="r+")
    values = np.asarray(values, dtype=np.float64)
    if len(values) != int(group[layout.VECTOR].shape[0]):
        raise ValueError(f"{path}: {len(values)} participation ratios for {group[layout.VECTOR].shape[0]} modes")
    fresh, old = root / "participation_fresh", root / "participation_old"
    shutil.rmtree(fresh, ignore_errors=True)
    group.create_array("participation_fresh", data=values, chunks=(max(1, min(layout.MODE_CHUNK, len(values))),),
                       compressors=codecs(), dimension_names=("mode",),
                       attributes={"long_name": "participation ratio (Σ|e_a|²)² / (N Σ|e_a|⁴)"})
    target = root / "participation"
    if target.exists():
        target.rename(old)
    fresh.rename(target)
    shutil.rmtree(old, ignore_errors=True)
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", "Consolidated metadata", category=UserWarning)
        zarr.consolidate_metadata(str(root))
