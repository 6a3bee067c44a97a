# Barometer: the two set-up commands are `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.requirements-$(shell sha256sum requirements.txt | cut -c1-16)
PORT ?= 8000
export DEBUG ?= 1

.PHONY: venv test lint demo serve migrate clean

venv: $(STAMP)

$(STAMP): requirements.txt
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -r requirements.txt
	rm -f $(VENV)/.requirements-*
	touch $(STAMP)

lint: venv
	$(VENV)/bin/ruff check .
	$(VENV)/bin/mypy analytics/core ingest/parsers barometer_common

test: venv lint
	DEBUG=0 $(PY) -m pytest -q

migrate: venv
	$(PY) manage.py migrate --noinput

demo: venv migrate
	$(PY) manage.py load_demo
	@echo "Serving on http://127.0.0.1:$(PORT)/ (stop with Ctrl-C)"
	$(PY) manage.py runserver 127.0.0.1:$(PORT)

clean:
	rm -rf var test-artifacts

# Benchmarks (bench/): ratios measured in one run against PostgreSQL on 127.0.0.1:5432 (and SQLite);
# they write bench/RESULTS.md and bench/results.json. bench-quick: small scale; bench: full scale.
.PHONY: bench bench-quick
bench-quick: venv
	DEBUG=0 $(PY) -m bench.run --scale quick

bench: venv
	DEBUG=0 $(PY) -m bench.run --scale full
