"""From catalogues to answers: samples grouped by system size, each group's bands, classes, DOS and
tail fit, and the finite-size comparison across groups.

Data flow: catalogue paths → :func:`~eigenfarm.analysis.scan.scan_catalogue` (one streamed pass each) →
:class:`SizeGroup` per (number of atoms, cell volume) → :class:`Analysis`, which the report renders.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from eigenfarm.analysis import dos
from eigenfarm.analysis.phonons import BAND_EDGE, LOCAL, Band, ClassRule, SoundSpeeds, classify, identify_bands, \
    shells_reach, sound_speeds
from eigenfarm.analysis.scan import DEFAULT_PROFILES, DEFAULT_SHELLS, WAVE_SHARE, ModeTable, scan_catalogue
from eigenfarm.analysis.tail import TailFit, fit_tail
from eigenfarm.analysis.wavebands import band_from_store
from eigenfarm.errors import InputError
from eigenfarm.store import open_store
from eigenfarm.store.atomic import is_store



#: frequencies this close (relative) to the band edge are at the edge (one degenerate level)
LEVEL_RTOL = 1e-9


@dataclass(frozen=True)
class Settings:
    """Choices of one analysis (the options of ``eigenfarm analyze``).

    ``shells`` plane-wave shells (at most ``wave_share`` of the 3N dimensions); ``profiles`` radial profiles per sample; ``chunk_modes`` vectors per read
    (None: the stored chunk); ``bins`` histogram bins; ``tail_below``/``tail_above`` the fit range in the
    reported frequency (None: below the first transverse band, see :func:`tail_cutoff`);
    ``fixed_exponent`` β for the fixed-exponent prefactor; ``store_bands``: place first-shell bands the
    catalogues do not cover from the Hessian stores (:mod:`eigenfarm.analysis.wavebands`) when they are
    still there; ``bootstrap`` replicates, ``confidence``, ``seed``.
    """

    shells: int = DEFAULT_SHELLS
    wave_share: float = WAVE_SHARE
    profiles: int = DEFAULT_PROFILES
    chunk_modes: int | None = None
    rule: ClassRule = field(default_factory=ClassRule)
    bins: int = 30
    tail_below: float | None = None
    tail_above: float = 0.0
    fixed_exponent: float = 4.0
    store_bands: bool = True
    bootstrap: int = 2000
    confidence: float = 0.95
    seed: int = 0


@dataclass
class SizeGroup:
    """Samples of one size: their tables and classes, pooled bands, speeds, DOS and tail fit.

    ``cutoff`` is the tail's upper frequency (reported unit) and how it was chosen; ``tail`` is None with
    ``tail_note`` saying why when no fit was possible.
    """

    n_atoms: int
    tables: list[ModeTable]
    classes: list[np.ndarray]
    bands: list[Band]
    speeds: SoundSpeeds | None
    linear: dos.Histogram
    log: dos.Histogram
    cumulative: tuple[np.ndarray, np.ndarray]
    cutoff: float | None
    cutoff_rule: str
    tail: TailFit | None
    tail_note: str = ""

    @property
    def n_samples(self) -> int:
        return len(self.tables)

    @property
    def edge(self) -> float | None:
        """Cube-root of the cell volume (length units), None without a cell."""
        volume = self.tables[0].volume
        return None if volume is None else volume ** (1 / 3)

    def first_band(self, polarisation: str = "T") -> Band | None:
        return next((b for b in self.bands if b.shell == 0 and b.polarisation == polarisation), None)

    def first_band_per_sample(self) -> np.ndarray:
        """(S,) each sample's first transverse band frequency (reported unit); empty without shells."""
        return np.array([identify_bands([t])[0].frequency for t in self.tables if t.shells is not None])

    def local_counts(self, below: float | None = None) -> np.ndarray:
        """(S,) quasi-localised modes per sample (below ``below`` when given)."""
        return np.array([np.count_nonzero((c == LOCAL) & (t.frequency <= (np.inf if below is None else below))
                                          & (t.frequency > 0)) for t, c in zip(self.tables, self.classes)])


@dataclass
class Analysis:
    """Groups ordered by size, the settings used, and notes a reader must see (warnings, assumptions)."""

    groups: list[SizeGroup]
    settings: Settings
    notes: list[str] = field(default_factory=list)

    @property
    def units(self):
        return self.groups[0].tables[0].units


def tail_cutoff(bands: list[Band], settings: Settings, top: float) -> tuple[float | None, str]:
    """(cutoff, rule text): ``settings.tail_below`` if given, else the first transverse band's lower edge
    (10 % of its plane-wave weight lies below it), exclusive; None when that band is not covered."""
    if settings.tail_below is not None:
        return min(settings.tail_below, top), "given (--tail-below)"
    first = next((b for b in bands if b.shell == 0 and b.polarisation == "T"), None)
    if first is None or not first.covered:
        return None, "no default: the first transverse band is not in the catalogues (give --tail-below)"
    below_edge = first.low * (1 - LEVEL_RTOL)  # modes at the edge (to rounding) belong to the band
    return min(below_edge, top), (f"strictly below the first transverse band's lower edge {first.low:.4g} "
                                  f"(centre {first.frequency:.4g}; {BAND_EDGE:.0%} of its plane-wave weight "
                                  "lies below the edge)")


