"""Stitching slice parts into one eigenvalue-ordered stream of modes, part by part.

Parts arrive in slice order.  Slice k covers lo_k < λ ≤ hi_k; its modes beyond its *reach*
(lo_k − τ, hi_k + τ] belong to another slice and are dropped (counted as ``outside``).  The modes of the
new part are merged with the modes held back from the previous ones, clusters spanning slices are
resolved (:mod:`eigenfarm.catalogue.clusters`), and everything that no later part can touch — below
hi_k − 2τ, and not chained within τ to anything above — is emitted.  So at most one part (memory-mapped)
and the few modes within ~2τ of its upper end are in memory at a time (a run of modes chained within τ
is held whole: τ must stay well below the mode spacing, as the default 10⁻⁹ λ_max does).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from eigenfarm.catalogue.clusters import resolve, runs
from eigenfarm.catalogue.parts import Part
from eigenfarm.plan.slicing import Slice

#: emit(eigenvalues (b,), residuals (b,), slices (b,), vectors (b, n)) — ascending eigenvalues
Sink = Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], None]


@dataclass
class _Held:
    """Modes kept in memory between parts: eigenvalues, residuals, slices, recombined (h,) — the last
    true for modes made by Rayleigh–Ritz — and vectors (h, n)."""

    eigenvalues: np.ndarray
    residuals: np.ndarray
    slices: np.ndarray
    recombined: np.ndarray
    vectors: np.ndarray

    @classmethod
    def empty(cls, n_dof: int) -> "_Held":
        return cls(np.zeros(0), np.zeros(0), np.zeros(0, np.int64), np.zeros(0, bool), np.zeros((0, n_dof)))


class _Candidates:
    """The held modes followed by a part's modes in its reach, addressed by one raw index."""

    def __init__(self, held: _Held, part: Part, columns: np.ndarray):
        self.held, self.part, self.columns = held, part, columns
        self.q = len(held.eigenvalues)
        self.eigenvalues = np.concatenate([held.eigenvalues, part.eigenvalues[columns]])
        self.residuals = np.concatenate([held.residuals, part.residuals[columns]])
        self.slices = np.concatenate([held.slices, np.full(len(columns), part.index, dtype=np.int64)])
        self.recombined = np.concatenate([held.recombined, np.zeros(len(columns), bool)])

    def rows(self, raw: np.ndarray) -> np.ndarray:
        """Vectors (len(raw), n) of the candidates with raw indices ``raw``."""
        out = np.empty((len(raw), self.held.vectors.shape[1]))
        mine = raw < self.q
        out[mine] = self.held.vectors[raw[mine]]
        if not mine.all():
            out[~mine] = self.part.vectors[:, self.columns[raw[~mine] - self.q]].T
        return out


