# Every target makes .venv if it is missing and installs the project into it.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
DEMO_DIR ?= build/demo

.PHONY: demo test bench serve lint clean

$(STAMP): pyproject.toml
	test -d $(VENV) || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,bench]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/rankrec demo --workdir $(DEMO_DIR)

test: $(STAMP)
	$(BIN)/python -m ruff check rankrec api tests tools
	$(BIN)/python -m ruff format --check rankrec api tests tools
	$(BIN)/python -m pytest -m "not heavy" -n 2 --dist loadfile --cov --cov-report=term:skip-covered --cov-fail-under=85 rankrec api tests

bench: $(STAMP)
	$(BIN)/python -m pytest -m heavy -p no:cacheprovider tests
	$(BIN)/python -m tests.bench

serve: $(STAMP)
	$(BIN)/rankrec serve --workdir $(DEMO_DIR)

lint: $(STAMP)
	$(BIN)/python -m ruff check rankrec api tests tools
	$(BIN)/python -m ruff format --check rankrec api tests tools

clean:
	rm -rf $(VENV) build .pytest_cache .coverage
