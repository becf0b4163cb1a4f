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

# make run             - the page on the demo database demo-data/phantomlab-demo.sqlite
# make run DB=URL       - the page on your lab's own database (never receives demo data)
run: $(STAMP)
	$(BIN)/python -m streamlit run app.py --server.headless true \
	  --browser.gatherUsageStats false $(if $(DB),-- --db "$(DB)")

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	for script in bench/*.py; do $(BIN)/python $$script || exit 1; done

clean:
	rm -rf $(VENV) .pytest_cache build *.egg-info
