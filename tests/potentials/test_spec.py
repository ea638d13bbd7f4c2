"""Choosing potentials by spec string, named set and TOML/JSON file."""

import json
from pathlib import Path

import numpy as np
import pytest

from eigenfarm.errors import InputError
from eigenfarm.potentials.library import stillinger_weber_silicon
from eigenfarm.potentials.spec import NAMED_POTENTIALS, load_potential, register_named
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration

from test_derivatives import TRICLINIC, jittered_grid
from test_library import diamond

EXAMPLE = Path(__file__).parents[2] / "docs" / "examples" / "oxide-screened-bending.toml"

STRING = "lj:eps=1,sigma=1,rc=2.5,smooth=1 + triplet:B=2,c0=-1/3,C=0.5,xi=0.3,a=1.6"
TOML = """
species = ["*"]
[pairs.lj]
smooth = 1
"*-*" = { eps = 1, sigma = 1.0, rc = 2.5 }
[triplets]
"*-*-*" = { B = 2.0, c0 = "-1/3", C = 0.5, xi = 0.3, a = 1.6 }
"""
JSON = {"species": ["*"], "smooth": 1,
        "pairs": {"lj": {"*-*": {"eps": 1.0, "sigma": 1, "rc": 2.5}}},
        "triplets": {"*-*-*": {"B": 2, "c0": -1 / 3, "C": 0.5, "xi": 0.3, "a": 1.6}}}

MIXTURE = """
species = ["A", "B"]
[pairs.lj]
A-A = { eps = 1.0, sigma = 1.0, rc = 2.5 }
A-B = { eps = 1.5, sigma = 0.8, rc = 2.0 }
B-B = { eps = 0.5, sigma = 0.88, rc = 2.2 }
[triplets]
A-A-A = { B = 1.0, c0 = -0.5, xi = 0.4, a = 1.5 }
B-A-B = "none"
A-A-B = { B = 1.0, c0 = -0.5, xi_ij = 0.4, a_ij = 1.5, xi_ik = 0.5, a_ik = 1.6 }
A-B-A = { B = 2.0, c0 = 0.0, C = 1.0, xi = 0.3, a = 1.4 }
A-B-B = "none"
B-B-B = "none"
"""


def write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def outputs(pot, cfg):
    e, f = pot.energy_forces(cfg)
    return e, f, pot.hessian(cfg).toarray()


def same_outputs(p, q, cfg):
    for x, y in zip(outputs(p, cfg), outputs(q, cfg)):
        assert np.array_equal(x, y)


def test_string_toml_and_json_give_identical_potentials(tmp_path):
    from_string = load_potential(STRING)
    from_toml = load_potential(write(tmp_path, "p.toml", TOML))
    from_json = load_potential(write(tmp_path, "p.json", json.dumps(JSON)))
    assert from_string.parameters == from_toml.parameters == from_json.parameters
    assert from_string.parameters["pairs"]["lj"]["smooth"] == 1
    assert from_toml.name == "p"
    cfg = jittered_grid(4.4 * TRICLINIC, 3, "A", 0.15, 1)
    same_outputs(from_string, from_toml, cfg)
    same_outputs(from_string, from_json, cfg)


def test_default_smoothing_is_two():
    assert load_potential("lj:eps=1,sigma=1,rc=2.5").parameters["pairs"]["lj"]["smooth"] == 2


def test_mixture_file_sets_per_pair_and_per_triplet_parameters(tmp_path):
    pot = load_potential(write(tmp_path, "mix.toml", MIXTURE))
    pair, triplet = pot.terms
    assert pair.params["sigma"][0, 1] == 0.8 and pair.range[1, 1] == 2.2
    a, b = 0, 1
    assert triplet.active[a, a, b] and triplet.xi[a, a, b] == 0.4 and triplet.xi[b, a, a] == 0.5
    assert triplet.stiff[a, b, a] == 1.0 and not triplet.active[b, a, b]
    cfg = jittered_grid(4.4 * TRICLINIC, 4, "AB", 0.12, 2)
    assert np.isfinite(pot.energy(cfg))


