"""PETSc/SLEPc backend (optional): MUMPS symmetric-indefinite LDLᵀ of D − σI, in one process or on MPI ranks.

MUMPS (Amestoy, Duff, Koster & L'Excellent, SIAM J. Matrix Anal. Appl. 23, 15, 2001) through PETSc's
``PCCHOLESKY`` on a symmetric AIJ matrix that is not flagged positive definite, i.e. MUMPS with SYM = 2:
an LDLᵀ factorisation with 1×1 and 2×2 threshold pivots, so any σ is allowed, inside the spectrum too.
The number of negative pivots (MUMPS INFOG(12)) is the number of eigenvalues of D below σ by Sylvester's
law of inertia.  Two MUMPS controls make the inertia right (../shared/wheels/README.md, PETSc's
``MatGetInertia`` manual page): ICNTL(13) = 1 keeps the root front out of ScaLAPACK, whose
factorisation reports no inertia (so on several ranks the count would be wrong), and ICNTL(24) = 1 with
CNTL(3) detects null pivots, whose number (INFOG(28)) is the zero count: a shift with a null pivot is an
eigenvalue of D, :class:`SingularShift`.  As for every backend, a solve then measures the backward error
and bounds the distance from σ to the nearest eigenvalue (:mod:`.common`); a shift closer than
``zero_tol`` × ‖D − σI‖₁ to an eigenvalue is also :class:`SingularShift`.

``factor`` takes D either as a scipy/numpy n × n matrix (factored in this process) or as a
:class:`eigenfarm.solve.sharded.ShardedMatrix` (rows distributed over the ranks of its communicator,
factored collectively: every rank calls ``factor`` and ``solve`` with the same arguments).

Setting up: ``make slepc`` (Debian's Open MPI, OpenBLAS, ScaLAPACK and MUMPS, then petsc, petsc4py,
slepc, slepc4py 3.26.1 and mpi4py; docs/parallel-solves.md).  Without them eigenfarm works and this
backend says how to install it.

Example::

    >>> f = SlepcBackend().factor(D, 1.5)    # D: n × n sparse symmetric, eigenvalues λ = ω²
    >>> f.inertia().below, f.solve(b)        # number of λ < 1.5; (D − 1.5 I)⁻¹ b for b (n,) or (n, k)
"""

from __future__ import annotations

import ctypes
import functools
import importlib.util
import os
import time

import numpy as np
import scipy.sparse as sp

from eigenfarm.errors import InputError
from eigenfarm.solve.backend import Backend, Factor, Inertia, SingularShift
from eigenfarm.solve.backends.common import check_factor, check_shift, shifted

#: how to install the optional dependency (shown when it is missing)
INSTALL_HINT = ("run 'make slepc' in the eigenfarm checkout (Debian's libopenmpi-dev libmumps-dev "
                "libscalapack-openmpi-dev, then pip install 'eigenfarm[slepc]'; see docs/parallel-solves.md)")
#: MUMPS ICNTL(14) workspace margins (per cent over the analysis estimate) tried in turn, in one process
#: and on several ranks.  Measured (benchmarks/results/mpi_scale.md): on 2 ranks the default 20 % fell
#: short at 108,000 atoms after 300 s of factorisation and 50 % worked; at 32,000 atoms 50 % costs 13 %
#: more peak memory per rank than 20 %.
WORKSPACE_MARGINS = {False: (20, 60, 150), True: (50, 100, 200)}
#: MUMPS INFOG(1) codes meaning "a workspace was too small" (MUMPS user guide, INFO(1) −8, −9, −11, −14
#: — from memory)
WORKSPACE_SHORT = (-8, -9, -11, -14)

#: MUMPS ICNTL(7) sequential orderings by name (MUMPS user guide, ICNTL(7))
ORDERINGS = {"auto": 7, "amd": 0, "amf": 2, "scotch": 3, "pord": 4, "metis": 5, "qamd": 6}


def available() -> bool:
    """True if petsc4py and slepc4py can be imported here (imports neither: that would start MPI)."""
    return all(importlib.util.find_spec(name) is not None for name in ("petsc4py", "slepc4py", "mpi4py"))


def require():
    """(PETSc, SLEPc) modules, initialised; :class:`InputError` saying how to install them if missing."""
    if not available():
        raise InputError(f"backend 'slepc' needs petsc4py, slepc4py and mpi4py, which are not installed: "
                         f"{INSTALL_HINT}")
    try:
        return _loaded()
    except ImportError as exc:  # installed but its libraries (MPI, MUMPS) are missing
        raise InputError(f"backend 'slepc': PETSc/SLEPc do not load ({exc}): {INSTALL_HINT}") from None


