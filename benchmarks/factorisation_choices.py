"""Benchmark: which factorisation to use for shift-invert on a 13,500-atom disordered solid.

Sample: an FCC lattice of ``--cells``³ cubic cells (15³ × 4 = 13,500 atoms) at number density 1.2
(reduced units) with Gaussian displacements (0.05 σ per component), two species of mass 1 and 1.5
drawn at random, and a stress-free spring network on the pairs closer than rc = 1.3 σ (between the
first shell at 1.06 σ and the second at 1.49 σ, ~12 neighbours): each pair contributes k u uᵀ with
k = φ''(r) of soft spheres φ = ε(σ/r)¹² smoothed to second order at rc (eigenfarm's ``ipl`` pair form,
so k > 0; it varies over two orders of magnitude between pairs).  H is then positive semi-definite with exactly 3 zero
modes (the network is rigid; checked below by inertia), and D = M^-½ H M^-½.

Shifts (λ = ω² in reduced units): ``low`` = 0.95 λ₁ (λ₁ the lowest non-trivial eigenvalue, so
D − σI has the 3 zero modes below it), ``negative`` = −0.05 λ₁ (below the spectrum, the only kind
CHOLMOD can factor), ``interior`` = the eigenvalue with a tenth of the spectrum below it (taken from
a 500-atom sample of the same recipe by dense ``eigvalsh``: the density of states is intensive).

Measured, each case in a fresh subprocess (so peak memories do not mix) with 1 BLAS thread (as on
eigenfarm's dask workers): factorisation time, the factor's stored entries, peak resident memory and
its increase over the loaded matrix, the inertia count and backward error; then shift-invert
``eigsh`` for the 3 zero + lowest 100 non-trivial modes: the plain ``scipy.sparse.linalg.eigsh(H,
k=103, M=M, sigma=low)`` (which factors H − σM with SuperLU, COLAMD ordering, partial pivoting) and
``eigsh(D, k=103, sigma=…, OPinv=…)`` with our backends.  A sweep over smaller samples times the dense
backend against SuperLU to place the ``auto`` backend's crossover.

Usage:  python benchmarks/factorisation_choices.py [--cells 15] [--timeout 300] [--only LABEL-TEXT]
Results go to benchmarks/results/factorisation_choices.{json,md}.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from result_files import RESULTS, write_results

import numpy as np
import scipy.sparse as sp

DENSITY, JITTER, RC, MASSES = 1.2, 0.05, 1.3, (1.0, 1.5)
#: the interior shift has this fraction of the spectrum below it
INTERIOR_FRACTION = 0.1
N_MODES = 100
#: seconds allowed for SuperLU's NATURAL ordering (lattice order: a wide band, the slowest case)
NATURAL_TIMEOUT = 240.0
ONE_THREAD = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def network_sample(cells: int, seed: int = 11):
    """(H (3N × 3N CSR, energy/length²), masses (N,)) of the stress-free spring network (module doc)."""
    from eigenfarm.potentials.base import sum_blocks
    from eigenfarm.potentials.neighbours import neighbour_pairs
    from eigenfarm.potentials.pair import PairTerm
    from eigenfarm.structure.box import Box

    rng = np.random.default_rng(seed)
    a = (4 / DENSITY) ** (1 / 3)
    basis = np.array([[0, 0, 0], [0.5, 0.5, 0], [0.5, 0, 0.5], [0, 0.5, 0.5]])
    grid = np.stack(np.meshgrid(*[np.arange(cells)] * 3, indexing="ij"), -1).reshape(-1, 1, 3)
    positions = ((grid + basis) * a).reshape(-1, 3)
    positions += rng.normal(scale=JITTER, size=positions.shape)
    box = Box.cubic(cells * a)
    nb = neighbour_pairs(box.wrap(positions), box, RC)
    term = PairTerm("ipl", ["A"], {("A", "A"): {"eps": 1.0, "sigma": 1.0, "n": 12, "rc": RC}})
    types = np.zeros(len(positions), dtype=np.int64)
    stiffness = term.radial(nb.r, types[nb.i], types[nb.j])[2]
    u = nb.d / nb.r[:, None]
    blocks = stiffness[:, None, None] * u[:, :, None] * u[:, None, :]
    n = len(positions)
    indptr, indices, data = sum_blocks(np.concatenate([nb.i, nb.i]), np.concatenate([nb.i, nb.j]),
                                       np.concatenate([blocks, -blocks]), n, n)
    H = sp.bsr_matrix((data, indices, indptr), shape=(3 * n, 3 * n)).tocsr()
    masses = rng.choice(MASSES, size=n)
    return H, masses, float(np.bincount(nb.i, minlength=n).mean())


def mass_weighted(H: sp.csr_matrix, masses: np.ndarray) -> sp.csr_matrix:
    """D = M^-½ H M^-½ (3N × 3N) for atom masses (N,)."""
    scale = sp.diags(np.repeat(masses, 3) ** -0.5)
    D = (scale @ H @ scale).tocsr()
    return ((D + D.T) * 0.5).tocsr()


def _status_mib(key: str) -> float:
    """A memory line of /proc/self/status (Linux) in MiB."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1]) / 1024
    raise KeyError(key)


