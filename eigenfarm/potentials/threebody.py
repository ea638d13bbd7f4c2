"""Three-body angular terms of the Stillinger–Weber / Vashishta type, vectorised over triplets.

Energy (vertex i in the middle, arms j and k, each unordered arm pair once per vertex)

    E3 = Σ_i Σ_{j<k ∈ N(i)} B_jik · R(r_ij; ξ_ij, a_ij) · R(r_ik; ξ_ik, a_ik) · g(cos θ_jik),
    R(r; ξ, a) = exp(ξ/(r − a)) for r < a, else 0,
    g(c) = (c − c0)² / (1 + C (c − c0)²).

C = 0 is the Stillinger–Weber angular term (Stillinger & Weber, PRB 31, 5262, 1985, eq. 2.5, with
B = λε, ξ = γσ, a = aσ, c0 = −1/3); C > 0 is the saturating bond-bending term of Vashishta, Kalia,
Rino & Ebbsjö, PRB 41, 12197, 1990 (from memory).  B is an energy, ξ and a are lengths, c0 and C
are numbers.

Parameters are given per triplet type keyed (J, I, K), vertex I in the middle; (K, I, J) is the same
triplet with its arms swapped.  Each entry holds ``B``, ``c0``, optional ``C`` (default 0) and the arm
parameters, either ``xi`` and ``a`` shared by both arms or ``xi_ij``, ``a_ij`` (arm I–J) and ``xi_ik``,
``a_ik`` (arm I–K).  A triplet type that should not interact must be given as ``None``.

Derivatives.  With d1 = x_j − x_i, d2 = x_k − x_i, r_n = |d_n|, u_n = d_n/r_n, c = u1·u2 and
E = F(r1, r2, c), the chain rule gives ∂c/∂d1 = (u2 − c u1)/r1 and

    ∂²E/∂d1²    = F₁₁ u1u1ᵀ + F_cc g1g1ᵀ + F₁c (u1g1ᵀ + g1u1ᵀ) + F₁ (I − u1u1ᵀ)/r1
                  + F_c (3c u1u1ᵀ − u1u2ᵀ − u2u1ᵀ − c I)/r1²,
    ∂²E/∂d1∂d2  = F₁₂ u1u2ᵀ + F₁c u1g2ᵀ + F₂c g1u2ᵀ + F_cc g1g2ᵀ
                  + F_c (I − u1u1ᵀ − u2u2ᵀ + c u1u2ᵀ)/(r1 r2),

with g_n = ∂c/∂d_n; the nine atom blocks follow from x_i = −(d1 + d2) dependence.  There is no
division by sin θ, so collinear triplets are regular.
"""

from __future__ import annotations

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.potentials.base import Term
from eigenfarm.potentials.neighbours import Neighbourhood
from eigenfarm.potentials.pair import exponential_cutoff

_ARM_KEYS = ("xi_ij", "a_ij", "xi_ik", "a_ik")
_SHARED_ARM_KEYS = ("xi", "a")


def _angular(c, c0, stiff):
    """g(c) = t²/(1 + C t²), t = c − c0, and g', g'' (dimensionless, shaped like c)."""
    t = c - c0
    den = 1.0 + stiff * t * t
    return t * t / den, 2 * t / den**2, (2 - 6 * stiff * t * t) / den**3


def _outer(x, y):
    """Row-wise outer products (T, 3, 3) of (T, 3) arrays."""
    return x[:, :, None] * y[:, None, :]


def _per_block(x):
    """(T,) → (T, 1, 1), to scale a stack of 3×3 blocks."""
    return x[:, None, None]


def triplet_chunks(centre: np.ndarray, size: int):
    """Yield index pairs (p, q), p < q, of bonds sharing a centre, about ``size`` pairs at a time.

    ``centre`` (B,) is each bond's centre atom, grouped (sorted) by centre.  Every unordered pair of
    bonds of one centre is yielded exactly once, as int arrays p (T,), q (T,) indexing ``centre``.
    """
    n = len(centre)
    later = np.searchsorted(centre, centre, side="right") - np.arange(n) - 1
    cum = np.cumsum(later)
    total = int(cum[-1]) if n else 0
    ends = np.searchsorted(cum, np.arange(size, total, size), side="right")
    bounds = np.unique(np.r_[0, ends, n])
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        count = later[lo:hi]
        p = np.repeat(np.arange(lo, hi), count)
        if not len(p):
            continue
        run_start = np.repeat(np.cumsum(count) - count, count)
        yield p, p + 1 + np.arange(len(p)) - run_start


