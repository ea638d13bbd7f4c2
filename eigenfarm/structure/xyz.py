"""Extended XYZ reading and writing.

Frame layout (common practice of the extended XYZ convention):

    line 1   number of atoms N
    line 2   key=value pairs: Lattice="ax ay az bx by bz cx cy cz" (cell rows),
             Properties=species:S:1:pos:R:3[:masses:R:1 ...], pbc="T T T", and our own key
             units=metal|reduced (default metal when the species are all elements, reduced otherwise)
    N lines  one atom each, columns as Properties says.

Several frames may follow each other in one file.  Errors name the file and line.
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Iterator

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration, species_masses
from eigenfarm.structure.elements import ATOMIC_WEIGHTS
from eigenfarm.structure.units import get_units

_PAIR = re.compile(r'\s*([A-Za-z_][\w\-]*)\s*=\s*("[^"]*"|\'[^\']*\'|\S+)')
_TYPES = {"S": str, "R": float, "I": int, "L": str}


def _parse_comment(text: str, where: str) -> dict[str, str]:
    info: dict[str, str] = {}
    pos = 0
    text = text.strip()
    while pos < len(text):
        m = _PAIR.match(text, pos)
        if not m:
            raise InputError(f"{where}: cannot read key=value pairs near {text[pos:pos + 30]!r}")
        value = m.group(2)
        if value[:1] in "\"'":
            value = value[1:-1]
        info[m.group(1)] = value
        pos = m.end()
    return info


def _parse_properties(spec: str, where: str) -> list[tuple[str, str, int]]:
    parts = spec.split(":")
    if len(parts) % 3:
        raise InputError(f"{where}: Properties={spec!r} is not name:type:count triples")
    props = []
    for k in range(0, len(parts), 3):
        name, kind, count = parts[k:k + 3]
        if kind not in _TYPES or not count.isdigit():
            raise InputError(f"{where}: Properties entry {name}:{kind}:{count} is malformed")
        props.append((name, kind, int(count)))
    names = [p[0] for p in props]
    for needed in ("species", "pos"):
        if needed not in names:
            raise InputError(f"{where}: Properties={spec!r} has no {needed!r} column")
    return props


def _parse_box(info: dict[str, str], positions: np.ndarray, where: str) -> Box:
    pbc_text = info.get("pbc", "T T T" if "Lattice" in info else "F F F")
    pbc_words = pbc_text.replace(",", " ").split()
    if len(pbc_words) != 3 or any(w not in {"T", "F", "True", "False", "1", "0"} for w in pbc_words):
        raise InputError(f"{where}: pbc={pbc_text!r} must be three of T/F")
    pbc = np.array([w in {"T", "True", "1"} for w in pbc_words])
    if "Lattice" in info:
        try:
            cell = np.array(info["Lattice"].split(), dtype=float)
        except ValueError:
            raise InputError(f"{where}: Lattice={info['Lattice']!r} is not nine numbers") from None
        if cell.size != 9:
            raise InputError(f"{where}: Lattice has {cell.size} numbers, needs 9")
        try:
            return Box(cell.reshape(3, 3), pbc)
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from None
    if pbc.any():
        raise InputError(f"{where}: pbc has a periodic direction but there is no Lattice")
    lo, hi = positions.min(axis=0), positions.max(axis=0)
    return Box(np.diag(np.maximum(hi - lo, 1.0) + 1.0), pbc)


def _read_frame(lines: Iterator[tuple[int, str]], first: tuple[int, str], path: str) -> Configuration:
    lineno, text = first
    try:
        n = int(text.strip())
        if n < 1:
            raise ValueError
    except ValueError:
        raise InputError(f"{path}: line {lineno}: expected the number of atoms, got {text.strip()!r}") from None
    try:
        comment_no, comment = next(lines)
    except StopIteration:
        raise InputError(f"{path}: line {lineno + 1}: file ends before the comment line") from None
    where = f"{path}: line {comment_no}"
    info = _parse_comment(comment, where)
    props = _parse_properties(info.get("Properties", "species:S:1:pos:R:3"), where)
    width = sum(p[2] for p in props)
    columns: dict[str, list] = {name: [] for name, _, _ in props}
    for atom in range(n):
        try:
            row_no, row = next(lines)
        except StopIteration:
            raise InputError(f"{path}: file ends after {atom} of {n} atoms (frame starting line {lineno})") from None
        words = row.split()
        if len(words) != width:
            raise InputError(f"{path}: line {row_no}: atom {atom}: expected {width} columns, found {len(words)}")
        col = 0
        for name, kind, count in props:
            chunk = words[col:col + count]
            col += count
            try:
                columns[name].append([_TYPES[kind](w) for w in chunk])
            except ValueError:
                raise InputError(f"{path}: line {row_no}: atom {atom}: {name} {' '.join(chunk)!r} is not {kind}") from None
    species = np.array([s[0] for s in columns["species"]])
    positions = np.array(columns["pos"], dtype=float)
    masses = np.array(columns["masses"], dtype=float).reshape(-1) if "masses" in columns else None
    units_name = info.get("units") or ("metal" if set(species) <= set(ATOMIC_WEIGHTS) else "reduced")
    try:
        units = get_units(units_name)
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None
    box = _parse_box(info, positions, where)  # its errors already name the line
    if masses is not None:
        bad = np.flatnonzero(~(np.isfinite(masses) & (masses > 0)))
        if len(bad):
            raise InputError(f"{path}: line {comment_no + 1 + bad[0]}: atom {bad[0]}: mass {masses[bad[0]]:g} "
                             "must be positive")
    extra = {k: v for k, v in info.items() if k not in {"Lattice", "Properties", "pbc", "units"}}
    return Configuration(positions, species, box, units, masses, extra, source=f"{path} (frame at line {lineno})")


def iter_xyz(path: str | os.PathLike) -> Iterator[Configuration]:
    """Yield each frame of the extended XYZ file ``path`` as a :class:`Configuration`."""
    path = str(path)
    try:
        handle = open(path, "rb")
    except OSError as exc:
        raise InputError(f"{path}: cannot open: {exc.strerror}") from None

    def numbered():
        for k, raw in enumerate(handle):
            try:
                yield k + 1, raw.decode("utf-8")
            except UnicodeDecodeError as exc:
                raise InputError(f"{path}: line {k + 1}: not UTF-8 text (byte {exc.start + 1} of the line)") from None

    with handle:
        lines = numbered()
        for first in lines:
            if first[1].strip():
                yield _read_frame(lines, first, path)


def read_xyz(path: str | os.PathLike, frame: int = 0) -> Configuration:
    """Read frame ``frame`` (default the first) of an extended XYZ file."""
    for k, config in enumerate(iter_xyz(path)):
        if k == frame:
            return config
    raise InputError(f"{path}: has no frame {frame}")


def _info_item(key, value) -> str:
    """``key=value`` as :func:`_parse_comment` reads it back: quoted when empty, holding whitespace or
    starting with a quote; a value no quoting can carry (a line break, both quote kinds) is refused."""
    key, text = str(key), str(value)
    if not re.fullmatch(r"[A-Za-z_][\w\-]*", key):
        raise InputError(f"info key {key!r} cannot be written (letters, digits, _ and -, not first a digit)")
    if text and text[0] not in "\"'" and not any(c.isspace() for c in text):
        return f"{key}={text}"
    quote = '"' if '"' not in text else "'"
    if "\n" in text or "\r" in text or quote in text:
        raise InputError(f"info {key}={text!r} cannot be written on an extended XYZ comment line")
    return f"{key}={quote}{text}{quote}"


def format_xyz(config: Configuration, write_masses: bool | None = None) -> str:
    """The extended XYZ text of one frame (positions with 17 significant digits: lossless)."""
    if write_masses is None:
        default = None
        try:
            default = species_masses(config.species, config.units)
        except InputError:
            pass
        write_masses = default is None or not np.array_equal(default, config.masses)
    props = "species:S:1:pos:R:3" + (":masses:R:1" if write_masses else "")
    lattice = " ".join(repr(float(x)) for x in config.box.cell.reshape(-1))
    pbc = " ".join("T" if p else "F" for p in config.box.pbc)
    extra = " ".join(_info_item(k, v) for k, v in config.info.items())
    header = f'Lattice="{lattice}" Properties={props} pbc="{pbc}" units={config.units.name} {extra}'.rstrip()
    table = np.column_stack([config.positions, config.masses[:, None]] if write_masses else [config.positions])
    numbers = [" ".join(f"{v:.17g}" for v in row) for row in table.tolist()]
    rows = [f"{len(config.positions)}", header]
    rows += [f"{s} {n}" for s, n in zip(config.species.tolist(), numbers)]
    return "\n".join(rows) + "\n"


def write_xyz(path: str | os.PathLike, configs, overwrite: bool = False) -> None:
    """Write one configuration or a list of them (frames) to ``path`` atomically.

    Refuses to replace an existing file unless ``overwrite``.
    """
    path = Path(path)
    if isinstance(configs, Configuration):
        configs = [configs]
    if path.exists() and not overwrite:
        raise InputError(f"{path}: already exists (pass overwrite to replace it)")
    tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
    try:
        with open(tmp, "w", encoding="utf-8") as handle:
            for config in configs:
                handle.write(format_xyz(config))
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    os.replace(tmp, path)