def reset_peak_rss() -> None:
    """Start a new peak-RSS window (Linux: writing 5 to /proc/self/clear_refs resets VmHWM)."""
    Path("/proc/self/clear_refs").write_text("5")


def peak_rss_mib() -> float:
    """Peak resident memory since the last :func:`reset_peak_rss`."""
    return _status_mib("VmHWM")


def rss_mib() -> float:
    return _status_mib("VmRSS")


# --------------------------------------------------------------------------------------------- cases
def case_backend(D, H, masses, case: dict) -> dict:
    """Factor with one of our backends (its defaults, or ``settings``) at ``case["sigma"]``."""
    from eigenfarm.errors import InputError
    from eigenfarm.solve.backend import SingularShift
    from eigenfarm.solve.backends import IndefiniteShift, get_backend

    backend = get_backend(case["backend"], **case.get("settings", {}))
    start = time.perf_counter()
    try:
        factor = backend.factor(D, case["sigma"])
    except (IndefiniteShift, SingularShift, InputError) as exc:
        return {"seconds": time.perf_counter() - start, "error": f"{type(exc).__name__}: {exc}"}
    out = {"seconds": time.perf_counter() - start, "peak_rss_mib": peak_rss_mib(),
           "below": factor.inertia().below, "stats": factor.stats, "factor_nnz": factor.stats.get("factor_nnz")}
    if case["backend"] == "cholmod":
        out["factor_nnz"] = cholmod_entries(D, case["sigma"])
    return out


def cholmod_entries(D, sigma: float) -> int:
    """nnz(L) of CHOLMOD's factor, from a second factorisation (reading L copies it, so this runs after
    the peak memory of the timed one was read)."""
    from sksparse.cholmod import cholesky
    from eigenfarm.solve.backends.common import shifted

    return int(cholesky(shifted(D, sigma)[0], ordering_method="metis", mode="supernodal").L().nnz)


def case_cholmod_ldlt(D, H, masses, case: dict) -> dict:
    """CHOLMOD's simplicial LDLᵀ (no pivoting), not a backend: is it an option for interior shifts?"""
    from sksparse.cholmod import cholesky
    from eigenfarm.solve.backends.common import measure_factor, shifted

    A, sigma, norm = shifted(D, case["sigma"])
    start = time.perf_counter()
    chol = cholesky(A, ordering_method="metis", mode="simplicial")
    seconds = time.perf_counter() - start
    pivots = chol.D()
    out = {"seconds": seconds, "peak_rss_mib": peak_rss_mib(), "below": int((pivots < 0).sum()),
           "stats": measure_factor(A, chol, norm)}
    out["factor_nnz"] = int(chol.L_D()[0].nnz)  # L_D: no conversion to LLᵀ (which fails if indefinite)
    return out


def case_plain_eigsh(D, H, masses, case: dict) -> dict:
    """scipy's own shift-invert: eigsh(H, k, M=M, sigma) (SuperLU, COLAMD, partial pivoting)."""
    from scipy.sparse.linalg import eigsh

    M = sp.diags(np.repeat(masses, 3)).tocsr()
    start = time.perf_counter()
    values = eigsh(H, k=case["k"], M=M, sigma=case["sigma"], return_eigenvectors=False)
    return {"seconds": time.perf_counter() - start, "peak_rss_mib": peak_rss_mib(),
            "eigenvalues": np.sort(values).tolist()}


def case_backend_eigsh(D, H, masses, case: dict) -> dict:
    """eigsh(D, k, sigma, OPinv=our factor): factorisation plus Lanczos."""
    from scipy.sparse.linalg import LinearOperator, eigsh
    from eigenfarm.solve.backends import get_backend

    n = D.shape[0]
    start = time.perf_counter()
    factor = get_backend(case["backend"]).factor(D, case["sigma"])
    factored = time.perf_counter() - start
    opinv = LinearOperator((n, n), matvec=factor.solve, dtype=np.float64)
    values = eigsh(D, k=case["k"], sigma=factor.sigma, OPinv=opinv, return_eigenvectors=False)
    return {"seconds": time.perf_counter() - start, "factor_seconds": factored, "peak_rss_mib": peak_rss_mib(),
            "eigenvalues": np.sort(values).tolist(), "stats": factor.stats}


