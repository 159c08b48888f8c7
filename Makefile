# Two commands on a fresh machine: `make demo` runs the whole job on the synthetic scenario,
# `make test` runs the test suite. Both create .venv and install the CPU build of torch first.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
# The one place the CPU torch build is pinned (a plain `torch` requirement would pull a CUDA build).
TORCH_CPU := torch==2.13.0

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/pip install -q --upgrade pip
	$(BIN)/pip install -q $(TORCH_CPU)
	# setuptools warns on every editable install that a same-named folder may shadow the package; here
	# that folder is the package itself, so the warning says nothing and is silenced (that one only).
	PYTHONWARNINGS='ignore:Editable installation' $(BIN)/pip install -q -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/casefile demo --dir demo_out

test: $(STAMP)
	$(BIN)/ruff check casefile tests benchmarks demo_cases
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check casefile tests benchmarks demo_cases

bench: $(STAMP)
	for f in benchmarks/bench_*.py benchmarks/occlusion.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) demo_out casefile.db casefile.db-wal casefile.db-shm
