# Two commands do all the set-up: `make demo` and `make test`.
# Both create or refresh .venv/ from the pinned lock (requirements.lock) first.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: venv demo test lint lock clean bench

venv: $(STAMP)

# Bytecode is compiled at install time: every workflow job is a fresh interpreter, and
# where Python may not write .pyc files (PYTHONDONTWRITEBYTECODE) each job would
# otherwise compile pandas, xarray and dask from source again (about 2 s of a job's 3).
$(STAMP): requirements.lock pyproject.toml Makefile
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check "uv==0.13.9"
	$(BIN)/uv pip sync --quiet --compile-bytecode --python $(BIN)/python requirements.lock
	$(BIN)/uv pip install --quiet --compile-bytecode --python $(BIN)/python --no-deps -e .
	$(BIN)/python -m compileall -q src
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/snakemake --profile profiles/default
	@echo "Tables:   results/demo/tables/"
	@echo "Figures:  results/demo/figures/"
	@echo "Manifest: results/demo/manifest.json"

# The suite, after the linter (a lint error fails `make test`, and so CI).
test: $(STAMP)
	$(BIN)/ruff check src tests benchmarks
	$(BIN)/python -m pytest -q

# Benchmarks (benchmarks/README.md): every target at the issue's sizes; pass e.g.
# BENCH_ARGS="--only 1 --scale quick" to run one target at a reduced size. Synthesized
# archives are kept in BENCH_SCRATCH and reused by the next run.
BENCH_SCRATCH ?= /tmp/floeheat-bench
bench: $(STAMP)
	$(BIN)/python -m benchmarks --scratch $(BENCH_SCRATCH) $(BENCH_ARGS)

lint: $(STAMP)
	$(BIN)/ruff check src tests benchmarks

# Regenerate the lock after editing requirements.in (needs the venv's uv).
lock: $(STAMP)
	$(BIN)/uv pip compile --quiet --python $(BIN)/python requirements.in -o requirements.lock

clean:
	rm -rf $(VENV) .snakemake results