def _tail(tables: list[ModeTable], cutoff: float | None, settings: Settings) -> tuple[TailFit | None, str]:
    if cutoff is None:
        return None, "no cutoff"
    try:
        fit = fit_tail([t.frequency[t.frequency > 0] for t in tables], [t.n_dof for t in tables], cutoff,
                       settings.tail_above, fixed_exponent=settings.fixed_exponent,
                       confidence=settings.confidence, n_boot=settings.bootstrap, seed=settings.seed,
                       unit=tables[0].units.frequency_unit)
    except InputError as exc:
        return None, str(exc)
    return fit, ""


def _stores(tables: list[ModeTable]) -> list | None:
    """The Hessian stores the catalogues were solved from, if every one is still there unchanged."""
    stores = []
    for table in tables:
        path = table.store
        if not path or not is_store(path):
            return None
        store = open_store(path)
        if store.digest != table.hessian_digest or store.positions is None:
            return None
        stores.append(store)
    return stores


def _fill_first_bands(bands: list[Band], tables: list[ModeTable], notes: list[str]) -> list[Band]:
    """Replace the first shell's uncovered bands by bands placed from the stores (mean over samples of
    each sample's band quantiles), noting the kernel resolution."""
    missing = [b for b in bands if b.shell == 0 and not b.covered]
    stores = _stores(tables) if missing else None
    if not missing or stores is None:
        return bands
    replaced = {}
    for band in missing:
        placed = [band_from_store(store, t.shells, 0, band.polarisation) for store, t in zip(stores, tables)]
        mean = {name: float(np.mean([getattr(b, name) for b, _ in placed]))
                for name in ("frequency", "low", "width", "speed")}
        replaced[band.polarisation] = replace(band, source="store", **mean)
        notes.append(f"{tables[0].n_atoms} atoms: first {band.polarisation} band placed from the Hessian stores "
                     f"(plane-wave spectral measure, KPM; resolution ±{max(r for _, r in placed):.2g} "
                     f"{tables[0].units.frequency_unit}): the catalogues hold {band.modes:.3g} of its "
                     f"{band.expected:g} modes")
    return [replaced.get(b.polarisation, b) if b.shell == 0 else b for b in bands]


def analyse_group(tables: list[ModeTable], settings: Settings, notes: list[str]) -> SizeGroup:
    """Everything about samples of one size; remarks for the reader are appended to ``notes``."""
    bands = identify_bands(tables)
    if settings.store_bands and bands:
        bands = _fill_first_bands(bands, tables, notes)
    speeds = sound_speeds(bands, tables[0]) if bands else None
    reach = shells_reach(bands) if bands else np.inf
    classes = [classify(t, settings.rule, reach) for t in tables]
    top = dos.common_range(tables)[1]
    cutoff, rule = tail_cutoff(bands, settings, top)
    tail, note = _tail(tables, cutoff, settings)
    return SizeGroup(tables[0].n_atoms, tables, classes, bands, speeds, dos.histogram(tables, settings.bins),
                     dos.histogram(tables, settings.bins, "log"), dos.cumulative(tables), cutoff, rule, tail, note)


def _group_key(table: ModeTable) -> tuple:
    return (table.n_atoms, table.units.name, None if table.volume is None else round(table.volume, 6))


def _notes(tables: list[ModeTable]) -> list[str]:
    notes = []
    for t in tables:
        if not t.complete:
            notes.append(f"{t.path}: the catalogue is NOT complete (its slices miss or double modes); "
                         "its counts are unreliable")
        if t.negative_modes:
            notes.append(f"{t.path}: {t.negative_modes} negative eigenvalue(s) — not at a minimum; "
                         "left out of every density and fit")
    return notes


def analyse(paths, settings: Settings = Settings(), progress=None) -> Analysis:
    """Scan every catalogue in ``paths`` (one sample each) and analyse them by system size."""
    if not paths:
        raise InputError("no catalogues given")
    tables = [scan_catalogue(p, shells=settings.shells, profiles=settings.profiles, chunk_modes=settings.chunk_modes,
                             wave_share=settings.wave_share, progress=progress) for p in paths]
    if len({t.units.name for t in tables}) > 1:
        raise InputError("the catalogues use different unit systems: "
                         + ", ".join(f"{t.path} ({t.units.name})" for t in tables))
    grouped: dict[tuple, list[ModeTable]] = {}
    for t in tables:
        grouped.setdefault(_group_key(t), []).append(t)
    notes = _notes(tables)
    groups = [analyse_group(g, settings, notes) for _, g in sorted(grouped.items(), key=lambda item: item[0][0])]
    notes += [f"{g.n_atoms} atoms: tail not fitted — {g.tail_note}" for g in groups if g.tail is None]
    return Analysis(groups, settings, notes)
