"""What each ``eigenfarm`` sub-command does, given its parsed arguments (see :mod:`eigenfarm.cli`)."""

from __future__ import annotations

import sys
from pathlib import Path

from eigenfarm.errors import InputError
from eigenfarm.progress import ProgressBar


def _client(args):
    """A dask client from --workers/--scheduler (a context manager)."""
    from eigenfarm.farm.cluster import open_client

    return open_client(workers=getattr(args, "workers", None), scheduler=getattr(args, "scheduler", None))


def _say(text: str) -> None:
    print(text, flush=True)


def _announce(client) -> None:
    _say(f"dask dashboard: {client.dashboard_link}")


def run_glass(args) -> list[Path]:
    from eigenfarm.samples.ensemble import make_ensemble
    from eigenfarm.samples.prepare import Recipe
    from eigenfarm.samples import scenario

    if args.atoms < 2 or args.samples < 1:
        raise InputError("--atoms must be at least 2 and --samples at least 1")
    recipe = Recipe(args.atoms, density=args.density or scenario.DENSITY, anneal_steps=args.anneal_steps,
                    temperature=args.temperature)
    with _client(args) as client:
        _announce(client)
        paths = make_ensemble(recipe, args.seed, args.samples, args.out, client, args.overwrite, ProgressBar())
    _say(f"{len(paths)} samples in {args.out}: " + ", ".join(p.name for p in paths))
    return paths


def run_relax(args) -> None:
    from eigenfarm.potentials.fire import fire_minimise
    from eigenfarm.potentials.spec import load_potential
    from eigenfarm.structure.xyz import read_xyz, write_xyz

    out = Path(args.out)
    if out.exists() and not args.overwrite:
        raise InputError(f"{out}: already exists (pass --overwrite to replace it)")
    config = read_xyz(args.config)
    potential = load_potential(args.potential)
    potential.types(config)
    relaxed = fire_minimise(potential, config, fmax=args.fmax, max_steps=args.max_steps,
                            progress=lambda step, e, f: _say(f"step {step:7d}  energy {e:.10g}  max|F| {f:.3g}"))
    relaxed.config.info.update({"energy": relaxed.energy, "fmax": relaxed.fmax, "potential": potential.name})
    write_xyz(out, relaxed.config, overwrite=True)
    _say(f"{out}: energy {relaxed.energy:.12g} {config.units.energy}, max |F| {relaxed.fmax:.3g} "
         f"after {relaxed.steps} FIRE steps")


def run_hessian(args) -> None:
    from eigenfarm.store import open_store

    source = Path(args.source)
    if source.is_dir():
        if args.out:
            raise InputError(f"{source}: is a store; --out only goes with a configuration or .mtx source")
        _say(open_store(source).summary())
        return
    if not source.exists():
        raise InputError(f"{source}: no such file or store")
    if not args.out:
        raise InputError("--out is required to build a store (or give an existing store to describe it)")
    if Path(args.out).exists() and not args.overwrite:
        raise InputError(f"{args.out}: already exists (pass --overwrite to replace it)")
    if source.suffix.lower() == ".mtx":
        summary = _import_matrix(args, source)
    else:
        summary = _build_from_configuration(args, source)
    _say(open_store(summary["path"]).summary())


def _import_matrix(args, source: Path) -> dict:
    from eigenfarm.store import import_matrix_market

    if args.masses is None or args.units is None:
        raise InputError(f"{source}: a Matrix Market source needs --masses and --units")
    if args.potential:
        raise InputError(f"{source}: --potential goes with a configuration, not a matrix file")
    with _client(args) as client:
        _announce(client)
        return import_matrix_market(source, args.masses, args.units, args.out, shard_atoms=args.shard_atoms,
                                    client=client, overwrite=args.overwrite, progress=ProgressBar())


