# sizewise — build targets. `make run` and `make test` create .venv when it is missing.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
# The stamp is newer than pyproject.toml once the project is installed; a changed pyproject reinstalls.
STAMP := $(VENV)/.sizewise-installed
PYTEST_ARGS ?=
# The exact versions the service runs with; installs take them when the file is there.
LOCK := service/deploy/requirements.lock
LOCK_PIN = $(if $(wildcard $(LOCK)),-c $(LOCK))

.PHONY: install run test bench bench-service lint lock

$(PY):
	$(PYTHON) -m venv $(VENV)

$(STAMP): pyproject.toml $(wildcard $(LOCK)) | $(PY)
	$(PY) -m pip install -e '.[test]' $(LOCK_PIN)
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

# Refresh the lock from what .venv runs: pyproject's dependencies installed (new ones at the newest
# version allowed, installed ones kept), then frozen. Take a newer version of a package with
# `.venv/bin/pip install -U NAME` first.
lock: | $(PY)
	$(PY) -m pip install -e '.[test]'
	{ echo "# The exact versions sizewise runs with: 'make lock' writes this file (pip freeze"; \
	  echo "# --exclude-editable of .venv) on Python $$($(PY) -c 'import platform; print(platform.python_version())')."; \
	  echo "# Installs use it as constraints (Makefile, service/deploy/Dockerfile); do not edit."; \
	  $(PY) -m pip freeze --exclude-editable; } > $(LOCK)
	touch $(STAMP)