def _merge(row, col, blocks, n_atoms: int):
    """Sum blocks (B, 9) sharing (row, col): unique (row, col, block (U, 3, 3)), sorted by row."""
    key = row.astype(np.int64) * n_atoms + col
    order = np.argsort(key, kind="stable")
    key = key[order]
    if not len(key):
        return row[:0], col[:0], blocks[:0]
    starts = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
    flat = blocks.reshape(-1, 9)[order]  # gathers on (B, 9) are ~4x faster than on (B, 3, 3)
    summed = np.add.reduceat(flat, starts, axis=0).reshape(-1, 3, 3)
    return key[starts] // n_atoms, key[starts] % n_atoms, summed


def _atom_blocks(i, j, k, a, b, c, rows, n_atoms: int):
    """The nine atom blocks of triplets (i vertex; arms j, k) from a = ∂²E/∂d1², b = ∂²E/∂d1∂d2,
    c = ∂²E/∂d2² (each (T, 3, 3)), keeping rows flagged in ``rows`` (N,), summed per (row, col)."""
    bt = b.transpose(0, 2, 1)
    pieces = ((j, j, a), (j, k, b), (k, j, bt), (k, k, c), (j, i, -(a + b)), (k, i, -(bt + c)),
              (i, j, -(a + bt)), (i, k, -(b + c)), (i, i, a + b + bt + c))
    keep = [rows[row] for row, _, _ in pieces]
    return _merge(np.concatenate([row[m] for (row, _, _), m in zip(pieces, keep)]),
                  np.concatenate([col[m] for (_, col, _), m in zip(pieces, keep)]),
                  np.concatenate([blk.reshape(-1, 9)[m] for (_, _, blk), m in zip(pieces, keep)]),
                  n_atoms)


