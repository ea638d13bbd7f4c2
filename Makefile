# eigenfarm: set-up, demo, tests and benchmarks.  Every target sets up its own virtual environment.
PYTHON ?= python3
VENV   ?= .venv
BIN     = $(VENV)/bin
STAMP   = $(VENV)/.eigenfarm-installed
DEMO   ?= eigenfarm-demo

.PHONY: setup demo test bench clean cholmod

$(STAMP): pyproject.toml
	@$(PYTHON) -c 'import sys; sys.exit(0 if sys.version_info >= (3, 11) else "eigenfarm needs Python >= 3.11")'
	@$(PYTHON) -m venv $(VENV) || { echo "python3 -m venv failed: on Debian/Ubuntu run 'apt-get install python3-venv'"; exit 1; }
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e ".[test]"
	@$(MAKE) --no-print-directory cholmod
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

setup: $(STAMP)

demo: $(STAMP)
	$(BIN)/eigenfarm demo --out $(DEMO)

test: $(STAMP)
	$(BIN)/pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/hessian_store_scale.py

clean:
	rm -rf $(VENV) $(DEMO) .pytest_cache
