"""A streaming reader for Matrix Market coordinate files (real/integer, general or symmetric).

Format (NIST Matrix Market exchange format, Boisvert, Pozo & Remington 1996): a banner
``%%MatrixMarket matrix coordinate real general|symmetric``, ``%`` comment lines, a size line
``rows cols entries``, then one ``row col value`` line per entry with 1-based indices; a symmetric file
stores only the lower triangle (row ≥ col).

The body is read in pieces of about ``chunk_bytes`` and parsed with numpy, so a 10⁸-entry file never
sits in memory whole; the file's sha256 is computed on the way.  Every error is an :class:`InputError`
naming the file and line.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Iterator

import numpy as np

from eigenfarm.errors import InputError

FIELDS = ("real", "integer", "double")
SYMMETRIES = ("general", "symmetric")


@dataclass
class Header:
    """The banner and size line: ``symmetry`` general|symmetric, ``field``, ``dimension`` (rows = cols),
    ``entries`` announced, ``line`` of the size line."""

    symmetry: str
    field: str
    dimension: int
    entries: int
    line: int


class MatrixMarketReader:
    """Open ``path``, read its header (:attr:`header`); :meth:`chunks` streams validated entries."""

    def __init__(self, path, chunk_bytes: int = 1 << 25):
        self.path, self.chunk_bytes = str(path), int(chunk_bytes)
        self._hash = hashlib.sha256()
        self.lineno = 0
        try:
            self.handle = open(self.path, "rb")
        except OSError as exc:
            raise InputError(f"{self.path}: cannot open: {exc.strerror}") from None
        try:
            self.header = self._read_header()
        except BaseException:
            self.handle.close()
            raise

    def _fail(self, line: int, why: str):
        raise InputError(f"{self.path}: line {line}: {why}")

    def _readline(self) -> str:
        raw = self.handle.readline()
        self._hash.update(raw)
        self.lineno += 1
        if not raw:
            raise InputError(f"{self.path}: file ends in the header (line {self.lineno})")
        return raw.decode("latin-1")

    def _read_header(self) -> Header:
        words = self._readline().split()
        if len(words) != 5 or words[0].lower() != "%%matrixmarket" or words[1].lower() != "matrix":
            self._fail(1, "not a Matrix Market file (expected '%%MatrixMarket matrix coordinate real "
                          "general|symmetric')")
        fmt, field, symmetry = (w.lower() for w in words[2:])
        if fmt != "coordinate":
            self._fail(1, f"format {fmt!r} is not supported; only 'coordinate'")
        if field not in FIELDS:
            self._fail(1, f"field {field!r} is not supported; only real or integer")
        if symmetry not in SYMMETRIES:
            self._fail(1, f"symmetry {symmetry!r} is not supported; only general or symmetric")
        text = self._readline()
        while not text.strip() or text.lstrip().startswith("%"):
            text = self._readline()
        try:
            rows, cols, entries = (int(w) for w in text.split())
        except ValueError:
            self._fail(self.lineno, f"expected the size line 'rows cols entries', got {text.strip()[:60]!r}")
        if rows != cols:
            self._fail(self.lineno, f"the matrix is {rows} × {cols}, not square")
        if rows < 3 or rows % 3 or entries < 0:
            self._fail(self.lineno, f"dimension {rows} is not a positive multiple of 3 (3 rows per atom)")
        return Header(symmetry, field, rows, entries, self.lineno)

    @property
    def sha256(self) -> str:
        """sha256 of the bytes read so far (the whole file once :meth:`chunks` is exhausted)."""
        return self._hash.hexdigest()

    def chunks(self) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]:
        """Yield (rows (m,), cols (m,), values (m,)): 0-based int64 indices and float64 values.

        Checks every line: three columns, integer indices in 1..dimension, finite values, the lower
        triangle for symmetric files, and the announced entry count.
        """
        seen, carry = 0, b""
        with self.handle:
            while True:
                data = self.handle.read(self.chunk_bytes)
                self._hash.update(data)
                cut = (carry + data).rfind(b"\n") if data else len(carry + data) - 1
                piece, carry = (carry + data)[:cut + 1], (carry + data)[cut + 1:]
                if piece.strip():
                    rows, cols, values = self._parse(piece, self.lineno + 1, seen)
                    seen += len(rows)
                    yield rows, cols, values
                self.lineno += piece.count(b"\n")
                if not data:
                    break
        if seen < self.header.entries:
            raise InputError(f"{self.path}: file ends after {seen} of the {self.header.entries} entries "
                             f"the size line (line {self.header.line}) announces")

    def _parse(self, piece: bytes, first_line: int, seen: int):
        lines = piece.decode("latin-1").split("\n")
        try:
            table = np.loadtxt(lines, dtype=float, comments="%", ndmin=2)
        except ValueError:
            self._locate_malformed(lines, first_line)
        if table.shape[1] != 3:
            self._locate_malformed(lines, first_line)
        rows, cols, values = table[:, 0], table[:, 1], table[:, 2]
        self._check(lines, first_line, seen, rows, cols, values)
        return rows.astype(np.int64) - 1, cols.astype(np.int64) - 1, values

    def _check(self, lines, first_line, seen, rows, cols, values):
        n, header = self.header.dimension, self.header
        extra = seen + len(rows) - header.entries
        if extra > 0:
            self._fail(_data_line(lines, first_line, len(rows) - extra),
                       f"more entries than the {header.entries} the size line (line {header.line}) announces")
        bad = np.flatnonzero((rows != np.floor(rows)) | (cols != np.floor(cols)) | (rows < 1) | (cols < 1)
                             | (rows > n) | (cols > n))
        if len(bad):
            k = bad[0]
            self._fail(_data_line(lines, first_line, k),
                       f"row/col ({rows[k]:g}, {cols[k]:g}) is not an index in 1..{n}")
        bad = np.flatnonzero(~np.isfinite(values))
        if len(bad):
            k = bad[0]
            self._fail(_data_line(lines, first_line, k),
                       f"entry (row {rows[k]:.0f}, col {cols[k]:.0f}) is not finite ({values[k]})")
        if header.symmetry == "symmetric":
            bad = np.flatnonzero(rows < cols)
            if len(bad):
                k = bad[0]
                self._fail(_data_line(lines, first_line, k),
                           f"entry (row {rows[k]:.0f}, col {cols[k]:.0f}) lies above the diagonal; a "
                           "symmetric file stores only the lower triangle")

    def _locate_malformed(self, lines, first_line):
        for offset, text in enumerate(lines):
            words = text.split("%")[0].split()
            if not words:
                continue
            try:
                if len(words) != 3:
                    raise ValueError
                int(words[0]), int(words[1]), float(words[2])
            except ValueError:
                self._fail(first_line + offset, f"expected 'row col value', got {text.strip()[:60]!r}")
        self._fail(first_line, "cannot parse the entries from here on")


def _data_line(lines: list[str], first_line: int, k: int) -> int:
    """File line of the k-th (0-based) entry among ``lines`` (skipping blank and comment lines)."""
    count = -1
    for offset, text in enumerate(lines):
        if text.split("%")[0].strip():
            count += 1
            if count == k:
                return first_line + offset
    return first_line + len(lines) - 1