CASES = {"backend": case_backend, "cholmod_ldlt": case_cholmod_ldlt, "plain_eigsh": case_plain_eigsh,
         "backend_eigsh": case_backend_eigsh}


def run_child(matrix_file: str, case: dict) -> None:
    """Child-process entry: load the matrices, run one case, print its result as JSON."""
    data = np.load(matrix_file)
    H = sp.csr_matrix((data["H_data"], data["H_indices"], data["H_indptr"]), shape=tuple(data["shape"]))
    masses = data["masses"]
    D = mass_weighted(H, masses)
    base = rss_mib()
    reset_peak_rss()
    result = CASES[case["kind"]](D, H, masses, case)
    result["loaded_rss_mib"] = base
    if "peak_rss_mib" in result:
        result["rss_increase_mib"] = result["peak_rss_mib"] - base
    print(json.dumps(result, default=float))


def run_case(matrix_file: str, case: dict, timeout: float) -> dict:
    """One case in a fresh single-BLAS-thread subprocess; a timeout or crash is recorded, not raised."""
    env = dict(os.environ, **ONE_THREAD)
    command = [sys.executable, __file__, "--child", matrix_file, json.dumps(case)]
    start = time.perf_counter()
    try:
        done = subprocess.run(command, capture_output=True, text=True, timeout=timeout, env=env)
    except subprocess.TimeoutExpired:
        return {**case, "error": f"timeout after {timeout:.0f} s"}
    if done.returncode:
        return {**case, "error": f"exit {done.returncode}: {done.stderr.strip().splitlines()[-1:]}"}
    result = {**case, **json.loads(done.stdout.strip().splitlines()[-1])}
    result["wall_seconds"] = time.perf_counter() - start
    print(f"  {case['label']}: {result.get('seconds', 0):.1f} s", flush=True)
    return result


# --------------------------------------------------------------------------------------- the study
def locate_shifts(D: sp.csr_matrix) -> dict:
    """λ₁ (lowest non-trivial) and λ_max of D (n × n), and the shifts named in the module doc."""
    from scipy.sparse.linalg import LinearOperator, eigsh
    from eigenfarm.solve.backends import get_backend

    top = float(eigsh(D, k=1, which="LA", tol=1e-6, return_eigenvectors=False)[0])
    small = mass_weighted(*network_sample(5)[:2])
    interior = float(np.quantile(np.linalg.eigvalsh(small.toarray()), INTERIOR_FRACTION))
    probe = -1e-4 * top
    factor = get_backend("auto").factor(D, probe)
    n = D.shape[0]
    opinv = LinearOperator((n, n), matvec=factor.solve, dtype=np.float64)
    low = np.sort(eigsh(D, k=6, sigma=probe, OPinv=opinv, return_eigenvectors=False))
    lam1 = float(low[3])
    return {"lambda_1": lam1, "lambda_max": top, "lowest_six": low.tolist(), "low": 0.95 * lam1,
            "negative": -0.05 * lam1, "interior": interior}


def study_cases(shifts: dict) -> list[dict]:
    """The 13,500-atom cases: orderings, backends, and the eigsh runs."""
    low, interior, negative = shifts["low"], shifts["interior"], shifts["negative"]
    cases = []
    for ordering in ("METIS", "MMD_AT_PLUS_A", "COLAMD", "NATURAL"):
        for name, sigma in (("low", low), ("interior", interior)):
            if ordering in ("COLAMD", "NATURAL") and name == "interior":
                continue  # the pattern (hence ordering and fill) does not depend on σ
            cases.append({"kind": "backend", "backend": "superlu", "settings": {"ordering": ordering},
                          "sigma": sigma, "shift": name, "label": f"superlu {ordering} @ {name}",
                          "timeout": NATURAL_TIMEOUT if ordering == "NATURAL" else None})
    cases += [{"kind": "backend", "backend": "cholmod", "sigma": negative, "shift": "negative",
               "label": "cholmod @ negative"},
              {"kind": "backend", "backend": "cholmod", "sigma": low, "shift": "low", "label": "cholmod @ low"},
              {"kind": "cholmod_ldlt", "sigma": low, "shift": "low", "label": "cholmod simplicial LDLT @ low"},
              {"kind": "cholmod_ldlt", "sigma": interior, "shift": "interior",
               "label": "cholmod simplicial LDLT @ interior"},
              {"kind": "backend", "backend": "dense", "sigma": low, "shift": "low", "label": "dense @ low"},
              {"kind": "plain_eigsh", "sigma": low, "k": N_MODES + 3, "shift": "low",
               "label": f"scipy eigsh(H, k={N_MODES + 3}, M, sigma=low)"},
              {"kind": "backend_eigsh", "backend": "superlu", "sigma": low, "k": N_MODES + 3, "shift": "low",
               "label": f"eigsh(D, k={N_MODES + 3}, OPinv=superlu) @ low"},
              {"kind": "backend_eigsh", "backend": "superlu", "sigma": negative, "k": N_MODES + 3,
               "shift": "negative", "label": f"eigsh(D, k={N_MODES + 3}, OPinv=superlu) @ negative"},
              {"kind": "backend_eigsh", "backend": "cholmod", "sigma": negative, "k": N_MODES + 3,
               "shift": "negative", "label": f"eigsh(D, k={N_MODES + 3}, OPinv=cholmod) @ negative"}]
    return cases