class TripletTerm(Term):
    """The three-body sum above over ``species`` (the potential's labels, ``"*"`` allowed).

    ``table`` maps (J, I, K) label triples (vertex I in the middle) to parameter dicts or ``None``.
    ``chunk``: triplets evaluated at once; bounds the working memory (~2 kB per triplet in a chunk).
    """

    halo = 1

    def __init__(self, species, table: dict, chunk: int = 1 << 15):
        self.species = tuple(species)
        self.chunk = int(chunk)
        s = len(self.species)
        index = {label: n for n, label in enumerate(self.species)}
        self.strength, self.cos0, self.stiff = np.zeros((s, s, s)), np.zeros((s, s, s)), np.zeros((s, s, s))
        #: arm parameters of the I–J arm of triplet (J, I, K) at [J, I, K]; the I–K arm is at [K, I, J]
        self.xi, self.arm = np.zeros((s, s, s)), np.zeros((s, s, s))
        self.active = np.zeros((s, s, s), bool)
        self.table = {}
        given = self._canonical(table, index)
        for tj in range(s):
            for ti in range(s):
                for tk in range(tj, s):
                    self._store(given, tj, ti, tk)
        arms = np.where(self.active, self.arm, 0.0)
        #: [I, J]: longest I–J arm over all triplets with vertex I (length)
        self.reach = arms.max(axis=2).T
        self.cutoff = float(arms.max()) if arms.size else 0.0

    def _canonical(self, table: dict, index: dict) -> dict:
        """Entries keyed by (J, I, K) species indices; rejects unknown labels and duplicates."""
        given = {}
        for key, entry in table.items():
            name = "-".join(key)
            if len(key) != 3 or any(label not in index for label in key):
                raise InputError(f"triplet {name}: key must be J-I-K with labels from "
                                 f"{', '.join(self.species)}")
            ids = tuple(index[label] for label in key)
            swapped = ids[::-1]
            if ids in given or swapped in given:
                raise InputError(f"triplet {name}: given twice (J-I-K and K-I-J are the same triplet)")
            given[ids] = (name, entry)
        return given

    def _store(self, given: dict, tj: int, ti: int, tk: int):
        """Fill the arrays for triplet type (tj, ti, tk) and its arm-swapped twin."""
        if (tj, ti, tk) in given:
            name, entry = given[(tj, ti, tk)]
            swap = False
        elif (tk, ti, tj) in given:
            name, entry = given[(tk, ti, tj)]
            swap = True
        else:
            name = "-".join(self.species[t] for t in (tj, ti, tk))
            raise InputError(f"triplet {name}: no parameters (vertex in the middle; set it to none "
                             "if it does not interact)")
        self.table[name] = entry
        if entry is None:
            return
        p = _entry(name, entry)
        if tj == tk and (p["xi_ij"], p["a_ij"]) != (p["xi_ik"], p["a_ik"]):
            raise InputError(f"triplet {name}: both arms have the same species, so they need the same "
                             "xi and a")
        first, second = ("ik", "ij") if swap else ("ij", "ik")
        for at, arm in (((tj, ti, tk), first), ((tk, ti, tj), second)):
            self.strength[at], self.cos0[at], self.stiff[at] = p["B"], p["c0"], p["C"]
            self.xi[at], self.arm[at] = p["xi_" + arm], p["a_" + arm]
            self.active[at] = True

    def _arm_bonds(self, nb: Neighbourhood, types: np.ndarray) -> np.ndarray:
        """Indices (A,) of neighbour pairs short enough to be arms, grouped by centre."""
        bonds = np.flatnonzero(nb.r < self.reach[types[nb.i], types[nb.j]])
        if np.any(np.diff(nb.i[bonds]) < 0):
            bonds = bonds[np.argsort(nb.i[bonds], kind="stable")]
        return bonds

    def _chunks(self, nb: Neighbourhood, types: np.ndarray, bonds: np.ndarray, rows=None):
        """Yield live triplets chunk by chunk as (i, j, k (T,), d1, d2 (T, 3), params dict of (T,)).

        With ``rows`` (N,) bool only triplets touching a flagged atom are kept.
        """
        for p, q in triplet_chunks(nb.i[bonds], self.chunk):
            b1, b2 = bonds[p], bonds[q]
            i, j, k = nb.i[b1], nb.j[b1], nb.j[b2]
            ti, tj, tk = types[i], types[j], types[k]
            r1, r2 = nb.r[b1], nb.r[b2]
            live = self.active[tj, ti, tk] & (r1 < self.arm[tj, ti, tk]) & (r2 < self.arm[tk, ti, tj])
            if rows is not None:
                live &= rows[i] | rows[j] | rows[k]
            if not live.any():
                continue
            b1, b2, i, j, k = b1[live], b2[live], i[live], j[live], k[live]
            ti, tj, tk = ti[live], tj[live], tk[live]
            params = {"B": self.strength[tj, ti, tk], "c0": self.cos0[tj, ti, tk],
                      "C": self.stiff[tj, ti, tk], "xi1": self.xi[tj, ti, tk],
                      "a1": self.arm[tj, ti, tk], "xi2": self.xi[tk, ti, tj], "a2": self.arm[tk, ti, tj]}
            yield i, j, k, nb.d[b1], nb.d[b2], params

    def energy_forces(self, nb: Neighbourhood, types: np.ndarray):
        forces = np.zeros((nb.n_atoms, 3))
        energy = 0.0
        for i, j, k, d1, d2, params in self._chunks(nb, types, self._arm_bonds(nb, types)):
            geo = _Geometry(d1, d2)
            f = _scalar_derivatives(geo, params, second=False)
            energy += float(f["E"].sum())
            grad1 = f["1"][:, None] * geo.u1 + f["c"][:, None] * geo.g1
            grad2 = f["2"][:, None] * geo.u2 + f["c"][:, None] * geo.g2
            atoms = np.concatenate([i, j, k])
            push = np.concatenate([grad1 + grad2, -grad1, -grad2])  # force = −∂E/∂x
            for x in range(3):
                forces[:, x] += np.bincount(atoms, push[:, x], nb.n_atoms)
        return energy, forces

    def hessian_blocks(self, nb: Neighbourhood, types: np.ndarray, rows: np.ndarray):
        """Blocks of the flagged rows; each chunk's blocks are pre-summed, so a (row, col) repeats only
        across chunks (a few times at most), which keeps the output near 150 bytes per triplet."""
        bonds = self._arm_bonds(nb, types)
        touched = rows.copy()
        touched[nb.i[bonds][rows[nb.j[bonds]]]] = True
        bonds = bonds[touched[nb.i[bonds]]]
        parts = []
        for i, j, k, d1, d2, params in self._chunks(nb, types, bonds, rows):
            geo = _Geometry(d1, d2)
            arms = _arm_blocks(geo, _scalar_derivatives(geo, params, second=True))
            parts.append(_atom_blocks(i, j, k, *arms, rows, nb.n_atoms))
        if not parts:
            return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros((0, 3, 3))
        return tuple(np.concatenate([p[n] for p in parts]) for n in range(3))

    def describe(self) -> dict:
        return {"term": "triplet", "triplets": self.table}


