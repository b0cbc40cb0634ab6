# Two entry points do all set-up: `make demo` (the main job on the default
# instance ladder) and `make test` (the test suite). Both are idempotent.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.decomp-ready

.PHONY: demo test setup bench bench-full clean-venv

setup: $(STAMP)

$(STAMP): pyproject.toml scripts/setup.sh
	PY=$(PY) bash scripts/setup.sh
	touch $(STAMP)

demo: setup
	$(BIN)/decomp demo

test: setup
	$(BIN)/python -m pytest -q tests

bench: setup
	$(BIN)/decomp bench --suite quick --out bench/results/quick

bench-full: setup
	$(BIN)/decomp bench --suite full --out bench/results/full

clean-venv:
	rm -rf $(VENV)
