"""Benchmark: the KPM density of states of a large store, in one process and on dask, with and without
the workers' shard cache.

Sample: the jittered FCC soft-sphere solid of hessian_store_scale.py (~12 neighbours per atom), built
into a store with 2 dask workers (not timed here).  Measured on that store:

* ``inline``: :func:`eigenfarm.analysis.kpm.estimate_density` in this process (LocalRunner);
* ``dask``: the same on a local cluster of ``--workers`` workers, checked to give identical moments;
* ``dask, no cache``: the first ``--short-moments`` moments with ``cache_bytes=0`` (every product
  rereads and decompresses every shard), for the time per product against the cached run
  (``--short-moments 0`` skips it).

Time per product = Chebyshev stage time / (M/2) (two moments per product).  Peak memory: the largest sum
of resident set sizes over this process and its children (TreeMemory of hessian_store_scale.py).

Usage:  python benchmarks/kpm_density.py [--atoms 100000] [--moments 512] [--probes 16] [--workers 2]
Results go to benchmarks/results/kpm_density-<atoms>.{json,md}.
"""

from __future__ import annotations

import argparse
import os
import platform
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np
from hessian_store_scale import TreeMemory, make_sample
from result_files import write_results


def _cache_probe(client, held: dict):
    """A progress callback that records the shard caches' size once the moments stage has started."""
    from eigenfarm.analysis import shardcache

    def progress(stage, done, total):
        if stage == "Chebyshev moments" and done == 1:
            stats = [shardcache.stats()] if client is None else list(client.run(shardcache.stats).values())
            held.update(bytes=sum(s["bytes"] for s in stats), entries=sum(s["entries"] for s in stats))
    return progress


def measure(store, settings: dict, client=None, cache_bytes=None) -> dict:
    from eigenfarm.analysis.kpm import estimate_density

    held: dict = {}
    with TreeMemory() as memory:
        started = time.perf_counter()
        estimate = estimate_density(store, client=client, progress=_cache_probe(client, held),
                                    cache_bytes=cache_bytes, **settings)
        wall = time.perf_counter() - started
    products = settings["moments"] // 2
    return {"wall_seconds": wall, "stages": estimate.seconds, "products": products,
            "seconds_per_product": estimate.seconds["Chebyshev moments"] / products,
            "peak_rss_sum_bytes": memory.peak, "cache": held, "estimate": estimate}


def run(args) -> dict:
    from eigenfarm.farm.cluster import open_client
    from eigenfarm.store import build_store, open_store

    config, potential = make_sample(args.atoms)
    path = args.scratch / "H.zarr"
    with open_client(workers=2) as client:
        build_store(config, potential, path, client=client)
    store = open_store(path)
    settings = {"moments": args.moments, "probes": args.probes, "seed": 1}
    short = dict(settings, moments=args.short_moments)
    inline = measure(store, settings)
    with open_client(workers=args.workers) as client:
        farmed = measure(store, settings, client)
        uncached = measure(store, short, client, cache_bytes=0) if args.short_moments else None
    identical = bool(np.array_equal(inline["estimate"].probe_moments, farmed["estimate"].probe_moments))
    estimate = inline.pop("estimate")
    for run in (farmed, uncached or {}):
        run.pop("estimate", None)
    lo, hi = estimate.frequency_range()
    return {"atoms": store.n_atoms, "n_shards": store.n_shards, "workers": args.workers, **settings,
            "short_moments": args.short_moments, "inline": inline, "dask": farmed, "dask_no_cache": uncached,
            "identical_inline_and_dask": identical, "frequency_range": [lo, hi],
            "resolution_mid": float(estimate.resolution(estimate.units.frequency(
                (estimate.bounds.lo + estimate.bounds.hi) / 2))[0]),
            "machine": f"{len(os.sched_getaffinity(0))} cores, {platform.machine()}",
            "date": time.strftime("%Y-%m-%d %H:%M")}


def _gib(n) -> str:
    return f"{n / 2**30:.2f} GiB"


def markdown(r: dict) -> str:
    rows = [("one process (inline)", r["inline"]), (f"dask, {r['workers']} workers", r["dask"])]
    if r["dask_no_cache"]:
        name = f"dask, {r['workers']} workers, no shard cache ({r['short_moments']} moments)"
        rows.append((name, r["dask_no_cache"]))
    lines = [f"# KPM density of states at {r['atoms']:,} atoms ({r['n_shards']} shards)", "",
             f"Machine: {r['machine']}  ", f"Date: {r['date']}  ",
             f"Settings: {r['moments']} moments, {r['probes']} probes (X is 3N × {r['probes']}), "
             f"seed {r['seed']}", "",
             "| run | wall | read shards | bounds (Lanczos) | moments | per product D·X | peak memory (sum) "
             "| shard cache held |",
             "|---|---|---|---|---|---|---|---|"]
    for name, m in rows:
        st = m["stages"]
        lines.append(f"| {name} | {m['wall_seconds']:.1f} s | {st['read shards']:.1f} s "
                     f"| {st['spectral bounds']:.1f} s | {st['Chebyshev moments']:.1f} s "
                     f"| {m['seconds_per_product']:.2f} s | {_gib(m['peak_rss_sum_bytes'])} "
                     f"| {_gib(m['cache'].get('bytes', 0))} in {m['cache'].get('entries', 0)} entries |")
    lines += ["", f"Inline and dask moments identical: {r['identical_inline_and_dask']}.  Spectrum "
              f"f ∈ [{r['frequency_range'][0]:.3g}, {r['frequency_range'][1]:.3g}]; kernel width mid-spectrum "
              f"σ_λ = {r['resolution_mid']:.3g}."]
    return "\n".join(lines) + "\n"


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--atoms", type=int, default=100_000)
    parser.add_argument("--moments", type=int, default=512)
    parser.add_argument("--short-moments", type=int, default=32, help="moments of the uncached run (0: skip it)")
    parser.add_argument("--probes", type=int, default=16)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args(argv)
    args.scratch = Path(tempfile.mkdtemp(prefix="eigenfarm-kpm-"))
    try:
        result = run(args)
    finally:
        shutil.rmtree(args.scratch, ignore_errors=True)
    write_results(f"kpm_density-{result['atoms']}", result, markdown(result))


if __name__ == "__main__":
    main()
