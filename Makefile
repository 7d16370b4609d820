# Every target makes its own set-up: .venv is created and the project installed (editable,
# pinned dependencies) the first time, and again whenever pyproject.toml changes.
PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: install demo test bench bench-store bench-cluster bench-plan fuzz lint golden clean

# The compiled decoder (pipeline/read/stdf/_*.c) is rebuilt whenever its sources change; when
# it cannot be built (no C compiler), the install goes on and says so in one line.
CSRC   := $(wildcard pipeline/read/stdf/_*.c pipeline/read/stdf/_*.h)

$(STAMP): pyproject.toml $(CSRC)
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --disable-pip-version-check --upgrade pip==25.3
	$(PY) -m pip install --quiet --disable-pip-version-check -e '.[dev]'
	@$(PY) -c "from pipeline.read.stdf import native; assert native.available()" 2>/dev/null || \
	  echo "tandem: the compiled decoder did not build (no C compiler?); the numpy path serves: same results, slower"
	@touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/tandem demo

test: $(STAMP)
	$(PY) -m pytest -q -m "not slow and not fuzz"

bench: $(STAMP)
	$(PY) bench/bench_ingest.py $(BENCH_ARGS)

bench-store: $(STAMP)
	$(PY) bench/bench_store.py

bench-cluster: $(STAMP)
	$(PY) bench/bench_cluster.py

bench-plan: $(STAMP)
	$(PY) bench/bench_plan.py $(BENCH_ARGS)
	$(PY) bench/bench_plan.py --maps

fuzz: $(STAMP)
	$(PY) -m pytest -q -m fuzz

lint: $(STAMP)
	$(VENV)/bin/ruff check pipeline tests bench sample_logs
	$(VENV)/bin/mypy pipeline

golden: $(STAMP)
	TANDEM_REGEN_GOLDEN=1 $(PY) -m pytest -q -m "not slow and not fuzz" tests

clean:
	rm -rf $(VENV) build *.egg-info demo-out bench/out
