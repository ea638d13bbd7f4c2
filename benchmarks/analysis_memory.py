"""Benchmark: peak memory of the streamed catalogue analysis against reading every vector at once.

Catalogues: the exact eigenmodes of a periodic FCC crystal with nearest-neighbour springs (``--cells``³
conventional cells, N = 4·cells³ atoms, k = m = a = 1, reduced units), computed analytically.  For a
one-atom basis every eigenvector is a plane wave: at each allowed wavevector q the 3×3 dynamical matrix
D(q) = (k/m) Σ_d (1 − cos q·d) d̂ d̂ᵀ over the 12 neighbour vectors d (Ashcroft & Mermin, Solid State
Physics, 1976, eq. 22.58 — from memory) gives λ = ω² and polarisations ε, and the real mass-weighted
modes are the standing waves e_a ∝ cos(q·r_a) ε and sin(q·r_a) ε.  One of each pair q, −q is used; where
q ≡ −q (2q a reciprocal-lattice vector: Γ and the zone-boundary X and L points) sin(q·r_a) vanishes on
every site and only the cosine wave exists (norm √N instead of √(N/2)), so the set stays orthonormal and
holds exactly 3N modes.  ``--check`` proves this on small crystals against dense LAPACK
(``numpy.linalg.eigh``) of the same crystal's dynamical matrix built from eigenfarm's spring potential.

The lowest M non-zero modes (whole degenerate levels; M ≈ factor × the modes of one chunk) are written in
ascending λ with :class:`eigenfarm.catalogue.writer.CatalogueWriter` and a small ``--chunk-mib`` chunk, with
the sample's geometry; their residuals ‖D e − λ e‖/λ_max are computed with eigenfarm's sparse Hessian.

Measured, each in a fresh subprocess (1 BLAS thread; every child imports the same libraries first, so
the interpreter floor is common), peak resident memory (getrusage ru_maxrss) and wall time of

* ``streamed``: ``eigenfarm.analysis.scan.scan_catalogue(path, shells=8)`` — participation ratios, IPR,
  mode centres, plane-wave shell weights and radial profiles, one stored chunk at a time;
* ``reader``: what a user would otherwise write: ``open_catalogue(path).read_vectors(0, M)`` and
  ``participation_ratio`` of the whole (M, 3N) array;
* ``xarray``: the same with ``xarray.open_zarr(path)["vector"].values``.

"floor" is the resident memory after the imports; "working" = peak − floor.  The in-memory runs compute
participation ratios only, so their wall times are not comparable with the scan's; the memory is.

Usage:  python benchmarks/analysis_memory.py [--cells 12] [--factors 8 32 96] [--chunk-mib 2] [--check]
Results: benchmarks/results/analysis_memory.{json,md}.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE), str(HERE.parent / "tests")]  # result_files; the shared spring-lattice references

from lattices import bravais_eigenvalues, fcc_allowed_q, fcc_crystal, fcc_neighbours  # noqa: E402
from result_files import write_results  # noqa: E402

ONE_THREAD = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
#: |λ| ≤ ZERO_TOL·λ_max is a zero mode (only the three translations at q = 0 here)
ZERO_TOL = 1e-8
#: eigenvalues closer than LEVEL_TOL·λ_max belong to one degenerate level
LEVEL_TOL = 1e-9
SHELLS = 8


# ---------------------------------------------------------------- the crystal's exact modes

def wavevector_classes(cells: int) -> tuple[np.ndarray, np.ndarray]:
    """The allowed wavevectors of the periodic box, one per class modulo the FCC reciprocal lattice
    (tests/lattices.py ``fcc_allowed_q``), and the class of −q for each.

    Returns ``q`` (C, 3) in 1/length (a = 1) and ``partner`` (C,) int, C = 4·cells³; ``partner[i] == i``
    where q ≡ −q.  With q = 2πn/cells the reciprocal lattice in n is cells·(a, b, c), a, b, c integers of
    one parity; the representative of a class has n_z in [0, cells) and n_x, n_y in [0, 2·cells).
    """
    q = fcc_allowed_q(cells)
    n = np.rint(q * cells / (2 * np.pi)).astype(np.int64)

    def index(m: np.ndarray) -> np.ndarray:
        m = m - np.floor_divide(m[:, 2], cells)[:, None] * cells  # subtract cells·(1, 1, 1) until z fits
        x, y = m[:, 0] % (2 * cells), m[:, 1] % (2 * cells)
        return (x * 2 * cells + y) * cells + m[:, 2]

    if not np.array_equal(index(n), np.arange(len(n))):
        raise AssertionError("fcc_allowed_q does not list one representative per class in the expected order")
    return q, index(-n)


def branches(q: np.ndarray, neighbours: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """λ (Q, 3) ascending and unit polarisations ε (Q, 3, 3) (columns) of D(q) = Σ_d (1 − cos q·d) d̂d̂ᵀ
    (k = m = 1; Ashcroft & Mermin eq. 22.58) for wavevectors ``q`` (Q, 3) and neighbour vectors (12, 3)."""
    unit = neighbours / np.linalg.norm(neighbours, axis=1)[:, None]
    D = np.einsum("qd,di,dj->qij", 1 - np.cos(q @ neighbours.T), unit, unit)
    return np.linalg.eigh(D)


@dataclass(frozen=True)
class StandingWaves:
    """Every eigenmode of the periodic FCC spring crystal as a real standing wave, ascending in λ.

    Mode p has the mass-weighted unit vector e_a = c_p f_p(q_p·r_a) ε_p on atoms a = 0 … N−1, with f = sin
    where ``sine`` else cos, and c_p = √(1/N) where ``self_conjugate`` (q ≡ −q) else √(2/N).
    ``positions`` (N, 3) length; ``q`` (3N, 3) 1/length; ``polarisation`` (3N, 3) unit ε;
    ``sine``, ``self_conjugate`` (3N,) bool; ``eigenvalue`` (3N,) λ = ω² in k/m.
    """

    positions: np.ndarray
    q: np.ndarray
    polarisation: np.ndarray
    sine: np.ndarray
    self_conjugate: np.ndarray
    eigenvalue: np.ndarray

    @property
    def n_dof(self) -> int:
        return 3 * len(self.positions)

    def vectors(self, start: int, stop: int) -> np.ndarray:
        """Rows e of modes start … stop−1, (stop − start, 3N), dof 3a + c = component c of atom a."""
        picked = slice(start, stop)
        angle = self.q[picked] @ self.positions.T  # (b, N)
        wave = np.where(self.sine[picked, None], np.sin(angle), np.cos(angle))
        scale = np.sqrt(np.where(self.self_conjugate[picked], 1.0, 2.0) / len(self.positions))
        rows = (scale[:, None] * wave)[:, :, None] * self.polarisation[picked, None, :]
        return rows.reshape(stop - start, self.n_dof)


def standing_waves(cells: int) -> StandingWaves:
    """The 3N exact modes of :func:`tests.lattices.fcc_crystal` (cells) (N = 4·cells³), sorted by λ."""
    config, _ = fcc_crystal(cells)
    q, partner = wavevector_classes(cells)
    lam, eps = branches(q, fcc_neighbours())
    own = np.flatnonzero(partner == np.arange(len(q)))  # q ≡ −q: cosine only
    paired = np.flatnonzero(np.arange(len(q)) < partner)  # one of each pair q, −q: cosine and sine
    cls = np.concatenate([np.repeat(own, 3), np.repeat(paired, 3), np.repeat(paired, 3)])
    branch = np.concatenate([np.tile(np.arange(3), len(own)), np.tile(np.arange(3), 2 * len(paired))])
    sine = np.concatenate([np.zeros(3 * (len(own) + len(paired)), bool), np.ones(3 * len(paired), bool)])
    if len(cls) != 3 * config.n_atoms:
        raise AssertionError(f"{len(cls)} standing waves for {3 * config.n_atoms} degrees of freedom")
    order = np.argsort(lam[cls, branch], kind="stable")
    cls, branch, sine = cls[order], branch[order], sine[order]
    return StandingWaves(np.asarray(config.positions, float), q[cls], eps[cls, :, branch], sine,
                         partner[cls] == cls, lam[cls, branch])


def whole_levels(eigenvalues: np.ndarray, target: int) -> int:
    """The largest count ≤ ``target`` of ascending ``eigenvalues`` that ends a degenerate level."""
    gap = np.diff(eigenvalues) > LEVEL_TOL * eigenvalues[-1]
    ends = np.flatnonzero(np.append(gap, True)) + 1
    fitting = ends[ends <= target]
    if not len(fitting):
        raise ValueError(f"the first degenerate level has {ends[0]} modes, more than {target}")
    return int(fitting[-1])


def check_modes(cells: int) -> dict:
    """All 3N standing waves of a small crystal against dense LAPACK on eigenfarm's dynamical matrix.

    Returns the worst orthonormality error max|V Vᵀ − I|, the eigenvalue error against
    ``numpy.linalg.eigh`` and against tests/lattices.py ``bravais_eigenvalues``, and the worst residual
    ‖D e − λ e‖/λ_max (all dimensionless or k/m); ``passed`` when all are below 1e-10.
    """
    from threadpoolctl import threadpool_limits

    from eigenfarm.solve.dynamical import dynamical_matrix

    config, potential = fcc_crystal(cells)
    D = dynamical_matrix(potential.hessian(config), config.masses).toarray()
    modes = standing_waves(cells)
    V = modes.vectors(0, modes.n_dof)
    scale = float(np.max(modes.eigenvalue))
    with threadpool_limits(1):  # small dense products: one thread is fastest on a shared machine
        reference = np.linalg.eigvalsh(D)
        overlap = V @ V.T
        residual = np.linalg.norm(D @ V.T - V.T * modes.eigenvalue, axis=0)
    result = {
        "cells": cells, "atoms": config.n_atoms,
        "self_conjugate_classes": int(modes.self_conjugate.sum() // 3),
        "orthonormality": float(np.max(np.abs(overlap - np.eye(len(V))))),
        "eigenvalues_vs_eigh": float(np.max(np.abs(modes.eigenvalue - reference))) / scale,
        "eigenvalues_vs_eq_22_58": float(np.max(np.abs(
            modes.eigenvalue - bravais_eigenvalues(fcc_allowed_q(cells), fcc_neighbours())))) / scale,
        "residual": float(np.max(residual)) / scale,
    }
    result["passed"] = all(result[k] < 1e-10 for k in
                           ("orthonormality", "eigenvalues_vs_eigh", "eigenvalues_vs_eq_22_58", "residual"))
    return result


# ---------------------------------------------------------------- the catalogue

def write_crystal_catalogue(out: Path, cells: int, factor: float, chunk_bytes: int) -> dict:
    """Write the lowest non-zero modes of the ``cells`` crystal, about ``factor`` stored chunks of
    ``chunk_bytes`` bytes (whole degenerate levels), as a mode catalogue at ``out``; returns its facts."""
    from eigenfarm.catalogue.geometry import Geometry
    from eigenfarm.catalogue.writer import CatalogueWriter
    from eigenfarm.solve.dynamical import dynamical_matrix
    from eigenfarm.store.provenance import stamp
    from eigenfarm.structure.units import get_units

    started = time.perf_counter()
    config, potential = fcc_crystal(cells)
    H = potential.hessian(config).tocsr()
    D = dynamical_matrix(H, config.masses)
    modes = standing_waves(cells)
    lam_max = float(modes.eigenvalue[-1])
    first = int(np.count_nonzero(modes.eigenvalue <= ZERO_TOL * lam_max))  # the three translations
    units = get_units("reduced")
    worst = 0.0
    with CatalogueWriter(out, config.n_atoms, units, chunk_bytes=chunk_bytes) as writer:
        step = writer.block_modes
        count = whole_levels(modes.eigenvalue[first:], int(round(factor * step)))
        stop = first + count
        for start in range(first, stop, step):
            end = min(start + step, stop)
            V, lam = modes.vectors(start, end), modes.eigenvalue[start:end]
            residual = np.linalg.norm(D @ V.T - V.T * lam, axis=0) / lam_max
            worst = max(worst, float(residual.max()))
            writer.append(lam, residual, np.zeros(end - start, np.int32), V)
        top = float(modes.eigenvalue[stop - 1])
        tau = ZERO_TOL * lam_max
        digest = hashlib.sha256(b"".join(np.ascontiguousarray(a).tobytes()
                                         for a in (H.indptr, H.indices, H.data))).hexdigest()
        window = [tau, top]
        attrs = {
            "units": units.name, "hessian_digest": digest, "n_atoms": config.n_atoms, "store": None,
            "preparation": None,
            "source": f"FCC crystal, {cells}³ cells, nearest-neighbour springs k = m = a = 1: exact standing "
                      "plane waves (Ashcroft & Mermin eq. 22.58); hessian_digest is sha256 of the CSR Hessian",
            "window": {"eigenvalue": window, "frequency": units.frequency(window).tolist(),
                       "frequency_unit": units.frequency_unit, "convention": "lo < λ ≤ hi, zero band excluded"},
            "request": {"lowest": count}, "keep_lowest": count,
            "zero_modes": {"count": first, "expected_trivial": 3, "tolerance": tau,
                           "relative_tolerance": ZERO_TOL, "in_catalogue": 0},
            "negative_modes": {"count": 0, "in_catalogue": 0},
            "spectrum_scale": lam_max,
            "slices": [{"index": 0, "eigenvalue": window, "frequency": units.frequency(window).tolist(),
                        "expected": count, "found": count, "returned": count, "duplicates": 0, "run": {}}],
            "solver": {"method": "analytic (benchmarks/analysis_memory.py)"},
            "merge": {"tolerance": 0.0, "duplicate_overlap": None, "recombined_modes": 0},
            "completeness": {"complete": True, "expected": count, "found": count, "mismatched_slices": [],
                             "reason": "every allowed wavevector of the box enumerated analytically"},
            **stamp(),
        }
        path = writer.finish(attrs, Geometry(config.masses, config.positions, config.box))
    disk = sum(f.stat().st_size for f in path.rglob("*") if f.is_file())
    return {"modes": count, "chunk_modes": step, "chunks": -(-count // step),
            "vector_bytes": 8 * count * modes.n_dof, "disk_bytes": disk, "max_residual": worst,
            "top_frequency": float(np.sqrt(top)), "write_seconds": time.perf_counter() - started}


# ---------------------------------------------------------------- measurements (children)

def _measure(kind: str, path: str) -> dict:
    """One measurement in this (fresh) process: ``kind`` streamed, reader or xarray."""
    import psutil
    import xarray as xr
    import zarr  # noqa: F401  (every child loads the same libraries before the floor is taken)

    from eigenfarm.analysis.scan import scan_catalogue
    from eigenfarm.catalogue import open_catalogue, participation_ratio

    floor = psutil.Process().memory_info().rss
    started = time.perf_counter()
    if kind == "streamed":
        participation = scan_catalogue(path, shells=SHELLS).participation
    elif kind == "reader":
        catalogue = open_catalogue(path)
        participation = participation_ratio(catalogue.read_vectors(0, catalogue.n_modes))
    else:
        with xr.open_zarr(path) as ds:
            participation = participation_ratio(ds["vector"].values)
    seconds = time.perf_counter() - started
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    return {"seconds": seconds, "peak_bytes": peak, "floor_bytes": floor, "working_bytes": peak - floor,
            "participation_sum": float(participation.sum()), "modes": len(participation)}


def _child(kind: str, path: Path) -> dict:
    done = subprocess.run([sys.executable, __file__, "--child", kind, "--catalogue", str(path)],
                          capture_output=True, text=True, env={**os.environ, **ONE_THREAD})
    if done.returncode:
        raise RuntimeError(f"{kind} run failed:\n{done.stderr[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


# ---------------------------------------------------------------- report

def _mib(n) -> str:
    return f"{n / 2**20:,.1f} MiB"


def _cell(m: dict) -> str:
    return f"{_mib(m['peak_bytes'])} / {_mib(m['working_bytes'])} / {m['seconds']:.1f} s"


def _row(r: dict) -> str:
    s, a, x = r["streamed"], r["reader"], r["xarray"]
    peak = f"{a['peak_bytes'] / s['peak_bytes']:.2f}×, {x['peak_bytes'] / s['peak_bytes']:.2f}×"
    working = f"{a['working_bytes'] / s['working_bytes']:.1f}×, {x['working_bytes'] / s['working_bytes']:.1f}×"
    return (f"| {r['modes']:,} ({r['chunks']}) | {_mib(r['vector_bytes'])} ({_mib(r['disk_bytes'])}) "
            f"| {_cell(s)} | {_cell(a)} | {_cell(x)} | {peak} | {working} |")


def markdown(result: dict) -> str:
    rows = result["sizes"]
    streamed = [r["streamed"]["peak_bytes"] for r in rows]
    checks = "; ".join(f"cells={c['cells']}: orthonormality {c['orthonormality']:.1e}, λ vs eigh "
                       f"{c['eigenvalues_vs_eigh']:.1e}, residual {c['residual']:.1e}" for c in result["check"])
    lines = [f"# Analysis memory: streamed scan vs all vectors in memory ({result['atoms']:,} atoms)", "",
             f"Machine: {result['machine']}  ", f"Date: {result['date']}", "",
             f"Catalogues: the lowest non-zero modes of an FCC spring crystal ({result['cells']}³ cells), exact "
             "standing plane waves (few distinct values: they compress well on disk); chunks of "
             f"{rows[0]['chunk_modes']} modes (≤ {_mib(result['chunk_bytes'])}).  Peak = getrusage ru_maxrss "
             "of a fresh process; working = peak − resident after the common imports.", "",
             "| modes (chunks) | vectors (on disk) | streamed scan: peak / working / time "
             "| reader: peak / working / time | xarray: peak / working / time | peak ratio reader, xarray "
             "| working ratio reader, xarray |",
             "|---|---|---|---|---|---|---|", *map(_row, rows), "",
             f"Streamed peak over the sizes: {_mib(min(streamed))} … {_mib(max(streamed))} (growth "
             f"{_mib(max(streamed) - min(streamed))} for {rows[-1]['modes'] / rows[0]['modes']:.0f}× the modes).  "
             f"The scan also computes IPR, centres, {result['shells']} plane-wave shells and radial profiles; "
             "the in-memory runs only participation ratios, so compare memory, not time.",
             f"Largest catalogue residual ‖D e − λ e‖/λ_max: {max(r['max_residual'] for r in rows):.1e}.  "
             f"Mode check against dense LAPACK — {checks}."]
    return "\n".join(lines) + "\n"


def run(args) -> dict:
    result = {"cells": args.cells, "atoms": 4 * args.cells**3, "chunk_bytes": int(args.chunk_mib * 2**20),
              "shells": SHELLS, "date": time.strftime("%Y-%m-%d %H:%M"),
              "machine": f"{os.cpu_count()} cores, {platform.machine()}, "
                         f"{os.sysconf('SC_PAGE_SIZE') * os.sysconf('SC_PHYS_PAGES') / 2**30:.0f} GiB",
              "check": [check_modes(c) for c in (3, 4)], "sizes": []}
    if not all(c["passed"] for c in result["check"]):
        sys.exit(f"mode check failed: {result['check']}")
    scratch = Path(tempfile.mkdtemp(prefix="eigenfarm-bench-"))
    try:
        for factor in args.factors:
            path = scratch / f"fcc-{factor}.modes.zarr"
            row = {"factor": factor, **write_crystal_catalogue(path, args.cells, factor, result["chunk_bytes"])}
            for kind in ("streamed", "reader", "xarray"):
                row[kind] = _child(kind, path)
            sums = [row[k]["participation_sum"] for k in ("streamed", "reader", "xarray")]
            if not np.allclose(sums, sums[0], rtol=1e-12):
                raise RuntimeError(f"participation ratios differ between the runs: {sums}")
            print(json.dumps({k: row[k] for k in ("modes", "chunks")}),
                  {k: _mib(row[k]["peak_bytes"]) for k in ("streamed", "reader", "xarray")}, flush=True)
            result["sizes"].append(row)
            shutil.rmtree(path)
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    return result


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=12)
    parser.add_argument("--factors", type=float, nargs="+", default=[8, 32, 96],
                        help="catalogue sizes in stored chunks")
    parser.add_argument("--chunk-mib", type=float, default=2.0)
    parser.add_argument("--check", action="store_true", help="only check the modes on small crystals")
    parser.add_argument("--child", choices=["streamed", "reader", "xarray"], help=argparse.SUPPRESS)
    parser.add_argument("--catalogue", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(_measure(args.child, args.catalogue)))
        return
    if args.check:
        checks = [check_modes(c) for c in (2, 3, 4)]
        print("\n".join(json.dumps(c) for c in checks))
        sys.exit(0 if all(c["passed"] for c in checks) else "mode check failed")
    result = run(args)
    write_results("analysis_memory", result, markdown(result))


if __name__ == "__main__":
    main()
