"""The ``eigenfarm`` command line: a thin client over the library.

Sub-commands: ``demo`` (the main job on the built-in scenario), ``glass`` (an ensemble of demo
glasses), ``relax`` (FIRE a configuration to a minimum), ``hessian`` (build, import or inspect a
Hessian store), ``solve`` (modes of one store or an ensemble into mode catalogues), ``modes``
(print a catalogue's summary), ``analyze`` (densities of states, localization, bands, tail fit and
the report of catalogues), ``gauge`` (solver settings tried on one store), ``density`` (whole-spectrum density of states of a store by the kernel
polynomial method).  Every failure prints one line ``eigenfarm: error: …`` on stderr and exits non-zero.
"""

from __future__ import annotations

import argparse
import sys

from eigenfarm import __version__
from eigenfarm.errors import ConvergenceError, InputError

DEFAULT_MIN_DISTANCE = 0.25


class _Parser(argparse.ArgumentParser):
    """Usage mistakes end like every other failure: one line ``eigenfarm: error: …``, status 2."""

    def error(self, message: str):
        self.exit(2, f"eigenfarm: error: {message} (see '{self.prog} --help')\n")


def _checked(kind, minimum: str):
    """An argparse type: a finite ``kind`` (int or float) that is positive (``minimum="positive"``) or
    not negative (``"non-negative"``)."""
    noun = "an integer" if kind is int else "a number"

    def parse(text: str):
        try:
            value = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not {noun}") from None
        if not (value > 0 if minimum == "positive" else value >= 0) or value == float("inf"):
            raise argparse.ArgumentTypeError(f"must be finite and {minimum}, got {text}")
        return value
    return parse


def _positive(kind):
    return _checked(kind, "positive")


def _non_negative(kind):
    return _checked(kind, "non-negative")


def _cluster_options(parser: argparse.ArgumentParser) -> None:
    group = parser.add_mutually_exclusive_group()
    group.add_argument("--workers", type=_positive(int), metavar="N",
                       help="worker processes of the local dask cluster (default: one per core)")
    group.add_argument("--scheduler", metavar="ADDRESS",
                       help="address of a running dask scheduler to use instead of a local cluster")


def _fraction(text: str) -> float:
    value = _positive(float)(text)
    if value > 1:
        raise argparse.ArgumentTypeError(f"must lie in (0, 1], got {text}")
    return value


def _analyze_parser(sub) -> None:
    analyze = sub.add_parser(
        "analyze", help="densities of states, localization, phonon bands, tail fit and finite-size table of "
                        "mode catalogues, as a report (tables, plots, summary page)")
    analyze.add_argument("catalogue", nargs="+", help="mode catalogues (one per sample; sizes may differ)")
    analyze.add_argument("--out", required=True, metavar="DIR", help="report folder to write")
    analyze.add_argument("--shells", type=_positive(int), default=8, metavar="S",
                         help="plane-wave shells to project modes on (default 8; fewer in small samples)")
    analyze.add_argument("--phonon-weight", type=_fraction, default=0.5, metavar="W",
                         help="plane-wave weight from which a mode counts as a phonon (default 0.5)")
    analyze.add_argument("--local-participation", type=_fraction, default=0.15, metavar="P",
                         help="participation ratio up to which a non-phonon mode counts as quasi-localized "
                              "(default 0.15)")
    analyze.add_argument("--tail-below", type=_positive(float), metavar="F",
                         help="upper end of the tail fit, in the catalogues' frequency unit (default: the "
                              "lower edge of the first transverse band)")
    analyze.add_argument("--tail-above", type=_non_negative(float), default=0.0, metavar="F",
                         help="lower end of the tail fit (default 0)")
    analyze.add_argument("--catalogue-bands-only", action="store_true",
                         help="do not place first bands the catalogues miss from their Hessian stores")
    analyze.add_argument("--fixed-exponent", type=_positive(float), default=4.0, metavar="BETA",
                         help="exponent at which the prefactor is also reported (default 4)")
    analyze.add_argument("--bootstrap", type=_non_negative(int), default=2000, metavar="B",
                         help="bootstrap replicates over samples (default 2000; 0 for profile intervals only)")
    analyze.add_argument("--confidence", type=_fraction, default=0.95, help="interval level (default 0.95)")
    analyze.add_argument("--seed", type=int, default=0, help="seed of the bootstrap (default 0)")
    analyze.add_argument("--bins", type=_positive(int), default=30, help="histogram bins (default 30)")
    analyze.add_argument("--chunk-modes", type=_positive(int), metavar="M",
                         help="vectors read at a time (default: the catalogue's stored chunk)")
    analyze.add_argument("--overwrite", action="store_true", help="replace a report written before")