class Stitcher:
    """Feed parts in slice order with :meth:`add`, then :meth:`close`; modes go to ``emit`` in
    ascending eigenvalue order, ``block`` at a time.

    ``slices``: the plan's slices (ascending, disjoint); ``n_dof``: vector length; ``scale``: λ_max
    (residuals are relative to it); ``tol``: τ in λ units, eigenvalues closer than this may be one level.
    After :meth:`close`, ``records[k]`` counts slice k's ``returned``, ``outside`` and ``duplicates``
    modes, and ``recombined`` the modes made by Rayleigh–Ritz across slices.
    """

    def __init__(self, slices: list[Slice], n_dof: int, scale: float, tol: float, emit: Sink, block: int):
        self.slices, self.n_dof, self.scale, self.tol = slices, n_dof, scale, tol
        self.emit, self.block = emit, max(1, int(block))
        self.held = _Held.empty(n_dof)
        self.records = {s.index: {"returned": 0, "outside": 0, "duplicates": 0} for s in slices}
        self.recombined = 0
        self._next = 0

    def add(self, part: Part) -> None:
        """Merge slice ``part.index`` (must be the next slice of the plan)."""
        piece = self.slices[self._next] if self._next < len(self.slices) else None
        if piece is None or part.index != piece.index:
            raise ValueError(f"parts must come in slice order: expected slice "
                             f"{piece.index if piece else 'none'}, got {part.index}")
        if part.vectors.shape[0] != self.n_dof:
            raise ValueError(f"slice {part.index}: vectors have {part.vectors.shape[0]} rows, "
                             f"the system has {self.n_dof} dofs")
        self._next += 1
        lam = part.eigenvalues
        reach = np.flatnonzero((lam > piece.lo - self.tol) & (lam <= piece.hi + self.tol))
        columns = reach[np.argsort(lam[reach], kind="stable")]
        self.records[piece.index].update(returned=int(len(lam)), outside=int(len(lam) - len(columns)))
        merged = self._merge(_Candidates(self.held, part, columns))
        self._emit_below(merged, piece.hi - 2 * self.tol)

    def close(self) -> None:
        """Emit the modes still held back."""
        h = self.held
        self._send(h.eigenvalues, h.residuals, h.slices, h.recombined, lambda a, b: h.vectors[a:b],
                   len(h.eigenvalues))
        self.held = _Held.empty(self.n_dof)

    def _send(self, lam, res, slc, mixed, fetch, stop: int) -> None:
        """Emit modes 0 … stop−1 of the given arrays in blocks; ``fetch(a, b)`` gives their vectors."""
        for start in range(0, stop, self.block):
            end = min(start + self.block, stop)
            self.recombined += int(np.count_nonzero(mixed[start:end]))
            self.emit(lam[start:end], res[start:end], slc[start:end], fetch(start, end))

    def _merge(self, cand: _Candidates):
        """Resolve the clusters that span slices; returns (cand, [eigenvalues, residuals, slices,
        recombined, refs] sorted by eigenvalue, replacements): refs ≥ 0 are raw candidate indices, refs < 0
        rows −1−ref of ``replacements`` (r, n), the vectors made by Rayleigh–Ritz."""
        order = np.argsort(cand.eigenvalues, kind="stable")
        lam, slc = cand.eigenvalues[order], cand.slices[order]
        pieces, replacements, done = [], [], 0

        def unchanged(a, b):
            raw = order[a:b]
            return cand.eigenvalues[raw], cand.residuals[raw], cand.slices[raw], cand.recombined[raw], raw

        for a, b in runs(lam, self.tol):
            if slc[a:b].min() == slc[a:b].max():
                continue
            members = order[a:b]
            pieces.append(unchanged(done, a))
            r = resolve(cand.eigenvalues[members], cand.residuals[members], cand.slices[members],
                        cand.rows(members), self.scale)
            for d in r.dropped:
                self.records[int(cand.slices[members[d]])]["duplicates"] += 1
            if r.vectors is None:
                refs, mixed = members[r.kept], cand.recombined[members[r.kept]]
            else:
                refs = -1 - (sum(len(x) for x in replacements) + np.arange(len(r.eigenvalues)))
                replacements.append(r.vectors)
                mixed = np.ones(len(refs), bool)
            pieces.append((r.eigenvalues, r.residuals, r.slices, mixed, refs))
            done = b
        pieces.append(unchanged(done, len(lam)))
        out = [np.concatenate([p[i] for p in pieces]) for i in range(5)]
        resort = np.argsort(out[0], kind="stable")
        extra = np.concatenate(replacements) if replacements else np.zeros((0, self.n_dof))
        return cand, [x[resort] for x in out], extra

    def _vectors(self, cand: _Candidates, refs: np.ndarray, extra: np.ndarray) -> np.ndarray:
        out = np.empty((len(refs), self.n_dof))
        raw = refs >= 0
        out[raw] = cand.rows(refs[raw])
        out[~raw] = extra[-1 - refs[~raw]]
        return out

    def _emit_below(self, merged, threshold: float) -> None:
        """Emit merged modes below ``threshold`` (and not chained within τ above it); hold the rest."""
        cand, (lam, res, slc, mixed, refs), extra = merged
        cut = int(np.searchsorted(lam, threshold, side="left"))
        while 0 < cut < len(lam) and lam[cut] - lam[cut - 1] <= self.tol:
            cut -= 1
        self._send(lam, res, slc, mixed, lambda a, b: self._vectors(cand, refs[a:b], extra), cut)
        self.held = _Held(lam[cut:], res[cut:], slc[cut:], mixed[cut:], self._vectors(cand, refs[cut:], extra))
