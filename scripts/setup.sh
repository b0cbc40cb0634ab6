#!/usr/bin/env bash
# Set up everything decomp needs on a Debian machine: system packages, the
# virtual environment, the project, and PyNumero's ASL library for Pyomo's
# cyipopt interface. Safe to run again; steps already done are skipped.
set -euo pipefail
cd "$(dirname "$0")/.."
PY=${PY:-python3}
VENV=.venv

need_apt=()
[ -f /usr/include/ampl-netlib-solvers/asl.h ] || need_apt+=(libamplsolver-dev)
command -v cmake >/dev/null || need_apt+=(cmake)
command -v g++ >/dev/null || need_apt+=(g++)
command -v make >/dev/null || need_apt+=(make)
# Headless Chromium renders the benchmark history page in its test (tests/benchsuite/test_history.py).
command -v chromium >/dev/null || need_apt+=(chromium)
if [ ${#need_apt[@]} -gt 0 ]; then
    echo "setup: installing Debian packages: ${need_apt[*]}"
    SUDO=""
    [ "$(id -u)" = 0 ] || SUDO=sudo
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq "${need_apt[@]}"
fi

[ -x "$VENV/bin/python" ] || "$PY" -m venv "$VENV"
# The project is (re)installed when pyproject.toml changed since the last set-up.
STAMP="$VENV/.decomp-installed"
if [ ! -f "$STAMP" ] || [ pyproject.toml -nt "$STAMP" ]; then
    "$VENV/bin/python" -m pip install -q --upgrade pip
    "$VENV/bin/python" -m pip install -q -e '.[test]'
    touch "$STAMP"
fi

# The package is installed editable, so nothing byte-compiles its sources, and where
# PYTHONDONTWRITEBYTECODE is set (containers, CI) every `decomp` process would compile
# them again (a noticeable part of a short `decomp solve`). Compile them once here (quick
# when they are current).
"$VENV/bin/python" -m compileall -q -j 0 decomp

# PyNumero's ASL interface, built from the sources shipped in the Pyomo wheel.
"$VENV/bin/python" scripts/build_pynumero.py

# Both solvers must be usable through Pyomo before anything else runs.
"$VENV/bin/python" - <<'PYEOF'
import pyomo.environ as pyo
ipopt = pyo.SolverFactory("cyipopt")
highs = pyo.SolverFactory("appsi_highs")
problems = []
if not ipopt.available(exception_flag=False):
    problems.append("Pyomo's 'cyipopt' solver is not available")
if not highs.available(exception_flag=False):
    problems.append("Pyomo's 'appsi_highs' solver is not available")
if problems:
    raise SystemExit("setup: " + "; ".join(problems))
print("setup: cyipopt and appsi_highs are available through Pyomo")
PYEOF
