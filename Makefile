# Two commands on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench lint mutation venv clean

venv: $(STAMP)

$(STAMP): pyproject.toml constraints.txt
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -c constraints.txt -e ".[dev]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/levgap demo --out demo-out

# The suite runs on every core (pytest-xdist); a module's tests stay on one worker, so a
# fixture a module shares is built once. The workers fill the cores, so each keeps one BLAS
# thread (OpenBLAS threads waiting beside another worker cost about 15% more CPU, measured).
WORKERS ?= auto
TEST_THREADS ?= 1
test: $(STAMP)
	OPENBLAS_NUM_THREADS=$(TEST_THREADS) OMP_NUM_THREADS=$(TEST_THREADS) \
	  $(BIN)/python -m pytest -q -n $(WORKERS) --dist loadfile

bench: $(STAMP)
	$(BIN)/python benchmark/run.py

lint: $(STAMP)
	$(BIN)/ruff check src tests benchmark tools

mutation: $(STAMP)
	$(BIN)/python tools/mutation.py $(MODULES)

clean:
	rm -rf $(VENV) demo-out .pytest_cache mutants