def _entry(name: str, entry: dict) -> dict:
    """Validated numbers B, c0, C, xi_ij, a_ij, xi_ik, a_ik of one triplet entry."""
    if not isinstance(entry, dict):
        raise InputError(f"triplet {name}: expected a table of parameters or none")
    arm_keys = _SHARED_ARM_KEYS if "xi" in entry or "a" in entry else _ARM_KEYS
    allowed = ("B", "c0", "C") + arm_keys
    missing = [k for k in ("B", "c0") + arm_keys if k not in entry]
    unknown = [k for k in entry if k not in allowed]
    if missing or unknown:
        raise InputError(f"triplet {name}: " + (f"missing {', '.join(missing)} " if missing else "")
                         + (f"unknown {', '.join(unknown)} " if unknown else "")
                         + "(parameters are B, c0, optional C, and xi, a or xi_ij, a_ij, xi_ik, a_ik)")
    try:
        p = {k: float(v) for k, v in entry.items()}
    except (TypeError, ValueError):
        raise InputError(f"triplet {name}: parameters must be numbers, got {entry!r}") from None
    p.setdefault("C", 0.0)
    if arm_keys == _SHARED_ARM_KEYS:
        p.update(xi_ij=p["xi"], xi_ik=p.pop("xi"), a_ij=p["a"], a_ik=p.pop("a"))
    if not all(np.isfinite(v) for v in p.values()):
        raise InputError(f"triplet {name}: parameters must be finite")
    for key in _ARM_KEYS:
        if not p[key] > 0:
            raise InputError(f"triplet {name}: {key} must be positive, got {p[key]}")
    if not -1.0 <= p["c0"] <= 1.0:
        raise InputError(f"triplet {name}: c0 is a cosine and must lie in [-1, 1], got {p['c0']}")
    if p["C"] < 0:
        raise InputError(f"triplet {name}: C must not be negative, got {p['C']}")
    return p


class _Geometry:
    """Unit vectors u1, u2 (T, 3), lengths r1, r2 (T,), cosine c (T,) and g_n = ∂c/∂d_n (T, 3)."""

    def __init__(self, d1: np.ndarray, d2: np.ndarray):
        self.r1 = np.sqrt(np.einsum("tk,tk->t", d1, d1))
        self.r2 = np.sqrt(np.einsum("tk,tk->t", d2, d2))
        self.u1, self.u2 = d1 / self.r1[:, None], d2 / self.r2[:, None]
        self.c = np.einsum("tk,tk->t", self.u1, self.u2)
        self.g1 = (self.u2 - self.c[:, None] * self.u1) / self.r1[:, None]
        self.g2 = (self.u1 - self.c[:, None] * self.u2) / self.r2[:, None]


def _scalar_derivatives(geo: _Geometry, p: dict, second: bool) -> dict:
    """E = B R1 R2 g and its partial derivatives in (r1, r2, c), each (T,).

    Keys: ``E``, ``1``, ``2``, ``c`` and, with ``second``, ``11``, ``22``, ``cc``, ``12``, ``1c``, ``2c``.
    """
    R1, R1d, R1dd = exponential_cutoff(geo.r1, p["xi1"], p["a1"])
    R2, R2d, R2dd = exponential_cutoff(geo.r2, p["xi2"], p["a2"])
    g, gd, gdd = _angular(geo.c, p["c0"], p["C"])
    B = p["B"]
    out = {"E": B * R1 * R2 * g, "1": B * R1d * R2 * g, "2": B * R1 * R2d * g, "c": B * R1 * R2 * gd}
    if second:
        out.update({"11": B * R1dd * R2 * g, "22": B * R1 * R2dd * g, "cc": B * R1 * R2 * gdd,
                    "12": B * R1d * R2d * g, "1c": B * R1d * R2 * gd, "2c": B * R1 * R2d * gd})
    return out


def _self_block(u, v, gu, r, c, f_rr, f_rc, f_r, f_cc, f_c):
    """∂²E/∂d² (T, 3, 3) for the arm d = r u; v is the other arm's unit vector (see module doc)."""
    uu = _outer(u, u)
    eye = np.eye(3)
    s = _per_block
    return (s(f_rr) * uu + s(f_cc) * _outer(gu, gu) + s(f_rc) * (_outer(u, gu) + _outer(gu, u))
            + s(f_r / r) * (eye - uu)
            + s(f_c / r**2) * (3 * s(c) * uu - _outer(u, v) - _outer(v, u) - s(c) * eye))


def _arm_blocks(geo: _Geometry, f: dict):
    """∂²E/∂d1², ∂²E/∂d1∂d2, ∂²E/∂d2², each (T, 3, 3) in energy/length²."""
    s = _per_block
    a = _self_block(geo.u1, geo.u2, geo.g1, geo.r1, geo.c, f["11"], f["1c"], f["1"], f["cc"], f["c"])
    c = _self_block(geo.u2, geo.u1, geo.g2, geo.r2, geo.c, f["22"], f["2c"], f["2"], f["cc"], f["c"])
    u1u1, u2u2 = _outer(geo.u1, geo.u1), _outer(geo.u2, geo.u2)
    u1u2 = _outer(geo.u1, geo.u2)
    b = (s(f["12"]) * u1u2 + s(f["1c"]) * _outer(geo.u1, geo.g2) + s(f["2c"]) * _outer(geo.g1, geo.u2)
         + s(f["cc"]) * _outer(geo.g1, geo.g2)
         + s(f["c"] / (geo.r1 * geo.r2)) * (np.eye(3) - u1u1 - u2u2 + s(geo.c) * u1u2))
    return a, b, c