def _build_from_configuration(args, source: Path) -> dict:
    from eigenfarm.potentials.neighbours import check_overlaps
    from eigenfarm.potentials.spec import load_potential
    from eigenfarm.store import build_store
    from eigenfarm.structure.xyz import read_xyz

    if not args.potential:
        raise InputError(f"{source}: a configuration source needs --potential")
    if args.masses or args.units:
        raise InputError(f"{source}: --masses/--units go with a .mtx source (a configuration carries its own)")
    config = read_xyz(source, args.frame)
    potential = load_potential(args.potential)
    potential.types(config)
    check_overlaps(config.positions, config.box, args.min_distance, str(source))
    with _client(args) as client:
        _announce(client)
        return build_store(config, potential, args.out, shard_atoms=args.shard_atoms, client=client,
                           overwrite=args.overwrite, progress=ProgressBar(), source_file=source)


def _window(text: str) -> tuple[float, float]:
    try:
        lo, hi = (float(part) for part in text.split(":"))
    except ValueError:
        raise InputError(f"--window {text!r}: expected LO:HI, two frequencies separated by a colon") from None
    if not hi > lo:
        raise InputError(f"--window {text!r}: empty window (HI must exceed LO)")
    return lo, hi


def _catalogue_paths(stores: list[str], out: str) -> list[Path]:
    if len(stores) == 1:
        return [Path(out)]
    names = [Path(s.rstrip("/")).name.removesuffix(".zarr") for s in stores]
    if len(set(names)) != len(names):
        raise InputError("several stores share a name; give them distinct names to solve them together")
    Path(out).mkdir(parents=True, exist_ok=True)
    return [Path(out) / f"{name}.modes.zarr" for name in names]


def _request(args):
    from eigenfarm.farm import mpijob
    from eigenfarm.farm.solvejob import SolveRequest
    from eigenfarm.solve.backends import get_backend
    from eigenfarm.solve.slicer import LanczosSettings

    get_backend(args.backend)  # unknown or uninstalled backends fail here, before any work
    if args.slice_modes < 1:
        raise InputError("--slice-modes must be at least 1")
    return SolveRequest(window=_window(args.window) if args.window else None, lowest=args.lowest,
                        backend=args.backend, slice_modes=args.slice_modes, zero_tol=args.zero_tol,
                        strict=args.strict, lanczos=LanczosSettings(tol=args.tol, ncv=args.ncv),
                        slice_method=mpijob.slice_method(args.backend, args.slice_method, args.ranks))


def solve_stores(stores, outs, request, client, overwrite: bool) -> list[Path]:
    """Plan and solve ``stores`` into catalogues ``outs`` on ``client`` (None: in this process)."""
    from eigenfarm.farm import solvejob
    from eigenfarm.farm.runner import runner_for
    from eigenfarm.solve.slicer import IncompleteSlice

    runner = runner_for(client)
    notice = lambda text: print(text, file=sys.stderr, flush=True)  # noqa: E731
    jobs = []
    try:
        for store, out in zip(stores, outs):
            jobs.append(solvejob.prepare(runner, store, out, request, overwrite, notice))
            plan = jobs[-1].plan
            _say(f"{store}: {plan.expected} modes in {len(plan.slices)} slices "
                 f"({plan.n_zero} zero modes, {plan.n_negative} negative)")
        return solvejob.run(runner, jobs, request, overwrite, ProgressBar())
    except IncompleteSlice as exc:
        raise InputError(f"{exc}; finished slices are kept, rerun the same command to resume") from None
    except Exception as exc:
        if type(exc).__name__ in {"KilledWorker", "FutureCancelledError", "CommClosedError"}:
            raise InputError(f"the cluster lost a task ({type(exc).__name__}: {exc}); finished slices are "
                             "kept in the .work folder, rerun the same command to resume") from None
        raise