def test_named_set_and_its_provenance_round_trip(tmp_path):
    named = load_potential("sw-silicon")
    assert named.name == "sw-silicon"
    reloaded = load_potential(write(tmp_path, "sw.json", json.dumps(named.parameters)))
    assert reloaded.parameters == named.parameters
    same_outputs(named, reloaded, diamond(5.44))


def test_register_named():
    register_named("test-sw-copy", stillinger_weber_silicon)
    try:
        assert load_potential("test-sw-copy").parameters == stillinger_weber_silicon().parameters
        register_named("test-sw-copy", stillinger_weber_silicon)  # same factory again: fine
        with pytest.raises(InputError, match="already registered"):
            register_named("test-sw-copy", lambda: None)
        with pytest.raises(InputError, match="lower-case"):
            register_named("Bad Name", stillinger_weber_silicon)
    finally:
        NAMED_POTENTIALS.pop("test-sw-copy", None)


def test_layout_example_loads():
    pot = load_potential(str(EXAMPLE))
    assert pot.species == ("Si", "O") and pot.parameters["units"] == "metal"
    assert "placeholder" in pot.parameters["reference"]
    assert pot.terms[1].stiff.max() > 0
    cfg = jittered_grid(6.4 * np.eye(3), 4, ["Si", "O"], 0.15, 3, units="metal")
    assert np.isfinite(pot.energy(cfg))


BAD_STRINGS = [
    ("", "empty potential spec"),
    ("nosuchname", "unknown potential 'nosuchname'"),
    ("ljx:eps=1", "unknown form 'ljx'"),
    ("lj:eps=1,sigma=1", "missing rc"),
    ("lj:eps=1,sigma=1,rc=2.5,foo=3", "unknown foo"),
    ("lj:eps=one,sigma=1,rc=2.5", "eps: expected a number"),
    ("lj:eps=1,sigma,rc=2.5", "'sigma' is not key=value"),
    ("lj:eps=1,eps=2,sigma=1,rc=2.5", "key eps given twice"),
    ("lj:eps=1,sigma=1,rc=1/0", "rc: expected a number"),
    ("lj:eps=1,sigma=1,rc=2.5,smooth=3", "smooth: must be 1 or 2"),
    ("lj:eps=1,sigma=1,rc=2.5 + lj:eps=1,sigma=1,rc=2.5", "term lj given twice"),
    ("sw2:eps=1,sigma=1,A=7,B=0.6,p=4,q=0,a=1.8,smooth=1", "smooth: pair form sw2 has no smoothed"),
    ("spring:k=1,r0=1,rc=-1", "range must be positive"),
    ("triplet:B=1,c0=-2,xi=1,a=2", "c0 is a cosine"),
    ("triplet:B=1,c0=0,a=2", "missing xi"),
    ("triplet:B=1,c0=0,xi=0,a=2", "xi_ij must be positive"),
]


@pytest.mark.parametrize("spec, message", BAD_STRINGS)
def test_malformed_strings_name_the_problem(spec, message):
    with pytest.raises(InputError) as err:
        load_potential(spec)
    assert message in str(err.value)
    if spec:
        assert f"{spec!r}" in str(err.value)
    assert "\n" not in str(err.value)