def crossover_sweep(sigma: float, cell_counts=(3, 4, 5, 6, 8)) -> list[dict]:
    """Dense vs SuperLU (vs CHOLMOD at −σ/1000) factor times on smaller samples at the interior shift σ."""
    from threadpoolctl import threadpool_limits
    from eigenfarm.solve.backends import available_backends, get_backend

    rows = []
    with threadpool_limits(1):
        for cells in cell_counts:
            H, masses, _ = network_sample(cells)
            D = mass_weighted(H, masses)
            row = {"atoms": len(masses), "n": D.shape[0]}
            for name in ("dense", "superlu", "cholmod"):
                if name not in available_backends():
                    continue
                shift = -1e-3 * sigma if name == "cholmod" else sigma
                times = []
                for _ in range(2):
                    start = time.perf_counter()
                    factor = get_backend(name).factor(D, shift)
                    times.append(time.perf_counter() - start)
                row[name] = min(times)
                row[f"{name}_below"] = factor.inertia().below
            rows.append(row)
            print(f"  sweep n={row['n']}: " + ", ".join(f"{k} {row[k]:.3f} s" for k in ("dense", "superlu", "cholmod")
                                                        if k in row), flush=True)
    return rows


def compare_eigenvalues(results: list[dict]) -> None:
    """Max relative difference of each eigsh run's non-trivial eigenvalues from the plain reference."""
    reference = next((r for r in results if r["kind"] == "plain_eigsh" and "eigenvalues" in r), None)
    if reference is None:
        return
    ref = np.array(reference["eigenvalues"])[3:]
    for r in results:
        if r["kind"] == "backend_eigsh" and "eigenvalues" in r:
            values = np.array(r["eigenvalues"])[3:]
            r["max_relative_difference_from_plain"] = float(np.max(np.abs(values - ref) / ref))


def ratios(cases: list[dict]) -> list[str]:
    """Each eigsh run against the plain one; each other factorisation against SuperLU with METIS at the
    same shift (at ``low`` for the negative shift, which SuperLU factors as fast)."""
    seconds = {r["label"]: r["seconds"] for r in cases if "seconds" in r and "error" not in r}
    plain = next((label for label in seconds if label.startswith("scipy eigsh")), None)
    lines = []
    for r in cases:
        label = r["label"]
        if label not in seconds or label == plain or "METIS" in label:
            continue
        if r["kind"] == "backend_eigsh":
            reference = plain
        else:
            reference = f"superlu METIS @ {r['shift'] if r['shift'] != 'negative' else 'low'}"
        if reference in seconds:
            lines.append(f"{reference} / {label}: {seconds[reference] / seconds[label]:.2f}")
    return lines


