"""One streamed pass over a catalogue's vectors: every per-mode quantity the analyses need.

Only one chunk of vectors is in memory at a time (``chunk_modes`` modes, by default the stored chunk),
plus per-mode scalars and the radial profiles of the few most localised modes.  Every quantity is a
function of one mode alone, so the result does not depend on the chunking (tested).

Participation ratios are recomputed from the vectors; a catalogue whose ``participation`` variable is
missing or holds NaN gets the recomputed values written back (see
:func:`eigenfarm.catalogue.participation.store_participation`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from eigenfarm.analysis.localization import RadialProfile, inverse_participation, mode_centres, radial_profile
from eigenfarm.analysis.planewaves import Projector, Shells, allowed_shells
from eigenfarm.catalogue import open_catalogue
from eigenfarm.catalogue.geometry import Geometry
from eigenfarm.catalogue.participation import atom_weights, participation_from_weights, store_participation
from eigenfarm.structure.units import UnitSystem

#: plane-wave shells projected on by default
DEFAULT_SHELLS = 8
#: largest share of all dimensions the projected plane waves may span (see usable_shells)
WAVE_SHARE = 0.05
#: most localised modes whose radial profile is kept
DEFAULT_PROFILES = 6


@dataclass
class ModeTable:
    """Per-mode results for one catalogue (M modes, S plane-wave shells).

    ``frequency``/``eigenvalue`` (M,) in the catalogue's units; ``participation``, ``ipr`` (M,);
    ``centre`` (M, 3) length units or None without positions; ``transverse``/``longitudinal`` (M, S)
    plane-wave weights or None without a periodic cell; ``profiles`` {mode index: RadialProfile}.
    ``covered`` (lo, hi]: the frequency range the catalogue holds completely.
    """

    path: str
    units: UnitSystem
    n_atoms: int
    frequency: np.ndarray
    eigenvalue: np.ndarray
    participation: np.ndarray
    ipr: np.ndarray
    covered: tuple[float, float]
    complete: bool
    zero_modes: int
    negative_modes: int
    volume: float | None
    preparation: dict | None
    store: str | None = None
    hessian_digest: str | None = None
    centre: np.ndarray | None = None
    shells: Shells | None = None
    transverse: np.ndarray | None = None
    longitudinal: np.ndarray | None = None
    profiles: dict[int, RadialProfile] = field(default_factory=dict)

    @property
    def n_dof(self) -> int:
        return 3 * self.n_atoms

    @property
    def n_modes(self) -> int:
        return len(self.frequency)

    @property
    def number_density(self) -> float | None:
        """Atoms per length³, or None without a cell."""
        return None if self.volume is None else self.n_atoms / self.volume


def usable_shells(cell, wanted: int, n_dof: int, wave_share: float = WAVE_SHARE) -> Shells:
    """The first ``wanted`` shells, fewer if needed so that their plane waves (3 per k) stay within
    ``wave_share`` of the n_dof dimensions — a random unit vector has weight waves/n_dof on them, and that
    baseline must stay far below the phonon threshold.  At least one shell."""
    shells = allowed_shells(cell, wanted)
    waves = 3 * np.cumsum(shells.multiplicity)
    keep = max(1, int(np.count_nonzero(waves <= wave_share * n_dof)))
    return shells if keep == shells.n_shells else allowed_shells(cell, keep)


def _covered(catalogue) -> tuple[float, float]:
    window = catalogue.attrs.get("window", {}).get("frequency", [0.0, np.inf])
    if catalogue.attrs.get("keep_lowest") is not None:
        top = float(catalogue.frequencies[-1]) if catalogue.n_modes else float(window[0])
        return float(window[0]), top
    return float(window[0]), float(window[1])


def _profile_modes(participation: np.ndarray, count: int) -> set[int]:
    finite = np.flatnonzero(np.isfinite(participation))
    return set(finite[np.argsort(participation[finite], kind="stable")[:count]].tolist())


def _empty_table(catalogue, geometry: Geometry | None) -> ModeTable:
    attrs = catalogue.attrs
    box = None if geometry is None else geometry.box
    return ModeTable(
        str(catalogue.path), catalogue.units, catalogue.n_atoms, catalogue.frequencies, catalogue.eigenvalues,
        np.empty(catalogue.n_modes), np.empty(catalogue.n_modes), _covered(catalogue), catalogue.complete,
        int(attrs.get("zero_modes", {}).get("count", 0)), int(attrs.get("negative_modes", {}).get("count", 0)),
        None if box is None else box.volume, attrs.get("preparation"), attrs.get("store"),
        attrs.get("hessian_digest"))


def scan_catalogue(path, *, shells: int = DEFAULT_SHELLS, profiles: int = DEFAULT_PROFILES,
                   chunk_modes: int | None = None, wave_share: float = WAVE_SHARE, write_back: bool = True,
                   progress=None) -> ModeTable:
    """Stream the catalogue at ``path`` once and return its :class:`ModeTable`.

    ``shells``: plane-wave shells to project on (needs positions and a fully periodic cell), fewer when
    their waves would span more than ``wave_share`` of the 3N dimensions (:func:`usable_shells`);
    ``profiles``: radial profiles kept for this many lowest-P modes; ``write_back``: store recomputed
    participation ratios if the catalogue's are missing; ``progress(stage, done, total)``.
    """
    catalogue = open_catalogue(path)
    geometry = catalogue.geometry
    table = _empty_table(catalogue, geometry)
    stored = catalogue.participation
    usable = bool(np.all(np.isfinite(stored)))
    if geometry is not None and geometry.periodic and shells:
        table.shells = usable_shells(geometry.box.cell, shells, 3 * catalogue.n_atoms, wave_share)
        table.transverse = np.empty((catalogue.n_modes, table.shells.n_shells))
        table.longitudinal = np.empty((catalogue.n_modes, table.shells.n_shells))
    if geometry is not None and geometry.positions is not None:
        table.centre = np.empty((catalogue.n_modes, 3))
    chosen = _profile_modes(stored, profiles) if usable and table.centre is not None else set()
    projector = None if table.shells is None else Projector(geometry.positions, geometry.masses, table.shells)
    for modes, vectors in catalogue.iter_vectors(chunk_modes):
        _scan_chunk(table, modes, vectors, geometry, chosen, projector)
        if progress:
            progress(f"scan {catalogue.path.name}", modes.stop, catalogue.n_modes)
    if table.centre is not None and not usable:  # profiles need P first: read back the chosen modes
        for index in sorted(_profile_modes(table.participation, profiles)):
            _keep_profile(table, index, catalogue.read_vectors(index, index + 1), geometry)
    if not usable and write_back:
        store_participation(catalogue.path, table.participation)
    return table


def _scan_chunk(table: ModeTable, modes: slice, vectors: np.ndarray, geometry: Geometry | None,
                chosen: set[int], projector: Projector | None) -> None:
    weight = atom_weights(vectors)
    table.participation[modes] = participation_from_weights(weight)
    table.ipr[modes] = inverse_participation(weight)
    if table.centre is not None:
        table.centre[modes] = mode_centres(weight, geometry)
    if projector is not None:
        table.transverse[modes], table.longitudinal[modes] = projector.weights(vectors)
    for index in sorted(chosen.intersection(range(modes.start, modes.stop))):
        table.profiles[index] = radial_profile(weight[index - modes.start], table.centre[index], geometry)


def _keep_profile(table: ModeTable, index: int, vector: np.ndarray, geometry: Geometry) -> None:
    table.profiles[index] = radial_profile(atom_weights(vector)[0], table.centre[index], geometry)
