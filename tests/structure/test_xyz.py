"""Extended XYZ reading and writing: lossless round trips and one precise error per kind of bad input.

The layout is the extended XYZ convention (common practice): a count line, a key=value comment line with
Lattice (cell rows), Properties and pbc, then one line per atom.  Every error must be an InputError whose
message starts with the file name and says the line (or the atom) at fault, once.
"""

from __future__ import annotations

import numpy as np
import pytest

from eigenfarm.errors import InputError
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration
from eigenfarm.structure.xyz import format_xyz, iter_xyz, read_xyz, write_xyz

TRICLINIC = np.array([[4.1, 0.0, 0.0], [1.3, 3.7, 0.0], [-0.6, 0.9, 3.3]])


def awkward_positions(n: int, seed: int) -> np.ndarray:
    """Positions with full 53-bit mantissas, tiny and huge magnitudes, negative zero and subnormals."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(-3, 7, (n, 3)) / 3.0
    x[0] = [1e-300, -0.0, 5e-324]
    x[1] = [np.nextafter(1.0, 2.0), 123456789.123456789, -1 / 3]
    return x


def assert_same_configuration(a: Configuration, b: Configuration) -> None:
    assert a.positions.tobytes() == b.positions.tobytes()  # bit-exact, signs of zero included
    assert a.box.cell.tobytes() == b.box.cell.tobytes()
    assert np.array_equal(a.box.pbc, b.box.pbc)
    assert a.species.tolist() == b.species.tolist()
    assert a.masses.tobytes() == b.masses.tobytes()
    assert a.units == b.units


def test_round_trip_metal_triclinic_mixed_pbc(tmp_path):
    config = Configuration(awkward_positions(5, 1), ["Si", "O", "O", "Si", "H"], Box(TRICLINIC, [True, False, True]),
                           "metal", info={"energy": -12.5, "note": "two words", "seed": 3})
    path = tmp_path / "a.xyz"
    write_xyz(path, config)
    back = read_xyz(path)
    assert_same_configuration(config, back)
    # default masses are not written (they come from the species again), so the file has 4 columns
    assert "masses" not in path.read_text().splitlines()[1]
    # info values come back as their text
    assert back.info == {"energy": "-12.5", "note": "two words", "seed": "3"}


def test_round_trip_explicit_masses_and_reduced_units(tmp_path):
    rng = np.random.default_rng(2)
    masses = rng.uniform(0.5, 2.0, 6)
    config = Configuration(awkward_positions(6, 2), ["A", "B", "A", "A", "B", "B"], Box(TRICLINIC), "reduced",
                           masses=masses)
    write_xyz(tmp_path / "r.xyz", config)
    back = read_xyz(tmp_path / "r.xyz")
    assert_same_configuration(config, back)
    assert back.units.name == "reduced"


def test_non_default_metal_masses_are_written(tmp_path):
    """Isotope masses (²H on a hydrogen site, ³⁰Si) differ from the table and must survive."""
    config = Configuration(np.eye(3), ["H", "Si", "Si"], Box.cubic(6.0), "metal", masses=[2.014, 28.085, 29.974])
    write_xyz(tmp_path / "m.xyz", config)
    assert "masses:R:1" in (tmp_path / "m.xyz").read_text()
    assert read_xyz(tmp_path / "m.xyz").masses.tolist() == [2.014, 28.085, 29.974]


def test_multi_frame(tmp_path):
    frames = [Configuration(awkward_positions(n, n), ["Cu"] * n, Box.cubic(5.0 + n), "metal", info={"frame": n})
              for n in (2, 4, 3)]
    write_xyz(tmp_path / "f.xyz", frames)
    back = list(iter_xyz(tmp_path / "f.xyz"))
    assert len(back) == 3
    for a, b in zip(frames, back):
        assert_same_configuration(a, b)
        assert b.info["frame"] == str(a.info["frame"])
    assert_same_configuration(read_xyz(tmp_path / "f.xyz", frame=2), frames[2])
    with pytest.raises(InputError, match="has no frame 3"):
        read_xyz(tmp_path / "f.xyz", frame=3)


@pytest.mark.parametrize("value", ["two words", "Vashishta's silica", 'say "hi" twice', '"lead', "", "a=b",
                                   "tab\there", "ünïcode ω"])
def test_info_values_round_trip(tmp_path, value):
    """Whatever text the writer accepts, the reader gives back unchanged."""
    config = Configuration(np.zeros((1, 3)), ["Si"], Box.cubic(3.0), "metal", info={"note": value, "after": "x"})
    write_xyz(tmp_path / "i.xyz", config)
    assert read_xyz(tmp_path / "i.xyz").info == {"note": value, "after": "x"}


def test_info_value_that_cannot_be_written_is_refused(tmp_path):
    """A newline (or both quote kinds with a space) has no spelling on a comment line: refused, not mangled."""
    for value in ("two\nlines", "it's \"both\""):
        config = Configuration(np.zeros((1, 3)), ["Si"], Box.cubic(3.0), "metal", info={"note": value})
        with pytest.raises(InputError, match="note"):
            write_xyz(tmp_path / "bad.xyz", config)
        assert list(tmp_path.iterdir()) == []  # no file, no partial file left behind


def test_write_refuses_to_replace_unless_asked(tmp_path):
    config = Configuration(np.zeros((1, 3)), ["Si"], Box.cubic(3.0), "metal")
    path = tmp_path / "o.xyz"
    path.write_text("keep me")
    with pytest.raises(InputError, match="already exists"):
        write_xyz(path, config)
    assert path.read_text() == "keep me"
    write_xyz(path, config, overwrite=True)
    assert read_xyz(path).n_atoms == 1


def test_reading_a_plain_frame_with_defaults(tmp_path):
    """No Properties: species and pos; no Lattice: an open box; all elements: metal units and table masses;
    Windows line ends are fine."""
    (tmp_path / "p.xyz").write_bytes(b"2\r\nLattice=\"3 0 0 0 3 0 0 0 3\"\r\nC 0 0 0\r\nO 1.1 0 0\r\n")
    config = read_xyz(tmp_path / "p.xyz")
    assert config.units.name == "metal" and config.box.pbc.all()
    assert config.masses.tolist() == [12.011, 15.999]
    (tmp_path / "q.xyz").write_text("2\n\nA 0 0 0\nB 1 0 0\n")
    config = read_xyz(tmp_path / "q.xyz")
    assert config.units.name == "reduced" and not config.box.pbc.any()
    assert config.masses.tolist() == [1.0, 1.0]


GOOD_HEADER = 'Lattice="5 0 0 0 5 0 0 0 5" Properties=species:S:1:pos:R:3 pbc="T T T"'

#: (file text, what the message must say besides the file name) for each kind of bad input
BAD_INPUTS = {
    "count-not-a-number": ("three\n" + GOOD_HEADER + "\nSi 0 0 0\n", "line 1: expected the number of atoms"),
    "count-negative": ("-2\n" + GOOD_HEADER + "\nSi 0 0 0\n", "line 1: expected the number of atoms"),
    # a count that is too small leaves an atom line where the next frame's count should be
    "count-too-small": ("1\n" + GOOD_HEADER + "\nSi 0 0 0\nSi 1 1 1\n", "line 4: expected the number of atoms"),
    "too-few-columns": ("2\n" + GOOD_HEADER + "\nSi 0 0 0\nSi 1 1\n", "line 4: atom 1: expected 4 columns, found 3"),
    "too-many-columns": ("2\n" + GOOD_HEADER + "\nSi 0 0 0 0\nSi 1 1 1\n",
                         "line 3: atom 0: expected 4 columns, found 5"),
    "non-numeric": ("2\n" + GOOD_HEADER + "\nSi 0 0 0\nSi 1 x 1\n", "line 4: atom 1: pos"),
    "nan-coordinate": ("2\n" + GOOD_HEADER + "\nSi 0 0 0\nSi 1 nan 1\n", "atom 1: non-finite position"),
    "unknown-species-metal": ("3\n" + GOOD_HEADER + " units=metal\nSi 0 0 0\nSi 1 1 1\nQq 2 2 2\n",
                              "atom 2: unknown species 'Qq' in metal units"),
    "lattice-8-numbers": ('2\nLattice="5 0 0 0 5 0 0 0"\nSi 0 0 0\nSi 1 1 1\n', "line 2: Lattice has 8 numbers"),
    "lattice-not-numbers": ('2\nLattice="5 0 0 0 5 0 0 0 x"\nSi 0 0 0\nSi 1 1 1\n', "line 2: Lattice="),
    "lattice-flat": ('2\nLattice="5 0 0 0 5 0 5 0 0"\nSi 0 0 0\nSi 1 1 1\n', "line 2: cell: lattice vectors"),
    "pbc-without-lattice": ('2\npbc="T T F"\nSi 0 0 0\nSi 1 1 1\n', "line 2: pbc has a periodic direction"),
    "pbc-two-words": ('2\nLattice="5 0 0 0 5 0 0 0 5" pbc="T T"\nSi 0 0 0\nSi 1 1 1\n', "line 2: pbc="),
    "unknown-units": ("2\n" + GOOD_HEADER + " units=atomic\nSi 0 0 0\nSi 1 1 1\n", "line 2: unknown unit system"),
    "zero-mass": ("3\n" + GOOD_HEADER.replace("pos:R:3", "pos:R:3:masses:R:1") + "\nSi 0 0 0 28\nSi 1 1 1 0\nO 2 2 2 16\n",
                  "line 4: atom 1: mass"),
    "negative-mass": ("2\n" + GOOD_HEADER.replace("pos:R:3", "pos:R:3:masses:R:1") + "\nSi 0 0 0 -28\nSi 1 1 1 28\n",
                      "line 3: atom 0: mass"),
    "properties-without-pos": ("1\nLattice=\"5 0 0 0 5 0 0 0 5\" Properties=species:S:1\nSi\n",
                               "line 2: Properties="),
    "comment-not-key-value": ("1\nLattice=\"5 0 0 0 5 0 0 0 5\" \"stray\nSi 0 0 0\n", "line 2: cannot read"),
    "ends-before-comment": ("2\n", "line 2: file ends before the comment line"),
    "ends-inside-atoms": ("3\n" + GOOD_HEADER + "\nSi 0 0 0\nSi 1 1 1\n", "file ends after 2 of 3 atoms"),
    "second-frame-ends-early": ("1\n" + GOOD_HEADER + "\nSi 0 0 0\n2\n" + GOOD_HEADER + "\nSi 0 0 0\n",
                                "file ends after 1 of 2 atoms (frame starting line 4)"),
}


@pytest.mark.parametrize("name", sorted(BAD_INPUTS))
def test_bad_input_names_file_and_place(tmp_path, name):
    text, expected = BAD_INPUTS[name]
    path = tmp_path / f"{name}.xyz"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as err:
        list(iter_xyz(path))
    message = str(err.value)
    assert message.startswith(str(path)), message
    assert expected in message, message
    assert message.count(str(path)) == 1, f"file named more than once: {message}"
    assert "\n" not in message


def test_non_utf8_file_names_the_line(tmp_path):
    path = tmp_path / "latin1.xyz"
    path.write_bytes(b"2\n" + GOOD_HEADER.encode() + b"\nSi 0 0 0\nS\xe9 1 1 1\n")
    with pytest.raises(InputError) as err:
        read_xyz(path)
    message = str(err.value)
    assert message.startswith(f"{path}: line 4:") and "UTF-8" in message, message


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="cannot open"):
        read_xyz(tmp_path / "nowhere.xyz")


def test_format_is_lossless_text():
    """17 significant digits reproduce every double (IEEE 754-2008 §5.12.2, from memory)."""
    config = Configuration(awkward_positions(4, 9), ["Si"] * 4, Box(TRICLINIC), "metal")
    rows = format_xyz(config).splitlines()[2:]
    parsed = np.array([[float(w) for w in row.split()[1:]] for row in rows])
    assert parsed.tobytes() == config.positions.tobytes()
