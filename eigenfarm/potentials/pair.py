"""Pair potentials φ(r) with analytic first and second derivatives, multi-species tables.

For a pair at separation d = x_j − x_i, r = |d|, u = d/r, the energy φ(r) gives the force φ'(r) u on i
and the Hessian block (common practice, e.g. Ashcroft & Mermin ch. 22 for springs)

    K = φ''(r) u uᵀ + (φ'(r)/r) (I − u uᵀ),    H_ii += K,  H_jj += K,  H_ij = H_ji −= K.

Forms (``PAIR_FORMS``):

* ``lj``        Lennard-Jones 4ε[(σ/r)¹² − (σ/r)⁶]                         params eps, sigma, rc
* ``ipl``       inverse power law ε(σ/r)ⁿ (soft spheres)                    params eps, sigma, n, rc
* ``harmonic``  harmonic spheres ε/2 (1 − r/σ)² for r < σ (O'Hern et al., PRE 68, 011306, 2003)
                                                                            params eps, sigma
* ``sw2``       Stillinger–Weber two-body Aε[B(σ/r)^p − (σ/r)^q] exp(σ/(r − aσ)) for r < aσ
                (Stillinger & Weber, PRB 31, 5262, 1985, eq. 2.4)         params eps, sigma, A, B, p, q, a
* ``screened``  the screened-Coulomb/steric pair of oxide potentials
                H/rᵑ + Z exp(−r/λ)/r − D exp(−r/ξ)/r⁴ (Vashishta, Kalia, Rino & Ebbsjö, PRB 41,
                12197, 1990, eq. 2; from memory), Z = ZᵢZⱼe²/4πε₀ in energy·length
                                                                            params H, eta, Z, lam, D, xi, rc
* ``spring``    harmonic spring k/2 (r − r0)² for r < rc, zero beyond (lattice spring models; the
                range rc is hard: no smoothing, so choose it between neighbour shells)
                                                                            params k, r0, rc

Forms with a plain cutoff ``rc`` are smoothed so the energy, the force and (by default) the curvature
go to zero at rc: φ_s(r) = φ(r) − Σ_{k≤m} φ⁽ᵏ⁾(rc)(r − rc)ᵏ/k!, with m = ``smooth`` (1: energy and force
continuous, the "shifted-force" form; 2: also the second derivative, so the Hessian has no jump when
a pair crosses rc).  ``harmonic`` and ``sw2`` vanish at their range by construction; ``spring`` is
cut at rc as given.
"""

from __future__ import annotations

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.potentials.base import Term
from eigenfarm.potentials.neighbours import Neighbourhood


def _lj(r, p):
    s6 = (p["sigma"] / r) ** 6
    e = 4 * p["eps"]
    return e * (s6 * s6 - s6), e * (-12 * s6 * s6 + 6 * s6) / r, e * (156 * s6 * s6 - 42 * s6) / r**2


def _ipl(r, p):
    n = p["n"]
    phi = p["eps"] * (p["sigma"] / r) ** n
    return phi, -n * phi / r, n * (n + 1) * phi / r**2


def _harmonic(r, p):
    x = 1.0 - r / p["sigma"]
    inside = x > 0
    e, s = p["eps"], p["sigma"]
    return (np.where(inside, 0.5 * e * x * x, 0.0), np.where(inside, -e * x / s, 0.0),
            np.where(inside, e / s**2, 0.0))


#: exp(ξ/(r − a)) is taken as exactly 0 when ξ/(r − a) < −_EXP_FLOOR (it is < 1e-260 there), which
#: also keeps the 1/(r − a)⁴ factors of its derivatives finite as r → a
_EXP_FLOOR = 600.0


