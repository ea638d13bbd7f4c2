"""Ensembles of demo glasses, one sample per dask task, each file written as soon as it is done.

Files are ``OUT/sample-NNN.xyz``.  A rerun of the same ensemble keeps sample files that already hold
the same recipe (resumable); a file that holds something else is an error unless ``overwrite``.
"""

from __future__ import annotations

from dataclasses import asdict
from pathlib import Path

from eigenfarm.errors import InputError
from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.structure.xyz import read_xyz, write_xyz


def sample_path(out: Path, sample: int) -> Path:
    return Path(out) / f"sample-{sample:03d}.xyz"


def _matches(path: Path, recipe: Recipe, seed: int, sample: int) -> bool:
    info = read_xyz(path).info
    stamp = recipe_stamp(recipe, seed, sample)
    return all(str(info.get(k)) == str(v) for k, v in stamp.items())


def recipe_stamp(recipe: Recipe, seed: int, sample: int) -> dict:
    """What identifies a sample: seed, index and every recipe field (written into the XYZ comment line)."""
    return {"seed": seed, "sample": sample, **{f"recipe_{k}": v for k, v in asdict(recipe).items()}}


def _make_and_write(recipe: Recipe, seed: int, sample: int, path: str) -> str:
    config = make_sample(recipe, seed, sample)
    config.info.update(recipe_stamp(recipe, seed, sample))
    write_xyz(path, config, overwrite=True)
    return path


def make_ensemble(recipe: Recipe, seed: int, samples: int, out, client=None, overwrite: bool = False,
                  progress=None) -> list[Path]:
    """Make ``samples`` glasses of ``recipe`` under folder ``out``; returns their paths in order.

    ``client``: a distributed.Client (one task per sample) or None (in this process).
    ``progress(stage, done, total)`` is called as samples finish.
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    paths = [sample_path(out, k) for k in range(samples)]
    todo = []
    for k, path in enumerate(paths):
        if path.exists() and not overwrite:
            if not _matches(path, recipe, seed, k):
                raise InputError(f"{path}: exists and holds a different sample (pass --overwrite to replace it)")
            continue
        todo.append(k)
    done = samples - len(todo)
    if progress:
        progress("glasses", done, samples)
    if client is None:
        for k in todo:
            _make_and_write(recipe, seed, k, str(paths[k]))
            done += 1
            if progress:
                progress("glasses", done, samples)
        return paths
    from distributed import as_completed

    futures = [client.submit(_make_and_write, recipe, seed, k, str(paths[k]), pure=False) for k in todo]
    for future in as_completed(futures):
        future.result()
        done += 1
        if progress:
            progress("glasses", done, samples)
    return paths
