"""What a user would run without eigenfarm, as a child process of ``eigenfarm gauge``.

``python -m eigenfarm.trials.reference METHOD STORE OUT.json (--lowest K | --window LO:HI)``:

- ``dense``: numpy.linalg.eigh of the dense dynamical matrix D = M^-½ H M^-½ (LAPACK), every mode;
- ``eigsh``: one call ``scipy.sparse.linalg.eigsh(H, k=K + 3, M=M, sigma=σ)`` with σ just below zero
  (SuperLU with scipy's default ordering), the lowest K + 3 (the 3 trivial zero modes included) —
  ``--lowest`` only, scipy has no window mode.

Writes {"eigenvalues": [...]} (the requested non-zero modes, ascending, in the store's λ units).
"""

from __future__ import annotations

import argparse
import json

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from eigenfarm.solve.dynamical import dynamical_matrix
from eigenfarm.store import open_store

#: |λ| ≤ ZERO_TOL·λ_max counts as a zero mode (the solve command's default)
ZERO_TOL = 1e-8


def _select(values: np.ndarray, lowest: int | None, window, units) -> np.ndarray:
    values = np.sort(values)
    nonzero = values[values > ZERO_TOL * np.abs(values).max()]
    if lowest is not None:
        return nonzero[:lowest]
    lo, hi = units.eigenvalue(np.asarray(window, dtype=float))
    return nonzero[(nonzero > lo) & (nonzero <= hi)]


def dense(store, lowest, window) -> np.ndarray:
    D = dynamical_matrix(store.matrix("csr"), store.masses).toarray()
    values, _ = np.linalg.eigh(D)
    return _select(values, lowest, window, store.units)


def plain_eigsh(store, lowest, window) -> np.ndarray:
    if lowest is None:
        raise SystemExit("eigsh reference: only --lowest (scipy's eigsh has no window mode)")
    H = store.matrix("csr").tocsc()
    M = sp.diags(np.repeat(store.masses, 3)).tocsc()
    scale = float(sla.eigsh(H, k=1, M=M, which="LA", return_eigenvectors=False)[0])
    values = sla.eigsh(H, k=lowest + 3, M=M, sigma=-1e-6 * scale, return_eigenvectors=True)[0]
    return _select(values, lowest, None, store.units)


METHODS = {"dense": dense, "eigsh": plain_eigsh}


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(prog="eigenfarm.trials.reference")
    parser.add_argument("method", choices=sorted(METHODS))
    parser.add_argument("store")
    parser.add_argument("out")
    parser.add_argument("--lowest", type=int)
    parser.add_argument("--window", nargs=2, type=float)
    args = parser.parse_args(argv)
    values = METHODS[args.method](open_store(args.store), args.lowest, args.window)
    with open(args.out, "w") as handle:
        json.dump({"eigenvalues": values.tolist()}, handle)


if __name__ == "__main__":
    main()
