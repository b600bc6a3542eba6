# Two commands a new user needs: `make demo` and `make test` (`make check` runs the linter and type checker).
# Each creates .venv with python3 when missing and installs the project from its own files.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test check lab setup clean benchmarks

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,cluster]'
	touch $(STAMP)

setup: $(STAMP)

# The test files run on one process per core (pytest-xdist), each file's tests on one of them so that a
# file's shared fixtures are built once.
test: $(STAMP)
	$(BIN)/python -m pytest -n auto --dist loadfile

# Lint, format check and type check (configuration in pyproject.toml); about 10 s, run by .ci/run before the tests.
check: $(STAMP)
	$(BIN)/ruff check riskbench tests
	$(BIN)/ruff format --check riskbench tests
	$(BIN)/mypy riskbench

# The whole analysis of configs/demo.toml on the committed demo cohort; the last line printed is the report.
demo: $(STAMP)
	$(BIN)/riskbench run-analysis configs/demo.toml --out results/demo --overwrite

# JupyterLab on notebooks/ with this environment as the "riskbench" kernel; run 01..04 in order
# (each reads the previous stage's files in results/lab/).
lab: $(STAMP)
	$(BIN)/python -m pip install --quiet -e '.[lab]'
	$(BIN)/python -m ipykernel install --sys-prefix --name riskbench --display-name "riskbench (this environment)"
	$(BIN)/jupyter lab --notebook-dir=notebooks $(if $(filter 0,$(shell id -u)),--allow-root,)

benchmarks: $(STAMP)
	for f in benchmarks/*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) results build *.egg-info