def exponential_cutoff(r, xi, a):
    """R(r) = exp(ξ/(r − a)) for r < a else 0, and R', R'' (each shaped like r; r, ξ, a in length)."""
    gap = r - a
    x = np.divide(xi, gap, out=np.full(np.shape(r), -np.inf), where=gap < 0)
    live = x > -_EXP_FLOOR
    x = np.where(live, x, 0.0)
    gap = np.where(live, gap, -1.0)
    value = np.where(live, np.exp(x), 0.0)
    return value, -value * x / gap, value * (x * x + 2 * x) / (gap * gap)


def _sw2(r, p):
    sig = p["sigma"]
    g, g1, g2 = exponential_cutoff(r, sig, p["a"] * sig)
    ae, B, pp, q = p["A"] * p["eps"], p["B"], p["p"], p["q"]
    f = ae * (B * (sig / r) ** pp - (sig / r) ** q)
    f1 = ae * (-pp * B * (sig / r) ** pp + q * (sig / r) ** q) / r
    f2 = ae * (pp * (pp + 1) * B * (sig / r) ** pp - q * (q + 1) * (sig / r) ** q) / r**2
    return f * g, f1 * g + f * g1, f2 * g + 2 * f1 * g1 + f * g2


def _screened(r, p):
    eta, lam, xi = p["eta"], p["lam"], p["xi"]
    steric = p["H"] / r**eta
    el = np.exp(-r / lam)
    coul = p["Z"] * el / r
    ed = np.exp(-r / xi)
    dip = -p["D"] * ed / r**4
    phi = steric + coul + dip
    d1 = -eta * steric / r + coul * (-1 / r - 1 / lam) + dip * (-4 / r - 1 / xi)
    d2 = (eta * (eta + 1) * steric / r**2
          + coul * ((1 / r + 1 / lam) ** 2 + 1 / r**2)
          + dip * ((4 / r + 1 / xi) ** 2 + 4 / r**2))
    return phi, d1, d2


def _spring(r, p):
    x = r - p["r0"]
    k = p["k"] * np.ones_like(r)
    return 0.5 * k * x * x, k * x, k


#: name → (radial function, parameter names, whether it takes a smoothed cutoff ``rc``, range)
PAIR_FORMS = {
    "lj": (_lj, ("eps", "sigma", "rc"), True, None),
    "ipl": (_ipl, ("eps", "sigma", "n", "rc"), True, None),
    "harmonic": (_harmonic, ("eps", "sigma"), False, lambda p: p["sigma"]),
    "sw2": (_sw2, ("eps", "sigma", "A", "B", "p", "q", "a"), False, lambda p: p["a"] * p["sigma"]),
    "screened": (_screened, ("H", "eta", "Z", "lam", "D", "xi", "rc"), True, None),
    "spring": (_spring, ("k", "r0", "rc"), False, lambda p: p["rc"]),
}


def _pair_key(a: str, b: str) -> tuple[str, str]:
    return (a, b) if a <= b else (b, a)


