# The two commands a fresh clone needs: `make run` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
BERTH_HOST ?= 127.0.0.1
BERTH_PORT ?= 8000

.PHONY: run test check lint typecheck bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test]'
	touch $(STAMP)

run: $(STAMP)
	$(BIN)/berth serve --host $(BERTH_HOST) --port $(BERTH_PORT)

test: $(STAMP)
	$(BIN)/ruff check service tests
	$(BIN)/mypy
	$(BIN)/pytest -q

bench: $(STAMP)
	@for script in tests/benchmarks/bench_*.py; do $(BIN)/python $$script; done

clean:
	rm -rf $(VENV) .pytest_cache .mypy_cache .ruff_cache
