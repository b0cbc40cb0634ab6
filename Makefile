# Two entry points do all set-up: `make demo` (the main job on the default
# instance ladder) and `make test` (the test suite). Both are idempotent and
# a second run skips what is already in place.
PY ?= python3
BIN := .venv/bin

.PHONY: demo test setup bench-full clean-venv

setup:
	@PY=$(PY) bash scripts/setup.sh

demo: setup
	$(BIN)/decomp demo

test: setup
	$(BIN)/python -m pytest -q tests

bench-full: setup
	$(BIN)/decomp bench --suite full --out bench/results/full

clean-venv:
	rm -rf .venv
