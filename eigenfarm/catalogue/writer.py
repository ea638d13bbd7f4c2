"""Writing a mode catalogue: modes streamed in eigenvalue order into a hidden directory, renamed when complete.

The directory logic is the Hessian store's (:class:`eigenfarm.store.atomic.PartialStore`): ``modes.zarr``
is written as ``.modes.zarr.partial-<pid>``; an existing catalogue is replaced (with ``overwrite``) only
once the new one is complete, and anything that is not a catalogue is never replaced.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import zarr

from eigenfarm.catalogue import layout
from eigenfarm.catalogue.geometry import Geometry
from eigenfarm.catalogue.participation import participation_ratio
from eigenfarm.store import atomic
from eigenfarm.store.layout import codecs
from eigenfarm.store.provenance import jsonable
from eigenfarm.structure.units import UnitSystem


def check_destination(out, overwrite: bool = False) -> None:
    """Refuse (InputError) an output path the catalogue may not be written to (see
    :func:`eigenfarm.store.atomic.check_destination`)."""
    atomic.check_destination(out, overwrite, layout.is_catalogue, "mode catalogue")


def _variable_attrs(units: UnitSystem) -> dict:
    lam = f"{units.energy}/({units.length}²·{units.mass})"
    return {
        "eigenvalue": {"units": lam, "long_name": "eigenvalue λ = ω² of D = M^-½ H M^-½"},
        "frequency": {"units": units.frequency_unit,
                      "long_name": ("ν = ω/2π" if units.name == "metal" else "ω") + ", negative for λ < 0"},
        "residual": {"long_name": "‖D e − λ e‖ / (λ_max ‖e‖)"},
        "participation": {"long_name": "participation ratio (Σ|e_a|²)² / (N Σ|e_a|⁴)"},
        "slice": {"long_name": "index of the slice that found the mode"},
    }


class CatalogueWriter:
    """A new catalogue at ``out`` for a system of ``n_atoms`` atoms in ``units``, filled by :meth:`append`
    in eigenvalue order and completed by :meth:`finish`.  Use as a context manager: leaving it on an
    error deletes the partial directory (an older catalogue at ``out`` is untouched)."""

    def __init__(self, out, n_atoms: int, units: UnitSystem, *, overwrite: bool = False,
                 chunk_bytes: int = layout.CHUNK_BYTES):
        self.partial = atomic.PartialStore(out, overwrite, layout.is_catalogue, "mode catalogue")
        self.units = units
        self.n_dof = 3 * int(n_atoms)
        self.chunks = layout.vector_chunks(self.n_dof, chunk_bytes)
        try:
            self.group = zarr.open_group(str(self.partial.path), mode="w-", attributes={
                "kind": layout.KIND, "format_version": layout.FORMAT_VERSION})
            self.vector = self.group.create_array(
                layout.VECTOR, shape=(0, self.n_dof), dtype=np.float64, chunks=self.chunks,
                compressors=codecs(), dimension_names=("mode", "dof"),
                attributes={"coordinates": "atom", "long_name": "mass-weighted orthonormal eigenvector e"})
        except BaseException:
            self.abort()
            raise
        self._blocks: list[np.ndarray] = []
        self._buffered = 0
        self._columns = {name: [] for name in ("eigenvalue", "residual", "participation", "slice")}
        self._last = -np.inf

    @property
    def block_modes(self) -> int:
        """Modes per chunk of ``vector``: a good block size for :meth:`append`."""
        return self.chunks[0]

    def append(self, eigenvalues, residuals, slices, vectors) -> None:
        """Add b modes: eigenvalues (b,) ascending and not below those already added, residuals (b,),
        slice indices (b,), vectors (b, n_dof) mass-weighted rows."""
        lam = np.asarray(eigenvalues, dtype=np.float64)
        vectors = np.asarray(vectors, dtype=np.float64)
        if vectors.shape != (len(lam), self.n_dof):
            raise ValueError(f"vectors must have shape ({len(lam)}, {self.n_dof}), got {vectors.shape}")
        if len(lam) == 0:
            return
        if lam[0] < self._last or np.any(np.diff(lam) < 0):
            raise ValueError("modes must be appended in ascending eigenvalue order")
        self._last = lam[-1]
        self._columns["eigenvalue"].append(lam)
        self._columns["residual"].append(np.asarray(residuals, dtype=np.float64))
        self._columns["slice"].append(np.asarray(slices, dtype=np.int32))
        self._columns["participation"].append(participation_ratio(vectors))
        self._blocks.append(vectors)
        self._buffered += len(lam)
        self._write(final=False)

    def _write(self, final: bool) -> None:
        """Write whole chunks of buffered vectors (all of them when ``final``)."""
        rows = self._buffered if final else self._buffered - self._buffered % self.block_modes
        if rows == 0:
            return
        data = np.concatenate(self._blocks) if len(self._blocks) > 1 else self._blocks[0]
        self.vector.append(data[:rows], axis=0)
        rest = data[rows:]
        self._blocks, self._buffered = ([rest] if len(rest) else []), len(rest)

    def _column(self, name: str) -> np.ndarray:
        dtype = layout.PER_MODE.get(name, np.float64)
        parts = self._columns[name]
        return np.concatenate(parts).astype(dtype) if parts else np.zeros(0, dtype)

    def _put(self, name: str, data: np.ndarray, dim: str, chunk: int, attrs: dict | None = None) -> None:
        self.group.create_array(name, data=data, chunks=(max(1, min(chunk, len(data))),), compressors=codecs(),
                                dimension_names=(dim,), attributes=attrs or {})

    def _put_atoms(self) -> None:
        """The ``atom`` coordinate (dof,), written chunk by chunk (it is as long as one vector)."""
        step = self.chunks[1]
        atoms = self.group.create_array("atom", shape=(self.n_dof,), dtype=np.int32, chunks=(max(step, 1),),
                                        compressors=codecs(), dimension_names=("dof",),
                                        attributes={"long_name": "atom of each dof (dof = 3·atom + xyz)"})
        for start in range(0, self.n_dof, step):
            atoms[start:start + step] = np.arange(start, min(start + step, self.n_dof)) // 3

    def _put_geometry(self, geometry: Geometry) -> None:
        """Masses, positions and cell of the sample (see :mod:`eigenfarm.catalogue.geometry`)."""
        if geometry.n_atoms != self.n_dof // 3:
            raise ValueError(f"geometry has {geometry.n_atoms} atoms, the catalogue {self.n_dof // 3}")
        self.group.create_array("mass", data=np.asarray(geometry.masses, np.float64), compressors=codecs(),
                                dimension_names=("site",), attributes={"units": self.units.mass})
        if geometry.positions is not None:
            self.group.create_array("position", data=np.asarray(geometry.positions, np.float64),
                                    compressors=codecs(), dimension_names=("site", "xyz"),
                                    attributes={"units": self.units.length})

    def finish(self, attrs: dict, geometry: Geometry | None = None) -> Path:
        """Write the remaining vectors, the per-mode variables, the coordinates, the sample's ``geometry``
        (when given) and ``attrs`` (JSON-ready root attributes), consolidate the metadata and move the
        catalogue into place; returns its path."""
        self._write(final=True)
        lam = self._column("eigenvalue")
        variables = {"eigenvalue": lam, "frequency": self.units.frequency(lam),
                     **{name: self._column(name) for name in ("residual", "participation", "slice")}}
        described = _variable_attrs(self.units)
        self._put("mode", np.arange(len(lam), dtype=np.int64), "mode", layout.MODE_CHUNK)
        for name, data in variables.items():
            self._put(name, data.astype(layout.PER_MODE[name]), "mode", layout.MODE_CHUNK, described[name])
        self._put_atoms()
        if geometry is not None:
            self._put_geometry(geometry)
            attrs = {**attrs, **geometry.attributes()}
        self.group.attrs.update(jsonable({**attrs, "n_modes": len(lam)}))
        with warnings.catch_warnings():  # v3 consolidated metadata is what xarray.open_zarr reads first
            warnings.filterwarnings("ignore", "Consolidated metadata", category=UserWarning)
            zarr.consolidate_metadata(str(self.partial.path))
        return self.partial.commit()

    def abort(self) -> None:
        """Delete the partial directory."""
        self.partial.abort()

    def __enter__(self):
        return self

    def __exit__(self, kind, value, traceback):
        if kind is not None:
            self.abort()
        return False
