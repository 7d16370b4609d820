# Every target makes its own set-up: .venv is created and the project installed (editable,
# pinned dependencies) the first time, and again whenever pyproject.toml changes.
PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: install demo test bench bench-store bench-cluster fuzz lint golden clean

$(STAMP): pyproject.toml
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --disable-pip-version-check --upgrade pip==25.3
	$(PY) -m pip install --quiet --disable-pip-version-check -e '.[dev]'
	@touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/tandem demo

test: $(STAMP)
	$(PY) -m pytest -q -m "not slow and not fuzz"

bench: $(STAMP)
	$(PY) bench/bench_ingest.py

bench-store: $(STAMP)
	$(PY) bench/bench_store.py

bench-cluster: $(STAMP)
	$(PY) bench/bench_cluster.py

fuzz: $(STAMP)
	$(PY) -m pytest -q -m fuzz

lint: $(STAMP)
	$(VENV)/bin/ruff check pipeline tests bench sample_logs
	$(VENV)/bin/mypy pipeline

golden: $(STAMP)
	TANDEM_REGEN_GOLDEN=1 $(PY) -m pytest -q -m "not slow and not fuzz" tests

clean:
	rm -rf $(VENV) build *.egg-info demo-out bench/out
