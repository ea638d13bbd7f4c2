"""The on-disk layout of a mode catalogue (zarr v3 directory with consolidated metadata).

::

    modes.zarr/                 root group; attributes: kind="modes", format_version, units, hessian_digest,
                                n_atoms, n_modes, window, request, zero_modes, negative_modes, slices,
                                solver, merge, completeness, eigenfarm_version, created (see merge.py)
      mode           (mode,)        int64    0, 1, … (coordinate)
      eigenvalue     (mode,)        float64  λ = ω², energy/(length²·mass), ascending
      frequency      (mode,)        float64  reported frequency (THz for metal, ω for reduced), sign of λ
      residual       (mode,)        float64  ‖D e − λ e‖ / (λ_max ‖e‖)
      participation  (mode,)        float64  participation ratio of e (participation.py)
      slice          (mode,)        int32    index of the slice that found the mode
      atom           (dof,)         int32    atom of each dof, dof = 3·atom + (0, 1, 2 for x, y, z) (coordinate)
      vector         (mode, dof)    float64  mass-weighted, orthonormal rows e; chunks of whole modes

Atoms are in the input order of the configuration (or matrix) the Hessian store was built from.  The
directory opens with plain ``xarray.open_zarr(path)``: arrays carry ``dimension_names``, ``vector``
names ``atom`` as its coordinate, and the consolidated metadata spares xarray a listing.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import zarr

KIND = "modes"
FORMAT_VERSION = 1
VECTOR = "vector"
#: per-mode variables and their dtypes, in the order they are written
PER_MODE = {"eigenvalue": np.float64, "frequency": np.float64, "residual": np.float64,
            "participation": np.float64, "slice": np.int32}
#: bytes per chunk of ``vector`` (whole modes when one mode fits, else one mode split along dof)
CHUNK_BYTES = 16 * 2**20
#: entries per chunk of the per-mode variables
MODE_CHUNK = 1 << 16


def vector_chunks(n_dof: int, chunk_bytes: int = CHUNK_BYTES) -> tuple[int, int]:
    """(modes, dofs) per chunk of ``vector``: as many whole modes as fit in ``chunk_bytes``, or one mode
    cut into equal dof pieces when a single mode (8·n_dof bytes) is larger."""
    per_mode = 8 * max(n_dof, 1)
    if per_mode <= chunk_bytes:
        return chunk_bytes // per_mode, n_dof
    pieces = -(-per_mode // chunk_bytes)
    return 1, -(-n_dof // pieces)


def is_catalogue(path) -> bool:
    """Whether ``path`` is a mode catalogue directory (its root group says kind="modes")."""
    try:
        return Path(path).is_dir() and read_attrs(path).get("kind") == KIND
    except Exception:  # any unreadable directory is simply not a catalogue
        return False


def read_attrs(path) -> dict:
    """The root attributes of the catalogue at ``path``."""
    return dict(zarr.open_group(str(path), mode="r").attrs)
