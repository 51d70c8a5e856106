# The two commands a fresh clone needs: `make run` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
TEST_STAMP := $(VENV)/.test-installed
BERTH_HOST ?= 127.0.0.1
BERTH_PORT ?= 8000

.PHONY: run test check lint typecheck bench clean

# What the service needs, and nothing else: `make run` installs only this. Byte-compiled as pip compiles
# a wheel it installs (an editable install is not): where PYTHONDONTWRITEBYTECODE is set, every berth
# process would otherwise compile its sources again when it starts.
$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e .
	$(BIN)/python -m compileall -q service
	touch $(STAMP)

# The test extras (pytest, type checker, linter, browser driver, fuzzer, PostgreSQL driver), added
# by `make test` on top of the service's own install.
$(TEST_STAMP): $(STAMP)
	$(BIN)/pip install --quiet -e '.[test]'
	touch $(TEST_STAMP)

run: $(STAMP)
	$(BIN)/berth serve --host $(BERTH_HOST) --port $(BERTH_PORT)

test: $(TEST_STAMP)
	$(BIN)/ruff check service tests
	$(BIN)/mypy
	$(BIN)/pytest -q

bench: $(TEST_STAMP)
	@for script in tests/benchmarks/bench_*.py; do $(BIN)/python $$script; done

clean:
	rm -rf $(VENV) .pytest_cache .mypy_cache .ruff_cache
