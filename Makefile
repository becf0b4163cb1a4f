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
# make run PORT=8600                - another port (default 8501)
# make run ADDRESS=0.0.0.0          - listen on every network interface: anyone who can reach the
#                                     machine can then read and write the batch log (no login);
#                                     see README "Serving the page to a lab network"
ADDRESS ?= 127.0.0.1
PORT ?= 8501
# The page takes uploads up to the file-size limit the layers enforce (phantomlab/limits.py,
# file_mb: 10 MB, raised with PHANTOMLAB_MAX_FILE_MB), not Streamlit's own 200 MB.
UPLOAD_MB ?= $(or $(PHANTOMLAB_MAX_FILE_MB),10)
# One BLAS thread, as the command line sets it (phantomlab/cli.py): small matrices run faster.
run: $(STAMP)
	OPENBLAS_NUM_THREADS=$${OPENBLAS_NUM_THREADS:-1} $(BIN)/python -m streamlit run app.py --server.headless true \
	  --server.address "$(ADDRESS)" --server.port "$(PORT)" --server.maxUploadSize "$(UPLOAD_MB)" \
	  --browser.gatherUsageStats false --client.toolbarMode minimal \
	  $(if $(DB)$(SHELF),--) $(if $(DB),--db "$(DB)") $(if $(SHELF),--shelf "$(SHELF)")

# One BLAS thread: the suite's small matrices run slower with threads fighting over 2 cores.
test: $(STAMP)
	OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 $(BIN)/python -m pytest

bench: $(STAMP)
	status=0; for script in bench/*.py; do $(BIN)/python $$script || status=1; done; exit $$status

clean:
	rm -rf $(VENV) .pytest_cache build *.egg-info