BAD_FILES = [
    ("bad.toml", "species = [\"A\"\n", "not valid TOML"),
    ("bad.toml", "[pairs.lj]\n\"*-*\" = {eps=1, sigma=1, rc=2}\n", "species: missing"),
    ("bad.toml", "species = [\"A\"]\npair = 1\n", "unknown key 'pair'"),
    ("bad.toml", "species = [\"A\", \"A\"]\n[pairs.lj]\nA-A = {eps=1, sigma=1, rc=2}\n", "species: a label"),
    ("bad.toml", "species = [\"A\"]\n", "no terms"),
    ("bad.toml", "species = [\"A\"]\nunits = \"cgs\"\n[pairs.lj]\nA-A = {eps=1, sigma=1, rc=2}\n",
     "units: 'cgs'"),
    ("bad.toml", "species = [\"A\", \"B\"]\n[pairs.lj]\nA-A = {eps=1, sigma=1, rc=2}\n"
                 "B-B = {eps=1, sigma=1, rc=2}\n", "species pair A-B"),
    ("bad.toml", "species = [\"A\"]\n[pairs.lj]\nA-C = {eps=1, sigma=1, rc=2}\n", "pairs.lj.A-C: key must"),
    ("bad.toml", "species = [\"A\"]\n[pairs.lj]\nA-A = {eps=\"x\", sigma=1, rc=2}\n",
     "pairs.lj.A-A.eps: expected a number"),
    ("bad.toml", "species = [\"A\"]\n[pairs.lj]\nA-A = {eps=true, sigma=1, rc=2}\n",
     "pairs.lj.A-A.eps: expected a number"),
    ("bad.toml", "species = [\"A\"]\n[pairs.lj]\nA-A = 3\n", "pairs.lj.A-A: expected a table"),
    ("bad.toml", "species = [\"A\"]\n[pairs.morse]\nA-A = {eps=1}\n", "unknown pair form 'morse'"),
    ("bad.toml", "species = [\"A\", \"B\"]\n[pairs.spring]\nA-A = {k=1, r0=1, rc=2}\nA-B = \"none\"\n"
                 "B-A = \"none\"\nB-B = {k=1, r0=1, rc=2}\n", "pairs.spring.B-A: species pair given twice"),
    ("bad.toml", "species = [\"A\", \"B\"]\n[triplets]\nA-A-A = {B=1, c0=0, xi=1, a=2}\nB-A-B = \"none\"\n"
                 "A-B-A = \"none\"\nA-B-B = \"none\"\nB-B-B = \"none\"\n", "triplet A-A-B: no parameters"),
    ("bad.toml", "species = [\"A\", \"B\"]\n[triplets]\nA-A-B = \"none\"\nB-A-A = \"none\"\n",
     "triplet B-A-A: given twice"),
    ("bad.toml", "species = [\"A\"]\n[triplets]\nA-A = {B=1, c0=0, xi=1, a=2}\n",
     "triplets.A-A: key must be J-I-K"),
    ("bad.toml", "species = [\"A\"]\n[triplets]\nA-A-A = {B=1, c0=0, xi_ij=1, a_ij=2, xi_ik=1.5, a_ik=2}\n",
     "triplet A-A-A: both arms have the same species"),
    ("bad.json", "{\"species\": [\"A\"],", "not valid JSON"),
    ("bad.json", "[1, 2]", "top level must be a table"),
    ("bad.txt", "species = [\"A\"]", "must end in .toml or .json"),
]


@pytest.mark.parametrize("name, text, message", BAD_FILES)
def test_malformed_files_name_file_and_key(tmp_path, name, text, message):
    path = write(tmp_path, name, text)
    with pytest.raises(InputError) as err:
        load_potential(path)
    assert message in str(err.value)
    assert str(err.value).startswith(path)
    assert "\n" not in str(err.value)


def test_missing_file_is_reported(tmp_path):
    with pytest.raises(InputError, match="no such potential file"):
        load_potential(str(tmp_path / "absent.toml"))


def test_wildcard_species_accepts_any_label():
    pot = load_potential("spring:k=1,r0=1,rc=1.5")
    cfg = Configuration([[0, 0, 0], [1.2, 0, 0]], ["Xx", "Yy"], Box.cubic(10.0))
    assert pot.energy(cfg) == pytest.approx(0.5 * 0.2**2)


def test_file_example_in_the_docs_loads(tmp_path):
    text = (EXAMPLE.parents[1] / "potentials.md").read_text()
    block = text.split("```toml\n", 1)[1].split("```", 1)[0]
    pot = load_potential(write(tmp_path, "doc.toml", block))
    assert pot.species == ("A", "B") and len(pot.terms) == 2