@functools.cache
def _loaded():
    """Import and initialise PETSc and SLEPc once per process (this starts MPI)."""
    import petsc4py
    import slepc4py

    petsc4py.init()
    slepc4py.init()
    from petsc4py import PETSc
    from slepc4py import SLEPc

    _forget_mpi_start()
    return PETSc, SLEPc


def _forget_mpi_start() -> None:
    """Unset the variables MPI's start put into this process's environment (Open MPI: PMIX_RANK, OMPI_MCA_…),
    i.e. those Python's ``os.environ`` does not hold.  Child processes inherit the C environment: without
    this, an ``eigenfarm`` started from a process that had counted with MUMPS (the ``auto`` backend) took
    itself for an MPI rank, and a dask worker would try to join this process's MPI job.  Variables an MPI
    launcher set for this process are in ``os.environ`` and stay."""
    libc = ctypes.CDLL(None)
    entries = ctypes.POINTER(ctypes.c_char_p).in_dll(libc, "environ")
    names, i = [], 0
    while entries[i]:
        names.append(os.fsdecode(entries[i].split(b"=", 1)[0]))
        i += 1
    for name in names:
        if name not in os.environ:
            os.unsetenv(name)


def configure_mumps(ksp, null_pivot: float) -> None:
    """Make ``ksp`` (its operator set) one MUMPS LDLᵀ solve with exact inertia: preonly + Cholesky
    (SYM = 2 for a matrix not flagged SPD), ICNTL(13) = 1 and null-pivot detection ICNTL(24) = 1 with
    threshold CNTL(3) = ``null_pivot`` (module doc)."""
    PETSc, _ = require()
    ksp.setType(PETSc.KSP.Type.PREONLY)
    pc = ksp.getPC()
    pc.setType(PETSc.PC.Type.CHOLESKY)
    pc.setFactorSolverType(PETSc.Mat.SolverType.MUMPS)
    pc.setFactorSetUpSolverType()
    factor = pc.getFactorMatrix()
    factor.setMumpsIcntl(13, 1)
    factor.setMumpsIcntl(24, 1)
    factor.setMumpsCntl(3, null_pivot)


def mumps_statistics(factor_matrix) -> dict:
    """What a MUMPS factorisation cost: entries in the factors (INFOG(29), negative means millions),
    ordering used (INFOG(7)) and the largest memory on one rank in MiB (INFOG(21))."""
    entries = int(factor_matrix.getMumpsInfog(29))
    return {"factor_nnz": entries if entries >= 0 else -entries * 10**6,
            "ordering": int(factor_matrix.getMumpsInfog(7)),
            "max_rank_mib": int(factor_matrix.getMumpsInfog(21))}


class SlepcFactor(Factor):
    """(D − σI)⁻¹ through a MUMPS factor held by a PETSc ``ksp`` on the vector ``layout``
    (:class:`eigenfarm.solve.sharded.VectorLayout`), with the inertia MUMPS reported."""

    def __init__(self, sigma: float, n: int, stats: dict, ksp, layout, inertia: Inertia):
        super().__init__(sigma, n, stats)
        self.ksp, self.layout, self._inertia = ksp, layout, inertia

    def solve(self, b: np.ndarray) -> np.ndarray:
        """(D − σI)⁻¹ b for b (n,) or (n, k), the same on every rank; the result is on every rank."""
        b = np.asarray(b, dtype=np.float64)
        columns = b.reshape(self.n, -1)
        out = np.empty_like(columns)
        rhs, x = self.layout.vector(), self.layout.vector()
        for j in range(columns.shape[1]):
            self.layout.fill(rhs, columns[:, j])
            self.ksp.solve(rhs, x)
            out[:, j] = self.layout.everywhere(x)
        return out.reshape(b.shape)

    def solve_vec(self, b, x) -> None:
        """x = (D − σI)⁻¹ b for distributed PETSc vectors (no gathering)."""
        self.ksp.solve(b, x)

    def inertia(self) -> Inertia:
        return self._inertia


