# Specledger: `make demo` builds the demo registry and starts the UI; `make test` runs every check
# (CI runs it); `make check` is the fast lane: every test not marked slow.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
DEMO_DB ?= demo.db
PORT ?= 8501

.PHONY: demo test check bench install clean ui

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/specledger demo --db $(DEMO_DB) --force
	SPECLEDGER_DATABASE_URL=$(DEMO_DB) $(BIN)/streamlit run ui/app.py --server.port $(PORT) --server.headless true --browser.gatherUsageStats false

TEST_ENV := OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1

test: $(STAMP)
	$(TEST_ENV) $(BIN)/python -m pytest -q -p no:cacheprovider

# Two workers: every test builds its own registry (PostgreSQL databases get unique names),
# so the fast lane splits across the two cores; the full suite stays one process.
check: $(STAMP)
	$(TEST_ENV) $(BIN)/python -m pytest -q -p no:cacheprovider -m "not slow" -n 2

bench: $(STAMP)
	$(TEST_ENV) $(BIN)/python tests/benchmarks/run_all.py

clean:
	rm -rf $(VENV) *.egg-info .pytest_cache .hypothesis
