"""Choosing a potential: a named set, a one-line spec string, or a TOML/JSON potential file.

``load_potential(spec)`` decides by the text: an existing file or a name ending in ``.toml``/``.json``
is a potential file; a name in :data:`NAMED_POTENTIALS` is that set; anything else is a spec string.

Spec string (one parameter set for every species, species ``"*"``)::

    spec  := term ("+" term)*
    term  := form ":" key "=" value ("," key "=" value)*
    form  := a pair form (lj, ipl, harmonic, sw2, screened, spring) | "triplet"
    value := number | number "/" number

e.g. ``lj:eps=1,sigma=1,rc=2.5``, ``lj:eps=1,sigma=1,rc=2.5,smooth=1`` or
``sw2:eps=1,sigma=1,A=7.05,B=0.602,p=4,q=0,a=1.8 + triplet:B=21,c0=-1/3,xi=1.2,a=1.8``.

Potential file (TOML shown; JSON holds the same tree)::

    name = "my-glass"            # optional (default: the file name)
    units = "metal"              # optional, recorded for provenance
    reference = "..."            # optional free text
    species = ["Si", "O"]
    smooth = 2                   # optional default for pair forms with a smoothed cutoff rc

    [pairs.screened]             # one table per pair form
    smooth = 1                   # optional, overrides the default for this form
    Si-Si = { H = ..., eta = ..., Z = ..., lam = ..., D = ..., xi = ..., rc = ... }
    Si-O  = { ... }
    O-O   = "none"               # this pair does not interact in this form

    [triplets]                   # keys J-I-K, vertex I in the middle
    O-Si-O  = { B = ..., c0 = ..., C = ..., xi = ..., a = ... }
    Si-O-Si = { B = ..., c0 = ..., xi_ij = ..., a_ij = ..., xi_ik = ..., a_ik = ... }

Every species pair of every pair form, and every triplet type, must be given (or set to ``"none"``).
The parsed tree is stored in ``Potential.parameters`` (JSON-serialisable, the same layout, so it can
be written out as a ``.json`` potential file and loaded again).  Every mistake is an InputError naming
the file or spec and the key.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from pathlib import Path
from typing import Callable

from eigenfarm.errors import InputError
from eigenfarm.potentials.base import Potential
from eigenfarm.potentials.library import demo_soft_spheres, stillinger_weber_silicon
from eigenfarm.potentials.pair import PAIR_FORMS, PairTerm
from eigenfarm.potentials.threebody import TripletTerm
from eigenfarm.structure.units import UNIT_SYSTEMS

#: the form name of the three-body term in spec strings
TRIPLET_FORM = "triplet"
#: name → factory of the named parameter sets
NAMED_POTENTIALS: dict[str, Callable[[], Potential]] = {"sw-silicon": stillinger_weber_silicon,
                                                        "demo-soft-spheres": demo_soft_spheres}

_TOP_KEYS = ("name", "units", "reference", "notes", "species", "smooth", "pairs", "triplets")
_LABEL = re.compile(r"^(\*|[A-Za-z0-9_]+)$")
_NAME = re.compile(r"^[a-z0-9][a-z0-9_.-]*$")
_TERM_SPLIT = re.compile(r"\+(?=\s*[A-Za-z])")
_NONE = "none"


def register_named(name: str, factory: Callable[[], Potential]) -> None:
    """Make ``factory`` (no arguments → Potential) loadable as ``name`` (lower case, digits, - _ .)."""
    if not _NAME.match(name) or name.endswith((".toml", ".json")):
        raise InputError(f"named potential {name!r}: use lower-case letters, digits, '-', '_' and '.'")
    if NAMED_POTENTIALS.get(name, factory) is not factory:
        raise InputError(f"named potential {name!r} is already registered")
    NAMED_POTENTIALS[name] = factory


def load_potential(spec: str) -> Potential:
    """The potential described by ``spec``: a file path, a registered name or a spec string."""
    text = spec.strip()
    if not text:
        raise InputError("empty potential spec: give a named set, a 'form:key=value,...' string "
                         "or a .toml/.json file")
    path = Path(text)
    if path.suffix.lower() in (".toml", ".json") or path.is_file():
        return _from_file(path)
    if text in NAMED_POTENTIALS:
        return NAMED_POTENTIALS[text]()
    if ":" in text:
        where = f"potential spec {text!r}"
        return build_potential(normalise(parse_spec_string(text), where), text, where)
    raise InputError(f"unknown potential {text!r}: not a file, not a named set "
                     f"({', '.join(sorted(NAMED_POTENTIALS))}) and not a 'form:key=value,...' spec")


def _from_file(path: Path) -> Potential:
    raw = read_potential_file(path)
    tree = normalise(raw, str(path))
    return build_potential(tree, raw.get("name", path.stem), str(path))


def read_potential_file(path: Path) -> dict:
    """The raw tree of a ``.toml`` or ``.json`` potential file; syntax errors become InputError."""
    suffix = path.suffix.lower()
    if suffix not in (".toml", ".json"):
        raise InputError(f"{path}: potential files must end in .toml or .json")
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: no such potential file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read potential file ({exc})") from None
    try:
        raw = tomllib.loads(text) if suffix == ".toml" else json.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML: {exc}") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: not valid JSON: {exc.msg} "
                         f"(line {exc.lineno}, column {exc.colno})") from None
    if not isinstance(raw, dict):
        raise InputError(f"{path}: the top level must be a table of keys")
    return raw


def parse_spec_string(text: str) -> dict:
    """The raw potential-file tree (species ``"*"``) of a spec string (see module doc)."""
    where = f"potential spec {text!r}"
    raw: dict = {"species": ["*"], "pairs": {}}
    for part in _TERM_SPLIT.split(text):
        form, colon, body = (s.strip() for s in part.partition(":"))
        if not colon:
            raise InputError(f"{where}: term {part.strip()!r} is not of the form form:key=value,...")
        if form not in PAIR_FORMS and form != TRIPLET_FORM:
            raise InputError(f"{where}: unknown form {form!r} (forms are {', '.join(PAIR_FORMS)}, "
                             f"{TRIPLET_FORM})")
        settings = _settings(body, f"{where}: term {form}")
        if form == TRIPLET_FORM:
            if "triplets" in raw:
                raise InputError(f"{where}: term {form} given twice")
            raw["triplets"] = {"*-*-*": settings}
            continue
        if form in raw["pairs"]:
            raise InputError(f"{where}: term {form} given twice")
        table = {"smooth": settings.pop("smooth")} if "smooth" in settings else {}
        table["*-*"] = settings
        raw["pairs"][form] = table
    return raw


def _settings(body: str, where: str) -> dict:
    """key=value,... → {key: value text}."""
    out = {}
    for item in body.split(","):
        key, eq, value = (s.strip() for s in item.partition("="))
        if not eq or not key or not value:
            raise InputError(f"{where}: {item.strip()!r} is not key=value")
        if key in out:
            raise InputError(f"{where}: key {key} given twice")
        out[key] = value
    return out


def normalise(raw: dict, where: str) -> dict:
    """Check the structure of a raw potential tree; numbers become floats, smoothing is resolved.

    Parameter names and completeness are checked when the terms are built (:func:`build_potential`).
    """
    unknown = [k for k in raw if k not in _TOP_KEYS]
    if unknown:
        raise InputError(f"{where}: unknown key {unknown[0]!r} (keys are {', '.join(_TOP_KEYS)})")
    tree: dict = {}
    for key in ("units", "reference", "notes"):
        if key in raw:
            tree[key] = _text(raw[key], f"{where}: {key}")
    if "units" in tree and tree["units"] not in UNIT_SYSTEMS:
        raise InputError(f"{where}: units: {tree['units']!r} is not one of {', '.join(UNIT_SYSTEMS)}")
    if "name" in raw:
        _text(raw["name"], f"{where}: name")
    tree["species"] = _species(raw.get("species"), where)
    smooth = _smooth(raw.get("smooth", 2), f"{where}: smooth")
    tree["pairs"] = {form: _pair_table(form, table, tree["species"], smooth, f"{where}: pairs.{form}")
                     for form, table in _table(raw.get("pairs", {}), f"{where}: pairs").items()}
    if "triplets" in raw:
        tree["triplets"] = {key: _entry(value, f"{where}: triplets.{key}", key, tree["species"], 3)
                            for key, value in _table(raw["triplets"], f"{where}: triplets").items()}
    if not tree["pairs"] and not tree.get("triplets"):
        raise InputError(f"{where}: no terms: give a [pairs.<form>] table or a [triplets] table")
    return tree


def _text(value, where: str) -> str:
    if not isinstance(value, str):
        raise InputError(f"{where}: expected text, got {value!r}")
    return value


def _table(value, where: str) -> dict:
    if not isinstance(value, dict):
        raise InputError(f"{where}: expected a table, got {value!r}")
    return value


def _species(value, where: str) -> list[str]:
    if value is None:
        raise InputError(f"{where}: species: missing (a list of species labels, e.g. [\"Si\", \"O\"])")
    if not isinstance(value, list) or not value:
        raise InputError(f"{where}: species: expected a non-empty list of labels, got {value!r}")
    for label in value:
        if not isinstance(label, str) or not _LABEL.match(label):
            raise InputError(f"{where}: species: {label!r} is not a label (letters, digits, _ or \"*\")")
    if len(set(value)) != len(value):
        raise InputError(f"{where}: species: a label is repeated")
    return list(value)


def _smooth(value, where: str) -> int:
    number = _number(value, where)
    if number not in (1, 2):
        raise InputError(f"{where}: must be 1 or 2, got {value!r}")
    return int(number)


def _pair_table(form: str, table, species: list[str], smooth: int, where: str) -> dict:
    """One [pairs.<form>] table: resolved ``smooth`` (smoothed forms only) and species-pair entries."""
    if form not in PAIR_FORMS:
        raise InputError(f"{where}: unknown pair form {form!r} (forms are {', '.join(PAIR_FORMS)})")
    table = dict(_table(table, where))
    smoothed = PAIR_FORMS[form][2]
    if "smooth" in table and not smoothed:
        raise InputError(f"{where}: smooth: pair form {form} has no smoothed cutoff")
    out = {"smooth": _smooth(table.pop("smooth", smooth), f"{where}.smooth")} if smoothed else {}
    seen = set()
    for key, value in table.items():
        out[key] = _entry(value, f"{where}.{key}", key, species, 2)
        pair = frozenset(key.split("-"))
        if pair in seen:
            raise InputError(f"{where}.{key}: species pair given twice")
        seen.add(pair)
    return out


def _entry(value, where: str, key: str, species: list[str], arity: int):
    """One species-pair or triplet entry: a table of numbers, or "none"."""
    labels = key.split("-")
    if len(labels) != arity or any(label not in species for label in labels):
        shape = "A-B" if arity == 2 else "J-I-K (vertex in the middle)"
        raise InputError(f"{where}: key must be {shape} with species from {', '.join(species)}")
    if isinstance(value, str) and value.strip().lower() == _NONE or value is None:
        return _NONE
    return {name: _number(v, f"{where}.{name}") for name, v in _table(value, where).items()}


def _number(value, where: str) -> float:
    """A finite number from a number or a text "x" or "p/q"."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise InputError(f"{where}: expected a number, got {value!r}")
    number = value
    if isinstance(value, str):
        top, slash, bottom = value.partition("/")
        try:
            number = float(top) / float(bottom) if slash else float(top)
        except (ValueError, ZeroDivisionError):
            raise InputError(f"{where}: expected a number, got {value!r}") from None
    if not math.isfinite(number):
        raise InputError(f"{where}: expected a finite number, got {value!r}")
    return float(number)


def build_potential(tree: dict, name: str, where: str = "potential") -> Potential:
    """The Potential of a normalised tree (see :func:`normalise`); term errors are prefixed by ``where``."""
    species = tree["species"]
    terms = []
    try:
        for form, table in tree["pairs"].items():
            entries = {tuple(k.split("-")): _value(v) for k, v in table.items() if k != "smooth"}
            terms.append(PairTerm(form, species, entries, smooth=table.get("smooth", 2)))
        if tree.get("triplets"):
            entries = {tuple(k.split("-")): _value(v) for k, v in tree["triplets"].items()}
            terms.append(TripletTerm(species, entries))
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None
    return Potential(species, terms, name=name, parameters=tree)


def _value(entry):
    return None if entry == _NONE else entry