def _solve_on(args, outs, request, client) -> list[Path]:
    """The dask job (``client``; None: in this process), each store an MPI job of its own with --ranks."""
    if args.ranks:
        from eigenfarm.farm import mpilaunch
        from eigenfarm.farm.runner import runner_for

        return mpilaunch.solve_stores(runner_for(client), args.stores, outs, request, args.ranks, args.overwrite,
                                      ProgressBar())
    return solve_stores(args.stores, outs, request, client, args.overwrite)


def run_solve(args) -> None:
    from eigenfarm.catalogue import open_catalogue
    from eigenfarm.farm import mpijob

    request = _request(args)
    outs = _catalogue_paths(args.stores, args.out)
    if not args.ranks and mpijob.runs_here(request):  # this process is a rank of an MPI job
        notice = lambda text: print(text, file=sys.stderr, flush=True)  # noqa: E731
        paths = mpijob.solve_stores(args.stores, outs, request, args.overwrite, notice, ProgressBar())
    elif args.inline:
        paths = _solve_on(args, outs, request, None)
    else:
        with _client(args) as client:
            _announce(client)
            paths = _solve_on(args, outs, request, client)
    for path in paths:
        _say(open_catalogue(path).summary())


def run_modes(args) -> None:
    from eigenfarm.catalogue import open_catalogue

    for path in args.catalogue:
        _say(open_catalogue(path).summary())


def run_density(args) -> Path:
    """KPM density of states of one store into the folder --out (eigenfarm.analysis.kpm)."""
    from eigenfarm.analysis.kpm import check_settings, estimate_density
    from eigenfarm.analysis.kpm_report import is_density_folder, write_density
    from eigenfarm.store import open_store
    from eigenfarm.store.atomic import check_destination

    check_settings(args.moments, args.probes)
    store = open_store(args.store)
    check_destination(args.out, args.overwrite, is_density_folder, "density folder")  # refuse before the work
    settings = dict(moments=args.moments, probes=args.probes, seed=args.seed, progress=ProgressBar())
    if args.inline:
        estimate = estimate_density(store, client=None, **settings)
    else:
        with _client(args) as client:
            _announce(client)
            estimate = estimate_density(store, client=client, **settings)
    path = write_density(estimate, args.out, args.overwrite)
    _say((path / "density.md").read_text())
    return path


def analysis_settings(args):
    """The analysis Settings from ``eigenfarm analyze`` options."""
    from eigenfarm.analysis.ensemble import Settings
    from eigenfarm.analysis.phonons import ClassRule

    return Settings(shells=args.shells, chunk_modes=args.chunk_modes, bins=args.bins,
                    rule=ClassRule(args.phonon_weight, args.local_participation), tail_below=args.tail_below,
                    tail_above=args.tail_above, fixed_exponent=args.fixed_exponent,
                    store_bands=not args.catalogue_bands_only, bootstrap=args.bootstrap,
                    confidence=args.confidence, seed=args.seed)


def analyze_catalogues(paths: list, out, settings, overwrite: bool = False) -> Path:
    """Analyse the catalogues ``paths`` and write the report folder ``out``; prints where it is."""
    from eigenfarm.analysis.ensemble import analyse
    from eigenfarm.report import check_report_destination, write_report

    check_report_destination(out, overwrite)  # refuse before the work
    analysis = analyse([str(p) for p in paths], settings, progress=ProgressBar())
    path = write_report(analysis, out, [str(p) for p in paths], overwrite)
    for note in analysis.notes:
        _say(f"note: {note}")
    _say(f"report: {path / 'summary.html'} (also summary.md, tables *.csv, figures *.png/*.svg)")
    return path


def run_analyze(args) -> Path:
    """Tables, plots and the summary page of one or more catalogues (eigenfarm.analysis, eigenfarm.report)."""
    return analyze_catalogues(args.catalogue, args.out, analysis_settings(args), args.overwrite)


