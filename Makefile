# sonar_guard developer commands. `make demo` and `make test` bootstrap .venv themselves.
PYTHON ?= python3.11
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: venv test demo bench lint clean

venv: $(STAMP)

$(STAMP): setup.py setup.cfg requirements-ros.txt package.xml
	@command -v $(PYTHON) >/dev/null 2>&1 || { echo "need $(PYTHON) (try: make PYTHON=python3)"; exit 1; }
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip setuptools wheel
	$(BIN)/python -m pip install --quiet -r requirements-ros.txt
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

test: $(STAMP)
	$(BIN)/python -m pytest -q

demo: $(STAMP)
	$(BIN)/sonar-guard demo --out demo_out

bench: $(STAMP)
	$(BIN)/python bench/run.py

lint: $(STAMP)
	$(BIN)/python -m ruff check sonar_guard test launch bench setup.py

clean:
	rm -rf $(VENV) build install log *.egg-info .pytest_cache .hypothesis
