# Two commands do all the set-up on a fresh machine (Python 3.11, make, bash):
#   make run    - start the page on an embedded SQLite database with demo data
#   make test   - run the whole test suite
# Both create the virtual environment .venv on first use.

PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp

.PHONY: run test bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

# make run                         - the page on the demo database demo-data/phantomlab-demo.sqlite
# make run DB=URL SHELF=STOCKS.toml - the page on your lab's own database (never receives demo data)
run: $(STAMP)
	$(BIN)/python -m streamlit run app.py --server.headless true \
	  --browser.gatherUsageStats false --client.toolbarMode minimal \
	  $(if $(DB)$(SHELF),--) $(if $(DB),--db "$(DB)") $(if $(SHELF),--shelf "$(SHELF)")

# One BLAS thread: the suite's small matrices run slower with threads fighting over 2 cores.
test: $(STAMP)
	OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 $(BIN)/python -m pytest

bench: $(STAMP)
	status=0; for script in bench/*.py; do $(BIN)/python $$script || status=1; done; exit $$status

clean:
	rm -rf $(VENV) .pytest_cache build *.egg-info