def run_gauge(args) -> Path:
    """Solver settings tried on one store (eigenfarm.trials), with dense and eigsh references."""
    from eigenfarm.solve.backends import get_backend
    from eigenfarm.trials.grid import expand
    from eigenfarm.trials.run import check_gauge_destination, gauge

    for name in args.backends:
        get_backend(name)  # unknown or uninstalled backends fail before any run
    if min(args.workers) < 0 or min(args.slice_modes) < 1 or any(v is not None and v < 2 for v in args.ncv):
        raise InputError("--workers must be ≥ 0, --slice-modes ≥ 1 and --ncv ≥ 2")
    references = [r for r in args.references if r != "none"]
    unknown = sorted(set(references) - {"dense", "eigsh"})
    if unknown:
        raise InputError(f"--references: unknown {', '.join(unknown)} (choose dense, eigsh or none)")
    if "eigsh" in references and args.window:
        raise InputError("--references eigsh needs --lowest (scipy's eigsh has no window mode)")
    check_gauge_destination(args.out, args.overwrite)
    window = _window(args.window) if args.window else None
    methods = [None if m == "default" else m for m in args.slice_methods]
    unknown = sorted({m for m in methods if m is not None} - {"krylov-schur", "interval", "lanczos"})
    if unknown or min(args.ranks) < 1:
        raise InputError(f"--slice-methods: unknown {', '.join(unknown)}" if unknown else "--ranks must be ≥ 1")
    trials = expand(args.backends, args.slice_modes, args.ncv, args.tol, args.workers, args.ranks, methods)
    if not trials:
        raise InputError("no setting to try: --ranks above 1 and --slice-methods need --backends slepc")
    path = gauge(args.store, args.out, trials, references, args.lowest, window,
                 args.overwrite, progress=_say)
    _say((path / "gauge.md").read_text())
    return path


def run_demo(args) -> None:
    """The main job on the built-in scenario: an ensemble of glasses → Hessian stores → the lowest modes
    of every sample in one ensemble solve → mode catalogues."""
    from eigenfarm.analysis.ensemble import Settings
    from eigenfarm.catalogue import open_catalogue
    from eigenfarm.farm.solvejob import SolveRequest
    from eigenfarm.samples.ensemble import make_ensemble
    from eigenfarm.samples.prepare import Recipe
    from eigenfarm.samples.scenario import demo_potential
    from eigenfarm.store import build_store, open_store
    from eigenfarm.structure.xyz import read_xyz

    out = Path(args.out)
    recipe = Recipe(args.atoms)
    _say(f"eigenfarm demo: {args.samples} samples of {args.atoms} atoms of the binary soft-sphere glass "
         f"(instant quench from random positions, FIRE to max|F| < {recipe.fmax:g}), seed {args.seed}; "
         f"the lowest {args.lowest} modes of each")
    with _client(args) as client:
        _announce(client)
        paths = make_ensemble(recipe, args.seed, args.samples, out / "samples", client, progress=ProgressBar())
        potential = demo_potential()
        (out / "hessians").mkdir(exist_ok=True)
        stores = [out / "hessians" / (path.stem + ".zarr") for path in paths]
        for path, store in zip(paths, stores):
            if store.exists():
                _say(f"{store}: exists, kept")
                continue
            build_store(read_xyz(path), potential, store, client=client, progress=ProgressBar(), source_file=path)
        _say(open_store(stores[0]).summary())
        (out / "modes").mkdir(exist_ok=True)
        catalogues = [out / "modes" / (path.stem + ".modes.zarr") for path in paths]
        todo = [(s, c) for s, c in zip(stores, catalogues) if not c.exists()]
        if todo:
            solve_stores([str(s) for s, _ in todo], [c for _, c in todo], SolveRequest(lowest=args.lowest),
                         client, overwrite=False)
    for catalogue in catalogues:
        _say(open_catalogue(catalogue).summary())
    report = analyze_catalogues(catalogues, out / "report", Settings(), overwrite=True)
    _say(f"demo finished: samples in {out / 'samples'}, Hessian stores in {out / 'hessians'}, "
         f"mode catalogues in {out / 'modes'}, report in {report}")
