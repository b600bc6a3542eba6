# Two commands a new user needs: `make demo` and `make test`.
# Each creates .venv with python3 when missing and installs the project from its own files.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test lab setup clean benchmarks

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,cluster]'
	touch $(STAMP)

setup: $(STAMP)

test: $(STAMP)
	$(BIN)/python -m pytest

demo: $(STAMP)
	$(BIN)/riskbench demo-summary --data demo_data/clean --out results/demo

lab: $(STAMP)
	$(BIN)/python -m pip install --quiet -e '.[lab]'
	$(BIN)/python -m ipykernel install --sys-prefix --name riskbench --display-name "riskbench (.venv)"
	$(BIN)/jupyter lab notebooks/

benchmarks: $(STAMP)
	for f in benchmarks/*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) results build *.egg-info
