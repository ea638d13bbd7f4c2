# eigenfarm: set-up, demo, tests and benchmarks.  Every target sets up its own virtual environment.
PYTHON ?= python3
VENV   ?= .venv
BIN     = $(VENV)/bin
STAMP   = $(VENV)/.eigenfarm-installed
DEMO   ?= eigenfarm-demo

.PHONY: setup demo test bench clean

$(STAMP): pyproject.toml
	@$(PYTHON) -c 'import sys; sys.exit(0 if sys.version_info >= (3, 11) else "eigenfarm needs Python >= 3.11")'
	@$(PYTHON) -m venv $(VENV) || { echo "python3 -m venv failed: on Debian/Ubuntu run 'apt-get install python3-venv'"; exit 1; }
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e ".[test]"
	@touch $(STAMP)

setup: $(STAMP)

demo: $(STAMP)
	$(BIN)/eigenfarm demo --out $(DEMO)

test: $(STAMP)
	$(BIN)/pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/hessian_store_scale.py

clean:
	rm -rf $(VENV) $(DEMO) .pytest_cache