class SlepcBackend(Backend):
    """MUMPS LDLᵀ of D − σI through PETSc; exact inertia at any σ, in one process or on MPI ranks.

    ``ordering``: a key of :data:`ORDERINGS` (MUMPS ICNTL(7)); ``null_pivot``: MUMPS CNTL(3), pivots
    this small relative to ‖D − σI‖ count as zero; ``zero_tol``: σ closer than zero_tol × ‖D − σI‖₁ to
    an eigenvalue raises SingularShift.
    """

    name = "slepc"
    provides_inertia = True
    handles_indefinite = True
    distributed = True

    def __init__(self, ordering: str = "auto", null_pivot: float = 1e-12, zero_tol: float = 1e-12):
        if not available():  # checked without starting MPI: PETSc is loaded at the first factorisation
            require()
        if ordering not in ORDERINGS:
            raise InputError(f"slepc backend: unknown ordering {ordering!r}: choose one of {', '.join(ORDERINGS)}")
        self.ordering, self.null_pivot, self.zero_tol = ordering, float(null_pivot), float(zero_tol)

    def factor(self, D, sigma: float) -> SlepcFactor:
        """Factor D − σI (D: n × n symmetric scipy/numpy, or a ShardedMatrix; σ in D's eigenvalue units)."""
        from eigenfarm.solve.sharded import ShardedMatrix, VectorLayout

        start = time.perf_counter()
        if isinstance(D, ShardedMatrix):
            PETSc, _ = require()
            # petsc4py leaves objects of a parallel communicator that Python no longer references to this
            # collective call (a destroy in the garbage collector could deadlock): without it every
            # earlier factor stayed in memory (measured: 2 × 1.3 GiB per rank at 32,000 atoms)
            PETSc.garbage_cleanup(D.layout.comm)
            sigma = check_shift(sigma)
            A, layout = D.shifted(sigma), D.layout
            operator, norm = D.operator(A), A.norm(PETSc.NormType.NORM_1)
        else:
            operator, sigma, norm = shifted(D, sigma)
            layout = VectorLayout.serial(operator.shape[0])
            A = layout.matrix(sp.csr_matrix(operator))  # CSC of a symmetric matrix is its own CSR
        ksp = self._factored(A, sigma)
        stats = {"backend": self.name, "ranks": layout.size, **mumps_statistics(ksp.getPC().getFactorMatrix()),
                 "factor_seconds": time.perf_counter() - start}
        below, zero, above = ksp.getPC().getFactorMatrix().getInertia()
        if zero:
            raise SingularShift(f"shift {sigma!r} is numerically an eigenvalue of D ({zero} null pivots in MUMPS)")
        factor = SlepcFactor(sigma, layout.n, stats, ksp, layout, Inertia(int(below), 0, int(above)))
        factor.stats.update(check_factor(operator, factor.solve, sigma, norm, self.zero_tol))
        factor.stats["seconds"] = time.perf_counter() - start
        return factor

    def _factored(self, A, sigma: float):
        """A KSP holding the MUMPS factor of the PETSc matrix A = D − σI.  MUMPS's workspace estimate can
        fall short, above all on several ranks (INFOG(1) = −9, measured at 108,000 atoms on 2 ranks with
        the default ICNTL(14) = 20 %): the factorisation is then repeated with a larger margin
        (:data:`WORKSPACE_MARGINS`)."""
        PETSc, _ = require()
        A.setOption(PETSc.Mat.Option.SYMMETRIC, True)
        for margin in WORKSPACE_MARGINS[A.getComm().getSize() > 1]:
            ksp = PETSc.KSP().create(A.getComm())
            ksp.setOperators(A)
            configure_mumps(ksp, self.null_pivot)
            factor = ksp.getPC().getFactorMatrix()
            factor.setMumpsIcntl(7, ORDERINGS[self.ordering])
            factor.setMumpsIcntl(14, margin)
            error = None
            try:
                ksp.setUp()
            except PETSc.Error as exc:
                error = exc
            status = int(ksp.getPC().getFactorMatrix().getMumpsInfog(1))
            if status == 0 and error is None:
                return ksp
            ksp.destroy()
            if status not in WORKSPACE_SHORT:
                break
        short = f", workspace still short at ICNTL(14) = {margin} %" if status in WORKSPACE_SHORT else ""
        raise InputError(f"slepc backend: MUMPS could not factor D − σI at σ = {sigma!r} "
                         f"(INFOG(1) = {status}{short})" + (f": {error}" if error else ""))

    def describe(self) -> dict:
        return {"backend": self.name, "method": "MUMPS LDLᵀ (SYM = 2) through PETSc, ICNTL(13) = 1, ICNTL(24) = 1",
                "ordering": self.ordering, "null_pivot": self.null_pivot, "zero_tol": self.zero_tol}