class PairTerm(Term):
    """A pair sum of one form with a parameter set per unordered species pair.

    ``species``: labels (the potential's list, ``"*"`` allowed as the only one); ``table``: maps
    (a, b) pairs (either order) to parameter dicts; a pair missing from the table does not interact only
    if ``table`` says so with ``None``, otherwise it is an error.  ``smooth``: 1 or 2 (see module doc).
    """

    halo = 0

    def __init__(self, form: str, species, table: dict, smooth: int = 2):
        if form not in PAIR_FORMS:
            raise InputError(f"unknown pair form {form!r}: choose one of {', '.join(PAIR_FORMS)}")
        if smooth not in (1, 2):
            raise InputError(f"pair form {form}: smooth must be 1 or 2, got {smooth!r}")
        self.form, self.smooth = form, smooth
        self.function, names, smoothed, reach = PAIR_FORMS[form]
        self.species = tuple(species)
        s = len(self.species)
        given = {_pair_key(*k): v for k, v in table.items()}
        self.params = {name: np.zeros((s, s)) for name in names}
        self.active = np.zeros((s, s), bool)
        self.range = np.zeros((s, s))
        for x in range(s):
            for y in range(x, s):
                key = _pair_key(self.species[x], self.species[y])
                if key not in given:
                    raise InputError(f"pair form {form}: no parameters for species pair {key[0]}-{key[1]}")
                entry = given[key]
                if entry is None:
                    continue
                missing = [n for n in names if n not in entry]
                unknown = [n for n in entry if n not in names]
                if missing or unknown:
                    raise InputError(f"pair form {form}, pair {key[0]}-{key[1]}: "
                                     + "; ".join(([f"missing {', '.join(missing)}"] if missing else [])
                                                 + ([f"unknown {', '.join(unknown)}"] if unknown else []))
                                     + f" (parameters are {', '.join(names)})")
                for n in names:
                    self.params[n][x, y] = self.params[n][y, x] = float(entry[n])
                self.active[x, y] = self.active[y, x] = True
                rc = float(entry["rc"]) if smoothed else float(reach(entry))
                if not rc > 0:
                    raise InputError(f"pair form {form}, pair {key[0]}-{key[1]}: range must be positive")
                self.range[x, y] = self.range[y, x] = rc
        self.table = {f"{a}-{b}": v for (a, b), v in given.items()}
        self.smoothed = smoothed
        self.cutoff = float(self.range.max())
        if smoothed:
            self._tail = self._cutoff_values()

    def _cutoff_values(self):
        """φ, φ', φ'' at each pair type's rc, (3, S, S)."""
        rc = np.where(self.active, self.range, 1.0)
        out = self.function(rc, self.params)
        return np.array([np.where(self.active, v, 0.0) for v in out])

    def radial(self, r: np.ndarray, ti: np.ndarray, tj: np.ndarray):
        """φ, φ', φ'' (each (P,)) at separations r (P,) for species indices ti, tj (P,); 0 beyond range."""
        p = {k: v[ti, tj] for k, v in self.params.items()}
        inside = self.active[ti, tj] & (r < self.range[ti, tj])
        safe_r = np.where(inside, r, 1.0)
        phi, d1, d2 = self.function(safe_r, p)
        if self.smoothed:
            x = safe_r - self.range[ti, tj]
            t0, t1, t2 = (v[ti, tj] for v in self._tail)
            if self.smooth == 1:
                phi, d1, d2 = phi - t0 - x * t1, d1 - t1, d2
            else:
                phi, d1, d2 = phi - t0 - x * t1 - 0.5 * x * x * t2, d1 - t1 - x * t2, d2 - t2
        zero = ~inside
        return (np.where(zero, 0.0, phi), np.where(zero, 0.0, d1), np.where(zero, 0.0, d2))

    def energy_forces(self, nb: Neighbourhood, types: np.ndarray):
        phi, d1, _ = self.radial(nb.r, types[nb.i], types[nb.j])
        with np.errstate(invalid="ignore", divide="ignore"):
            coef = np.where(d1 != 0, d1 / nb.r, 0.0)
        f = coef[:, None] * nb.d
        forces = np.column_stack([np.bincount(nb.i, f[:, k], nb.n_atoms) for k in range(3)])
        return 0.5 * float(phi.sum()), forces

    def hessian_blocks(self, nb: Neighbourhood, types: np.ndarray, rows: np.ndarray):
        keep = rows[nb.i]
        i, j, d, r = nb.i[keep], nb.j[keep], nb.d[keep], nb.r[keep]
        _, d1, d2 = self.radial(r, types[i], types[j])
        live = (d1 != 0) | (d2 != 0)
        i, j, d, r, d1, d2 = i[live], j[live], d[live], r[live], d1[live], d2[live]
        u = d / r[:, None]
        uu = u[:, :, None] * u[:, None, :]
        k = d2[:, None, None] * uu + (d1 / r)[:, None, None] * (np.eye(3) - uu)
        return np.concatenate([i, i]), np.concatenate([i, j]), np.concatenate([k, -k])

    def describe(self) -> dict:
        return {"term": "pair", "form": self.form, "smooth": self.smooth, "pairs": self.table}
