"""Reading a mode catalogue: per-mode arrays whole, vectors chunk by chunk.

Plain ``xarray.open_zarr(path)`` reads a catalogue too; this reader adds the checks, the units and the
summary without needing xarray.
"""

from __future__ import annotations

import functools
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import zarr

from eigenfarm.catalogue import layout
from eigenfarm.catalogue.geometry import Geometry, read_geometry
from eigenfarm.errors import InputError
from eigenfarm.store import open_store
from eigenfarm.store.atomic import is_store
from eigenfarm.structure.units import UnitSystem, get_units


class Catalogue:
    """A complete mode catalogue opened read-only (use :func:`open_catalogue`)."""

    def __init__(self, path):
        self.path = Path(path)
        self.group = zarr.open_group(str(self.path), mode="r")
        self.attrs = dict(self.group.attrs)

    def _mode_array(self, name: str) -> np.ndarray:
        return self.group[name][...]

    @functools.cached_property
    def _vector(self) -> zarr.Array:
        return self.group[layout.VECTOR]

    @property
    def n_modes(self) -> int:
        return int(self._vector.shape[0])

    @property
    def n_dof(self) -> int:
        return int(self._vector.shape[1])

    @property
    def n_atoms(self) -> int:
        return int(self.attrs["n_atoms"])

    @property
    def units(self) -> UnitSystem:
        return get_units(self.attrs["units"])

    @functools.cached_property
    def eigenvalues(self) -> np.ndarray:
        """(M,) λ = ω² ascending, in energy/(length²·mass) of :attr:`units`."""
        return self._mode_array("eigenvalue")

    @functools.cached_property
    def frequencies(self) -> np.ndarray:
        """(M,) frequencies in ``units.frequency_unit`` (negative for λ < 0)."""
        return self._mode_array("frequency")

    @functools.cached_property
    def residuals(self) -> np.ndarray:
        """(M,) relative residuals ‖D e − λ e‖ / (λ_max ‖e‖)."""
        return self._mode_array("residual")

    @functools.cached_property
    def participation(self) -> np.ndarray:
        """(M,) participation ratios, 1/N (one atom) … 1 (all atoms alike); NaN where the catalogue has
        none (``eigenfarm analyze`` computes and stores them)."""
        if "participation" not in self.group:
            return np.full(self.n_modes, np.nan)
        return self._mode_array("participation")

    @functools.cached_property
    def slices(self) -> np.ndarray:
        """(M,) index of the slice that found each mode."""
        return self._mode_array("slice")

    @property
    def chunk_modes(self) -> int:
        """Modes per stored chunk of ``vector``."""
        return int(self._vector.chunks[0])

    @property
    def complete(self) -> bool:
        """The recorded completeness verdict."""
        return bool(self.attrs["completeness"]["complete"])

    def read_vectors(self, start: int, stop: int) -> np.ndarray:
        """Vectors of modes start … stop−1 as rows (stop − start, 3N), mass-weighted, unit norm."""
        if not 0 <= start <= stop <= self.n_modes:
            raise IndexError(f"modes {start}:{stop} out of range 0:{self.n_modes}")
        return self._vector[start:stop]

    def iter_vectors(self, chunk_modes: int | None = None) -> Iterator[tuple[slice, np.ndarray]]:
        """(modes, vectors) chunk by chunk: ``modes`` a slice of mode indices, ``vectors`` its rows
        (len, 3N).  ``chunk_modes`` defaults to the stored chunk; only one chunk is in memory at a time."""
        step = int(chunk_modes or self.chunk_modes)
        if step < 1:
            raise ValueError(f"chunk_modes must be positive, got {chunk_modes}")
        for start in range(0, self.n_modes, step):
            stop = min(start + step, self.n_modes)
            yield slice(start, stop), self.read_vectors(start, stop)

    @functools.cached_property
    def geometry(self) -> Geometry | None:
        """Masses, positions and cell of the sample in input atom order: from the catalogue, or else from
        the Hessian store it records when that store still exists with the same digest; None otherwise."""
        stored = read_geometry(self.group, self.attrs)
        if stored is not None:
            return stored
        path = self.attrs.get("store")
        if path and is_store(path):
            store = open_store(path)
            if store.digest == self.attrs.get("hessian_digest"):
                return Geometry.from_store(store)
        return None

    def summary(self) -> str:
        """Readable text for the command line (see :mod:`eigenfarm.catalogue.summary`)."""
        from eigenfarm.catalogue.summary import format_summary

        return format_summary(self)


#: participation is optional: analyses recompute it from the vectors and store it back
_REQUIRED = (layout.VECTOR, "mode", *(name for name in layout.PER_MODE if name != "participation"))


def open_catalogue(path) -> Catalogue:
    """Open the mode catalogue at ``path``; :class:`InputError` if it is not one."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file or directory")
    if not layout.is_catalogue(path):
        raise InputError(f"{path}: not a mode catalogue (no zarr group with kind='{layout.KIND}')")
    attrs = layout.read_attrs(path)
    if int(attrs.get("format_version", 0)) > layout.FORMAT_VERSION:
        raise InputError(f"{path}: catalogue format {attrs.get('format_version')} is newer than this eigenfarm "
                         f"reads ({layout.FORMAT_VERSION}); upgrade eigenfarm")
    group = zarr.open_group(str(path), mode="r")
    missing = [name for name in _REQUIRED if name not in group]
    if missing or "completeness" not in attrs:
        raise InputError(f"{path}: incomplete mode catalogue (missing {', '.join(missing) or 'attributes'})")
    return Catalogue(path)
