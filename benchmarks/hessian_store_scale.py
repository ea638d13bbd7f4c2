"""Benchmark: writing the Hessian store of a large disordered sample with 2 dask workers.

Sample: an FCC lattice at number density 1.2 (reduced units; glass density of Lennard-Jones-like
liquids) with Gaussian random displacements (0.06 σ per component), soft spheres
φ = ε(σ/r)¹² smoothed to zero at rc = 1.3 σ (between the first shell at 1.06 σ and the second at 1.49 σ,
~12 neighbours).  No minimisation: the store does not need a mechanically stable configuration.

Measured, each in a fresh subprocess so peaks do not mix:

* ``store``: :func:`eigenfarm.store.build_store` on a local cluster of ``--workers`` single-threaded
  workers: wall time, and peak memory = the largest sum of resident set sizes of this process and all
  its children (nanny and worker processes), sampled every 0.2 s with psutil (shared library pages are
  counted once per process, so this overstates slightly); then one streamed H·x on the same cluster.
* ``baseline``: what a user would otherwise run: :meth:`Potential.hessian` (one process, whole matrix
  as scipy BSR): wall time and peak resident memory (getrusage).

Usage:  python benchmarks/hessian_store_scale.py --atoms 1000000 [--workers 2] [--skip-baseline]
Results go to benchmarks/results/hessian_store_scale-<atoms>.{json,md}.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from result_files import write_results

import numpy as np

DENSITY, JITTER, RC = 1.2, 0.06, 1.3


def make_sample(n_atoms: int, seed: int = 7):
    """The jittered FCC sample with about ``n_atoms`` atoms (4 per cubic cell) and its potential."""
    from eigenfarm.potentials.base import Potential
    from eigenfarm.potentials.pair import PairTerm
    from eigenfarm.structure.box import Box
    from eigenfarm.structure.configuration import Configuration

    cells = max(1, round((n_atoms / 4) ** (1 / 3)))
    a = (4 / DENSITY) ** (1 / 3)
    basis = np.array([[0, 0, 0], [0.5, 0.5, 0], [0.5, 0, 0.5], [0, 0.5, 0.5]])
    grid = np.stack(np.meshgrid(*[np.arange(cells)] * 3, indexing="ij"), -1).reshape(-1, 1, 3)
    positions = ((grid + basis) * a).reshape(-1, 3)
    positions += np.random.default_rng(seed).normal(scale=JITTER, size=positions.shape)
    box = Box.cubic(cells * a)
    config = Configuration(box.wrap(positions), np.full(len(positions), "A"), box, "reduced",
                           source=f"jittered FCC, {len(positions)} atoms")
    term = PairTerm("ipl", ["A"], {("A", "A"): {"eps": 1.0, "sigma": 1.0, "n": 12, "rc": RC}})
    return config, Potential(["A"], [term], name="soft spheres", parameters={"n": 12, "rc": RC})


class TreeMemory:
    """Peak of the summed RSS of this process and all its descendants, sampled in a thread."""

    def __init__(self, interval: float = 0.2):
        import psutil

        self.me, self.interval, self.peak, self.peak_one = psutil.Process(), interval, 0, 0
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)

    def _sample(self):
        total = 0
        for proc in [self.me] + self.me.children(recursive=True):
            try:
                rss = proc.memory_info().rss
            except Exception:  # a process may exit between listing and reading
                continue
            total += rss
            self.peak_one = max(self.peak_one, rss)
        self.peak = max(self.peak, total)

    def _run(self):
        while not self.stop.is_set():
            self._sample()
            self.stop.wait(self.interval)

    def __enter__(self):
        self.thread.start()
        return self

    def __exit__(self, *exc):
        self.stop.set()
        self.thread.join()
        self._sample()


def run_store(n_atoms: int, workers: int, shard_atoms: int | None, scratch: Path) -> dict:
    from eigenfarm.farm.cluster import open_client
    from eigenfarm.store import build_store, open_store
    from eigenfarm.store.summary import disk_bytes

    t0 = time.perf_counter()
    config, potential = make_sample(n_atoms)
    sample_s = time.perf_counter() - t0
    out = scratch / "H.zarr"
    stages: dict[str, float] = {}

    def progress(stage, done, total):
        if done == total:
            stages[stage] = time.perf_counter() - started

    with TreeMemory() as memory, open_client(workers=workers) as client:
        started = time.perf_counter()
        summary = build_store(config, potential, out, shard_atoms=shard_atoms, client=client,
                              progress=progress)
        build_s = time.perf_counter() - started
        store = open_store(out)
        x = np.random.default_rng(1).normal(size=3 * store.n_atoms)
        t1 = time.perf_counter()
        store.matvec(x, client)
        matvec_s = time.perf_counter() - t1
    return {"atoms": config.n_atoms, "sample_seconds": sample_s, "build_seconds": build_s,
            "stage_finished_at": stages, "matvec_seconds": matvec_s, "n_shards": summary["n_shards"],
            "n_blocks": summary["n_blocks"], "nnz": summary["nnz"], "disk_bytes": disk_bytes(out),
            "digest": summary["digest"], "passed": summary["validation"]["passed"],
            "sum_rule": summary["validation"]["checks"]["sum_rule"]["value"],
            "symmetry": summary["validation"]["checks"]["symmetry"]["value"],
            "peak_rss_sum_bytes": memory.peak, "peak_rss_one_process_bytes": memory.peak_one}


def run_baseline(n_atoms: int) -> dict:
    t0 = time.perf_counter()
    config, potential = make_sample(n_atoms)
    t1 = time.perf_counter()
    matrix = potential.hessian(config)
    seconds = time.perf_counter() - t1
    return {"atoms": config.n_atoms, "sample_seconds": t1 - t0, "hessian_seconds": seconds,
            "nnz": int(matrix.nnz), "matrix_bytes": int(matrix.data.nbytes + matrix.indices.nbytes
                                                        + matrix.indptr.nbytes),
            "peak_rss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}


def _child(mode: str, args) -> dict:
    """Run one measurement in a fresh interpreter; its JSON result comes back on stdout."""
    cmd = [sys.executable, __file__, "--child", mode, "--atoms", str(args.atoms), "--workers", str(args.workers),
           "--scratch", str(args.scratch)] + (["--shard-atoms", str(args.shard_atoms)] if args.shard_atoms else [])
    done = subprocess.run(cmd, capture_output=True, text=True)
    if done.returncode:
        return {"failed": True, "returncode": done.returncode, "stderr": done.stderr[-2000:]}
    return json.loads(done.stdout.strip().splitlines()[-1])


def _gib(n) -> str:
    return f"{n / 2**30:.2f} GiB"


def markdown(result: dict) -> str:
    s, b = result["store"], result.get("baseline")
    lines = [f"# Hessian store at {s['atoms']:,} atoms ({result['workers']} workers)", "",
             f"Machine: {result['machine']}  ", f"Date: {result['date']}", "",
             "| | store (build_store, dask) | single process (Potential.hessian → BSR) |",
             "|---|---|---|"]
    if b and not b.get("failed"):
        base = (f"{b['hessian_seconds']:.1f} s", _gib(b["peak_rss_bytes"]), f"{b['nnz']:,}",
                f"{_gib(b['matrix_bytes'])} in memory, nothing on disk")
    else:
        base = ("not run" if not b else f"failed: {b.get('stderr', '')[-200:]!r}",) + ("",) * 3
    lines += [f"| wall time | {s['build_seconds']:.1f} s | {base[0]} |",
              f"| peak memory | {_gib(s['peak_rss_sum_bytes'])} (sum of client + workers; largest process "
              f"{_gib(s['peak_rss_one_process_bytes'])}) | {base[1]} |",
              f"| nnz | {s['nnz']:,} ({s['n_blocks']:,} blocks, {s['n_shards']} shards) | {base[2]} |",
              f"| result | {_gib(s['disk_bytes'])} on disk, validated ({'passed' if s['passed'] else 'FAILED'}) "
              f"| {base[3]} |", "",
              f"Stages finished at (s after start): {json.dumps({k: round(v, 1) for k, v in s['stage_finished_at'].items()})}; "
              f"one streamed H·x on the cluster: {s['matvec_seconds']:.1f} s; sample generation "
              f"{s['sample_seconds']:.1f} s (not included).  Sum rule {s['sum_rule']:.2g}, symmetry {s['symmetry']:.2g}.",
              f"Digest {s['digest']}."]
    return "\n".join(lines) + "\n"


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--atoms", type=int, default=1_000_000)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--shard-atoms", type=int, default=None)
    parser.add_argument("--skip-baseline", action="store_true")
    parser.add_argument("--scratch", type=Path, default=None, help="directory for the store (deleted after)")
    parser.add_argument("--child", choices=["store", "baseline"], help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child == "store":
        print(json.dumps(run_store(args.atoms, args.workers, args.shard_atoms, args.scratch)))
        return
    if args.child == "baseline":
        print(json.dumps(run_baseline(args.atoms)))
        return
    own_scratch = args.scratch is None
    args.scratch = Path(tempfile.mkdtemp(prefix="eigenfarm-bench-")) if own_scratch else args.scratch
    try:
        result = {"workers": args.workers, "date": time.strftime("%Y-%m-%d %H:%M"),
                  "machine": f"{os.cpu_count()} cores, {platform.machine()}, "
                             f"{os.sysconf('SC_PAGE_SIZE') * os.sysconf('SC_PHYS_PAGES') / 2**30:.0f} GiB",
                  "store": _child("store", args)}
        if result["store"].get("failed"):
            sys.exit(f"store run failed:\n{result['store']['stderr']}")
        result["baseline"] = None if args.skip_baseline else _child("baseline", args)
    finally:
        if own_scratch:
            shutil.rmtree(args.scratch, ignore_errors=True)
    write_results(f"hessian_store_scale-{args.atoms}", result, markdown(result))


if __name__ == "__main__":
    main()
