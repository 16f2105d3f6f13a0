# orbtool — the two commands the README shows are `make demo` and `make test`.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP_DEMO := $(VENV)/.stamp-demo
STAMP_TEST := $(VENV)/.stamp-test

.PHONY: demo test lint bench bench-family demo-data external-data periodic-data harness screenshots clean-venv

$(BIN)/python:
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip

$(STAMP_DEMO): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -q -e .
	touch $@

$(STAMP_TEST): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -q -e ".[test]"
	touch $(STAMP_DEMO) $@

demo: $(STAMP_DEMO)
	$(BIN)/orbtool demo --out sample_outputs --force

test: $(STAMP_TEST)
	$(BIN)/python -m ruff check orbtool tests benchmarks
	$(BIN)/python -m pytest -q

lint: $(STAMP_TEST)
	$(BIN)/python -m ruff check orbtool tests benchmarks

bench: $(STAMP_TEST)
	$(BIN)/python benchmarks/run_all.py

# synthetic families of 14/100/1000 cases (slow: minutes to an hour on 2 cores)
bench-family: $(STAMP_TEST)
	$(BIN)/python benchmarks/bench_family.py

demo-data: $(STAMP_DEMO)
	$(BIN)/python -m orbtool.demo.generate

external-data: $(STAMP_TEST)
	$(BIN)/python tests/external/generate.py

# the periodic GPAW family (Debian's gpaw + gpaw-data, system python; hours on 2 cores; skips finished cases).
# Two serial workers take cases from one priority list: on a busy machine that beats two MPI ranks that wait
# for each other.
PERIODIC := OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 /usr/bin/python3 tests/external/periodic/generate.py --queue
periodic-data:
	$(PERIODIC) & $(PERIODIC) & wait

# the model's predictions against the periodic GPAW family and the pyscf clusters; rewrites the table in
# tests/external/periodic/README.md and orbtool/data/knob_validation.json (read by fit summaries)
harness: $(STAMP_TEST)
	$(BIN)/python tests/external/periodic/harness.py --write

# re-runs the browser tests and copies the chosen screenshots to docs/screenshots/ and sample_outputs/
screenshots: $(STAMP_TEST)
	$(BIN)/python tests/browser/screenshots.py

clean-venv:
	rm -rf $(VENV)
