# Fitladder: two commands do all set-up.
#   make run   start the dashboard on the bundled demo data (http://127.0.0.1:8501)
#   make test  run the whole test suite
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
PORT ?= 8501

.PHONY: run test bench venv clean

$(BIN)/python:
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip

$(VENV)/.runtime: requirements.txt pyproject.toml | $(BIN)/python
	$(BIN)/pip install -q -r requirements.txt
	$(BIN)/pip install -q --no-deps -e .
	touch $@

$(VENV)/.dev: requirements-dev.txt $(VENV)/.runtime
	$(BIN)/pip install -q -r requirements-dev.txt
	touch $@

run: $(VENV)/.runtime
	$(BIN)/streamlit run app.py --server.address 127.0.0.1 --server.port $(PORT)

test: $(VENV)/.dev
	bash tests/ensure_browser.sh
	$(BIN)/python -m pytest -q

bench: $(VENV)/.dev
	$(BIN)/python benchmarks/sweep_vs_sklearn.py

clean:
	rm -rf $(VENV) .pytest_cache test-output
