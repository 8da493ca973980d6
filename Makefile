# sizewise — build targets. `make run` and `make test` create .venv when it is missing.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
# The stamp is newer than pyproject.toml once the project is installed; a changed pyproject reinstalls.
STAMP := $(VENV)/.sizewise-installed
PYTEST_ARGS ?=

.PHONY: install run test bench bench-service lint

$(PY):
	$(PYTHON) -m venv $(VENV)

$(STAMP): pyproject.toml | $(PY)
	$(PY) -m pip install -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

run: $(STAMP)
	$(PY) -m service.run_local

# pytest exits 5 when it collected nothing; that is a failure here, not a pass.
test: $(STAMP)
	@rc=0; $(PY) -m pytest tests/ $(PYTEST_ARGS) || rc=$$?; \
	if [ $$rc -eq 5 ]; then echo "make test: pytest collected no tests" >&2; fi; \
	exit $$rc

bench: $(STAMP)
	$(PY) -m tests.bench.bench_engine

# The pipeline end to end (embedded default, and PostgreSQL + Redis when they answer).
bench-service: $(STAMP)
	$(PY) -m tests.bench.bench_service

lint: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/ruff format --check .
