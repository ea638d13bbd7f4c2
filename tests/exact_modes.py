"""Catalogues with exactly known modes for the analysis and report tests: dense LAPACK (numpy.linalg.eigh) on the
mass-weighted Hessian of a small sample, written through the real merge path (work folder → catalogue)."""

from __future__ import annotations

import numpy as np

from eigenfarm.catalogue import WorkFolder, write_catalogue
from eigenfarm.catalogue.geometry import Geometry
from eigenfarm.plan.slicing import Plan, Slice
from eigenfarm.solve.dynamical import dynamical_matrix

ZERO_TOL = 1e-8


def exact_catalogue(out, config, potential, keep: int | None = None):
    """Write the catalogue of every non-zero mode of ``config`` (or the lowest ``keep``) at ``out``;
    returns (path, eigenvalues (3N,), eigenvectors (3N, 3N) columns) of the whole spectrum."""
    D = dynamical_matrix(potential.hessian(config), config.masses).toarray()
    w, U = np.linalg.eigh(D)
    scale = float(w[-1])
    tau = ZERO_TOL * scale
    n_zero = int(np.count_nonzero(np.abs(w) <= tau))
    inside = w > tau
    hi = scale * (1 + 1e-9)
    piece = Slice(0, tau, hi, int(inside.sum()))
    plan = Plan(tau, hi, [piece], scale, ZERO_TOL, 0, n_zero, n_zero, {"window": "all"}, keep=keep)
    work = WorkFolder(out, {"test": str(out)})
    work.save_plan(plan)
    res = np.linalg.norm(D @ U[:, inside] - U[:, inside] * w[inside], axis=0) / scale
    work.save_part(0, w[inside], U[:, inside], res, {"index": 0, "found": int(inside.sum())})
    info = {"units": config.units.name, "hessian_digest": "test", "n_atoms": config.n_atoms,
            "trivial_zero_modes": 3, "preparation": dict(config.info) or None}
    path = write_catalogue(out, work, plan, info, geometry=Geometry(config.masses, config.positions, config.box))
    return path, w, U