def markdown(report: dict) -> str:
    """The results as a readable table."""
    s, lines = report["sample"], []
    lines += ["# Factorisation choices for shift-invert", "",
              f"Sample: {s['atoms']} atoms, n = {s['n']}, nnz(D) = {s['nnz']} ({s['neighbours']:.1f} neighbours); "
              f"λ₁ = {s['lambda_1']:.4g}, λ_max = {s['lambda_max']:.4g}; shifts low = {s['low']:.4g}, "
              f"negative = {s['negative']:.4g}, interior = {s['interior']:.4g}.  "
              f"{report['machine']}; 1 BLAS thread; each case in a fresh process; CHOLMOD's BLAS: "
              f"{report['system_blas']}" + (f"; rerun later: {', '.join(report['rerun'])}" if report["rerun"] else "")
              + ".", "",
              "| case | seconds | factor entries | peak RSS MiB (increase) | count below σ | backward error | note |",
              "| --- | ---: | ---: | ---: | ---: | ---: | --- |"]
    for r in report["cases"]:
        stats = r.get("stats", {})
        nnz = r.get("factor_nnz")
        peak = f"{r['peak_rss_mib']:.0f} ({r['rss_increase_mib']:.0f})" if "peak_rss_mib" in r else ""
        eta = stats.get("backward_error")
        note = r.get("error", "")[:120]
        if "max_relative_difference_from_plain" in r:
            note = (f"factor {r['factor_seconds']:.1f} s; max rel. diff. from plain "
                    f"{r['max_relative_difference_from_plain']:.1e}")
        if stats.get("fallback"):
            note += f" fallback: {stats['fallback'][:80]}"
        lines.append(f"| {r['label']} | {r['seconds']:.1f} | {nnz if nnz else ''} | {peak} | "
                     f"{r.get('below', '')} | {f'{eta:.1e}' if eta is not None else ''} | {note} |"
                     if "seconds" in r else f"| {r['label']} | | | | | | {note} |")
    lines += ["", "Ratios of seconds (A / B: below 1, A is faster):", ""] + [f"- {line}" for line in ratios(report["cases"])]
    lines += ["", "Crossover sweep (factor seconds, best of 2, interior shift; cholmod at −interior/1000):", "",
              "| atoms | n | dense | superlu | cholmod |", "| ---: | ---: | ---: | ---: | ---: |"]
    for row in report["sweep"]:
        lines.append(f"| {row['atoms']} | {row['n']} | {row['dense']:.3f} | {row['superlu']:.3f} | "
                     f"{row.get('cholmod', float('nan')):.3f} |")
    return "\n".join(lines) + "\n"


def system_blas() -> str:
    """The BLAS that Debian's SuiteSparse (hence CHOLMOD) runs on: reference BLAS unless OpenBLAS is
    installed (scipy and numpy bring their own OpenBLAS)."""
    return os.path.realpath("/usr/lib/x86_64-linux-gnu/libblas.so.3")


def machine_description() -> str:
    import psutil
    import scipy

    return (f"{os.cpu_count()} cores, {psutil.virtual_memory().total / 2**30:.0f} GiB, Python "
            f"{platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}")


def measure(cells: int, timeout: float, only: str | None) -> dict:
    """Run the study (or, with ``only``, the cases whose label contains it, merged into the saved
    results with their shifts) and return the report."""
    saved = json.loads((RESULTS / "factorisation_choices.json").read_text()) if only else None
    H, masses, neighbours = network_sample(cells)
    D = mass_weighted(H, masses)
    print(f"sample: {len(masses)} atoms, nnz {H.nnz}, {neighbours:.1f} neighbours", flush=True)
    if saved:
        sample = saved["sample"]
        shifts = {key: sample[key] for key in ("low", "negative", "interior")}
    else:
        shifts = locate_shifts(D)
        sample = {"atoms": len(masses), "n": D.shape[0], "nnz": int(D.nnz), "neighbours": neighbours, **shifts}
    print(f"shifts: {shifts}", flush=True)
    cases = [case for case in study_cases(shifts) if not only or only in case["label"]]
    with tempfile.TemporaryDirectory() as tmp:
        matrix_file = str(Path(tmp) / "matrices.npz")
        np.savez(matrix_file, H_data=H.data, H_indices=H.indices, H_indptr=H.indptr, shape=H.shape, masses=masses)
        fresh = {case["label"]: run_case(matrix_file, case, case.get("timeout") or timeout) for case in cases}
    results = [fresh.get(r["label"], r) for r in saved["cases"]] if saved else list(fresh.values())
    compare_eigenvalues(results)
    return {"machine": machine_description(), "system_blas": system_blas(), "sample": sample, "cases": results,
            "sweep": crossover_sweep(shifts["interior"]),
            "rerun": sorted(fresh) if saved else []}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=15, help="FCC cells per side (4 atoms each; 15 → 13,500)")
    parser.add_argument("--timeout", type=float, default=300.0, help="seconds allowed per case")
    parser.add_argument("--only", help="rerun only the cases whose label contains this text (and the sweep), "
                                       "keeping the other saved results")
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        run_child(args.child[0], json.loads(args.child[1]))
        return 0
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)
    started = time.perf_counter()
    report = measure(args.cells, args.timeout, args.only)
    report["total_seconds"] = time.perf_counter() - started
    write_results("factorisation_choices", report, markdown(report))
    return 0


if __name__ == "__main__":
    sys.exit(main())
