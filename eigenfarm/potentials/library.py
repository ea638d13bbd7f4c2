"""Published parameter sets, each a function returning a ready :class:`Potential`.

Every set records its parameters in the potential-file layout of :mod:`eigenfarm.potentials.spec`
(``Potential.parameters``), so a set can be written out as JSON, edited and loaded again.
"""

from __future__ import annotations

from eigenfarm.potentials.base import Potential
from eigenfarm.potentials.pair import PairTerm
from eigenfarm.potentials.threebody import TripletTerm

#: Stillinger & Weber, PRB 31, 5262 (1985): ε (eV), σ (Å) and the dimensionless constants of
#: eqs. 2.4–2.5 and the fit to silicon (λ = 21.0, γ = 1.20, a = 1.80, A, B, p = 4, q = 0)
SW_SILICON = {"eps": 2.1683, "sigma": 2.0951, "a": 1.80, "lambda": 21.0, "gamma": 1.20,
              "A": 7.049556277, "B": 0.6022245584, "p": 4.0, "q": 0.0}


def stillinger_weber_silicon() -> Potential:
    """Stillinger–Weber silicon (Stillinger & Weber, PRB 31, 5262, 1985), metal units (eV, Å).

    Two-body ``sw2`` with the published ε, σ, A, B, p, q, a and the three-body term with
    B = λε (eV), c0 = −1/3, C = 0, ξ = γσ and arm range aσ (Å).  Species label ``Si``.
    The diamond lattice at a = 5.431 Å has energy −2ε = −4.3366 eV per atom.
    """
    sw = SW_SILICON
    pair = {k: sw[k] for k in ("eps", "sigma", "A", "B", "p", "q", "a")}
    triplet = {"B": sw["lambda"] * sw["eps"], "c0": -1.0 / 3.0,
               "xi": sw["gamma"] * sw["sigma"], "a": sw["a"] * sw["sigma"]}
    parameters = {
        "units": "metal",
        "reference": "F. H. Stillinger and T. A. Weber, Phys. Rev. B 31, 5262 (1985)",
        "species": ["Si"],
        "pairs": {"sw2": {"Si-Si": pair}},
        "triplets": {"Si-Si-Si": triplet},
    }
    terms = [PairTerm("sw2", ["Si"], {("Si", "Si"): pair}),
             TripletTerm(["Si"], {("Si", "Si", "Si"): triplet})]
    return Potential(["Si"], terms, name="sw-silicon", parameters=parameters)


#: eigenfarm's demo glass former (our own choice, not a published model; see
#: eigenfarm.samples.scenario): σ_ab of the inverse-power-law pairs, reduced units
DEMO_SIGMA = {"A-A": 1.0, "A-B": 1.15, "B-B": 1.3}
DEMO_CUTOFF_RATIO = 1.45
DEMO_EXPONENT = 12


def demo_soft_spheres() -> Potential:
    """The demo scenario's binary soft spheres: φ_ab = ε(σ_ab/r)¹², r_c = 1.45 σ_ab, smoothed to second
    order (reduced units; species ``A`` and ``B``)."""
    pairs = {key: {"eps": 1.0, "sigma": s, "n": DEMO_EXPONENT, "rc": DEMO_CUTOFF_RATIO * s}
             for key, s in DEMO_SIGMA.items()}
    parameters = {"units": "reduced", "reference": "eigenfarm demo scenario (our own)",
                  "species": ["A", "B"], "smooth": 2, "pairs": {"ipl": pairs}}
    table = {tuple(key.split("-")): v for key, v in pairs.items()}
    return Potential(["A", "B"], [PairTerm("ipl", ["A", "B"], table, smooth=2)], name="demo-soft-spheres",
                     parameters=parameters)