def _listed(kind):
    """An argparse type: a comma-separated list of ``kind`` values ("none" allowed for optional ints)."""
    def parse(text: str):
        values = []
        for item in text.split(","):
            item = item.strip()
            if kind is int and item == "none":
                values.append(None)
                continue
            try:
                values.append(kind(item))
            except ValueError:
                raise argparse.ArgumentTypeError(f"{item!r} in {text!r} is not {kind.__name__}") from None
        return values
    return parse


def _gauge_parser(sub) -> None:
    gauge = sub.add_parser(
        "gauge", help="try a grid of solver settings on one Hessian store: wall time, memory, fill, "
                      "residuals and completeness per setting, beside dense LAPACK and plain scipy eigsh")
    gauge.add_argument("store", metavar="H.zarr")
    gauge.add_argument("--out", required=True, metavar="DIR", help="results folder (gauge.csv/.md/.png/.json)")
    which = gauge.add_mutually_exclusive_group(required=True)
    which.add_argument("--window", metavar="LO:HI", help="frequency window, as for solve")
    which.add_argument("--lowest", type=_positive(int), metavar="K", help="the K lowest modes")
    gauge.add_argument("--backends", type=_listed(str), default=["auto"], metavar="A,B",
                       help="backends to try (default auto)")
    gauge.add_argument("--slice-modes", type=_listed(int), default=[40], metavar="M,…",
                       help="target modes per slice (default 40)")
    gauge.add_argument("--ncv", type=_listed(int), default=[None], metavar="V,…",
                       help="Lanczos basis sizes; 'none' = the solver's default")
    gauge.add_argument("--tol", type=_listed(float), default=[1e-12], metavar="T,…", help="Lanczos tolerances")
    gauge.add_argument("--workers", type=_listed(int), default=[0], metavar="W,…",
                       help="dask workers; 0 = in one process (default 0)")
    gauge.add_argument("--ranks", type=_listed(int), default=[1], metavar="P,…",
                       help="MPI ranks for the slepc backend (more than 1 runs the solve under mpiexec)")
    gauge.add_argument("--slice-methods", type=_listed(str), default=["default"], metavar="S,…",
                       help="slepc slice methods: krylov-schur, interval, lanczos, or default")
    gauge.add_argument("--references", type=_listed(str), default=["dense", "eigsh"], metavar="R,…",
                       help="runs to compare with: dense (numpy eigh), eigsh (one plain scipy call), or none")
    gauge.add_argument("--overwrite", action="store_true", help="replace a gauge folder written before")


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="eigenfarm", description="Low-frequency vibrational modes of large amorphous solids.")
    parser.add_argument("--version", action="version", version=f"eigenfarm {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    demo = sub.add_parser("demo", help="run the main job end to end on the built-in glass scenario")
    demo.add_argument("--out", default="eigenfarm-demo", help="output folder (default: eigenfarm-demo)")
    demo.add_argument("--atoms", type=_positive(int), default=2000, help="atoms per sample (default 2000)")
    demo.add_argument("--samples", type=_positive(int), default=4, help="samples in the ensemble (default 4)")
    demo.add_argument("--seed", type=int, default=2026, help="ensemble seed (default 2026)")
    demo.add_argument("--lowest", type=_positive(int), default=100, help="modes per sample to compute (default 100)")
    _cluster_options(demo)

    glass = sub.add_parser("glass", help="make an ensemble of quenched demo-scenario glasses (extended XYZ)")
    glass.add_argument("--out", required=True, help="output folder for sample-NNN.xyz files")
    glass.add_argument("--atoms", type=_positive(int), default=2000, help="atoms per sample (default 2000)")
    glass.add_argument("--samples", type=_positive(int), default=1, help="number of samples (default 1)")
    glass.add_argument("--seed", type=int, default=0, help="ensemble seed (default 0)")
    glass.add_argument("--density", type=_positive(float), help="number density in σ⁻³ (default: the scenario's 0.80)")
    glass.add_argument("--anneal-steps", type=_non_negative(int), default=0,
                       help="Langevin steps before the quench (default 0: instant quench)")
    glass.add_argument("--temperature", type=_non_negative(float), default=0.5, help="anneal temperature in ε/k_B")
    glass.add_argument("--overwrite", action="store_true", help="replace sample files that exist")
    _cluster_options(glass)

    relax = sub.add_parser("relax", help="minimise a configuration's energy with FIRE")
    relax.add_argument("config", help="extended XYZ file")
    relax.add_argument("--potential", required=True, help="named set, spec string or potential file")
    relax.add_argument("--out", required=True, help="relaxed configuration (extended XYZ)")
    relax.add_argument("--fmax", type=_positive(float), default=1e-10, help="force tolerance (default 1e-10)")
    relax.add_argument("--max-steps", type=_positive(int), default=200_000)
    relax.add_argument("--overwrite", action="store_true")

    solve = sub.add_parser(
        "solve", help="all modes in a frequency window, or the lowest K, of one store or an ensemble of stores")
    solve.add_argument("stores", nargs="+", metavar="H.zarr", help="Hessian store(s); several make an ensemble job")
    solve.add_argument("--out", required=True,
                       help="catalogue to write (modes.zarr); with several stores a folder receiving NAME.modes.zarr each")
    which = solve.add_mutually_exclusive_group(required=True)
    which.add_argument("--window", metavar="LO:HI",
                       help="frequency window in the store's unit (THz for metal units, ω for reduced)")
    which.add_argument("--lowest", type=_positive(int), metavar="K", help="the K lowest modes above the zero modes")
    solve.add_argument("--backend", default="auto",
                       help="factorisation backend: auto, superlu, dense, cholmod, slepc (MUMPS; also on MPI ranks)")
    solve.add_argument("--slice-method", choices=["lanczos", "krylov-schur", "interval"],
                       help="slice solver: lanczos (ARPACK, one process per slice; the default) or, with --backend "
                            "slepc, krylov-schur (the default under mpiexec) or interval (SLEPc spectrum slicing)")
    solve.add_argument("--ranks", type=_positive(int), metavar="P",
                       help="solve each store as an MPI job of P ranks (mpiexec) run by a dask task; --backend slepc")
    solve.add_argument("--slice-modes", type=_positive(int), default=40, metavar="M",
                       help="target number of modes per slice (default 40)")
    solve.add_argument("--tol", type=float, default=1e-12, help="Lanczos convergence tolerance (default 1e-12)")
    solve.add_argument("--ncv", type=_positive(int), metavar="V",
                       help="Lanczos basis size per shift (default: max(2k + 1, 20) for k wanted modes)")
    solve.add_argument("--zero-tol", type=float, default=1e-8,
                       help="eigenvalues with |λ| ≤ this × λ_max are zero modes (default 1e-8)")
    solve.add_argument("--strict", action="store_true", help="negative eigenvalues are an error, not a warning")
    solve.add_argument("--inline", action="store_true", help="run every task in this process (no dask cluster)")
    solve.add_argument("--overwrite", action="store_true", help="replace existing catalogues")
    _cluster_options(solve)

    modes = sub.add_parser("modes", help="print the summary of a mode catalogue")
    modes.add_argument("catalogue", nargs="+", help="mode catalogue(s) (modes.zarr)")

    _analyze_parser(sub)
    _gauge_parser(sub)

    density = sub.add_parser(
        "density", help="whole-spectrum density of states of a Hessian store without eigenpairs (kernel polynomial method)")
    density.add_argument("store", metavar="H.zarr", help="Hessian store")
    density.add_argument("--out", required=True, metavar="DIR",
                         help="folder to write: density.csv, density.png/.svg, density.md, density.json")
    density.add_argument("--moments", type=_positive(int), default=512, metavar="M",
                         help="Chebyshev moments; the resolution is about (spectral width)·π/(2M) in λ (default 512)")
    density.add_argument("--probes", type=_positive(int), default=16, metavar="R",
                         help="random probe vectors, at least 2; error bars shrink as 1/√R (default 16)")
    density.add_argument("--seed", type=int, default=0, help="seed of the probe vectors (default 0)")
    density.add_argument("--inline", action="store_true", help="run in this process (no dask cluster)")
    density.add_argument("--overwrite", action="store_true", help="replace a density folder written before")
    _cluster_options(density)

    hessian = sub.add_parser(
        "hessian", help="build a Hessian store from a configuration or a Matrix Market file, or describe one")
    hessian.add_argument("source", help="CONFIG.xyz, MATRIX.mtx, or an existing store H.zarr to describe")
    hessian.add_argument("--out", help="store to write (H.zarr)")
    hessian.add_argument("--potential", help="for a configuration: named set, spec string or potential file")
    hessian.add_argument("--frame", type=_non_negative(int), default=0, help="frame of a multi-frame XYZ file (default 0)")
    hessian.add_argument("--masses", help="for a .mtx: one mass for all atoms, a text file or a .npy file")
    hessian.add_argument("--units", choices=["metal", "reduced"], help="for a .mtx: the matrix's unit system")
    hessian.add_argument("--shard-atoms", type=_positive(int), metavar="K", help="atoms per store shard")
    hessian.add_argument("--min-distance", type=_non_negative(float), default=DEFAULT_MIN_DISTANCE,
                         help=f"atoms closer than this are an error (default {DEFAULT_MIN_DISTANCE})")
    hessian.add_argument("--overwrite", action="store_true", help="replace an existing store")
    _cluster_options(hessian)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit status."""
    args = _parser().parse_args(argv)
    from eigenfarm import commands

    try:
        getattr(commands, f"run_{args.command}")(args)
    except (InputError, ConvergenceError) as exc:
        print(f"eigenfarm: error: {exc}", file=sys.stderr)
        return 2 if isinstance(exc, InputError) else 3
    except KeyboardInterrupt:
        print("eigenfarm: interrupted", file=sys.stderr)
        return 130
    return 0


if __name__ == "__main__":
    sys.exit(main())
