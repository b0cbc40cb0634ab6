# Two entry points do all set-up: `make demo` (the main job on the default
# instance ladder) and `make test` (the test suite). Both are idempotent and
# a second run skips what is already in place.
#
# Tests: `make test` is the default run (everything but the tests marked slow),
# `make test-slow` the tests marked slow only, `make test-all` both; CI (.ci/run)
# runs `make test` and then `make test-slow`. Each spreads the tests over
# TEST_WORKERS processes (pytest-xdist; `logical`: one per CPU; an idle worker
# takes queued tests from a busy one), each with one BLAS thread so that the
# workers do not compete for the cores.
PY ?= python3
BIN := .venv/bin
TEST_WORKERS ?= logical
PYTEST := OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 MKL_NUM_THREADS=1 $(BIN)/python -m pytest -q -n $(TEST_WORKERS) --dist worksteal

.PHONY: demo test test-slow test-all setup bench-full clean-venv

setup:
	@PY=$(PY) bash scripts/setup.sh

demo: setup
	$(BIN)/decomp demo

test: setup
	$(PYTEST) tests

test-slow: setup
	$(PYTEST) --run-slow -m slow tests

test-all: setup
	$(PYTEST) --run-slow tests

bench-full: setup
	$(BIN)/decomp bench --suite full --out bench/results/full

clean-venv:
	rm -rf .venv
