"""Shared fixtures, the `slow` switch, and the check that markers mean what they say.

Markers (registered in pyproject.toml, which runs pytest with --strict-markers):

- ``solver``: the test calls HiGHS or Ipopt. A test without it that reaches a decomp method
  other than ``lagrangian``, ``highspy.Highs``, ``cyipopt.minimize_ipopt`` or
  ``scipy.optimize.linprog`` / ``milp`` fails, naming the call, so ``pytest -m "not solver"``
  runs without either solver.
- ``integration``: the test starts another process: decomp, Python or pytest in a subprocess, a
  browser, a Dask cluster or any multiprocessing worker. A test without it that starts one fails,
  so ``pytest -m "not integration"`` runs in one process. (What runs inside a subprocess is not
  seen: a test that runs ``decomp solve --method highs`` in one is marked both, by hand.)
- ``slow``: heavy by construction; deselected unless ``--run-slow`` is given (``make test-slow``
  runs ``--run-slow -m slow``).
"""

from __future__ import annotations

import importlib
import os
import pathlib
import sys

import pytest

from support.paths import ROOT


# -- shared fixtures ----------------------------------------------------------------------------

@pytest.fixture
def root() -> pathlib.Path:
    return ROOT


@pytest.fixture(scope="session")
def rungs() -> dict:
    """The ladder rungs p100, p1k and p10k (loaded once per test process)."""
    from decomp import ladder

    return {name: ladder.load_rung(name) for name in ("p100", "p1k", "p10k")}


@pytest.fixture(scope="module")
def p100_dir(tmp_path_factory) -> pathlib.Path:
    """The ladder rung p100 written as an instance folder (once per module)."""
    from decomp import ladder
    from decomp.io import write_instance

    path = tmp_path_factory.mktemp("inst") / "p100"
    write_instance(ladder.load_rung("p100"), path)
    return path


@pytest.fixture(scope="module")
def p100_dlp(p100_dir, tmp_path_factory) -> pathlib.Path:
    """p100's DLP solved by HiGHS through ``decomp solve``, its result file (once per module; the
    tests that use it are marked ``solver``)."""
    from decomp.cli import main

    out = tmp_path_factory.mktemp("res") / "dlp.json"
    assert main(["solve", str(p100_dir), "--model", "dlp", "--method", "highs", "--out", str(out)]) == 0
    return out


@pytest.fixture(autouse=True)
def _history_store_in_tmp(tmp_path_factory, monkeypatch):
    """Runs of decomp bench and baseline check add themselves to the history store: in the tests,
    a temporary one (never bench/results/history.sqlite of the project or of the current folder)."""
    monkeypatch.setenv("DECOMP_HISTORY", str(tmp_path_factory.mktemp("history") / "history.sqlite"))


# -- the slow switch ----------------------------------------------------------------------------

def pytest_addoption(parser):
    parser.addoption("--run-slow", action="store_true", default=False,
                     help="also run the tests marked slow (heavy by construction; left out of the default run)")


def pytest_collection_modifyitems(config, items):
    # Tests marked slow are deselected (not skipped) unless --run-slow is given.
    if config.getoption("--run-slow"):
        return
    slow = [item for item in items if item.get_closest_marker("slow") is not None]
    if slow:
        config.hook.pytest_deselected(items=slow)
        items[:] = [item for item in items if item.get_closest_marker("slow") is None]


# -- markers that mean what they say --------------------------------------------------------------

#: Where a test reaches HiGHS or Ipopt outside decomp's methods: (module, attribute). Module
#: attributes are replaced, so a call through the module (``highspy.Highs()``,
#: ``optimize.linprog(...)``) is seen. Not ``cyipopt.Problem``: Pyomo subclasses it when it first
#: imports its Ipopt interface, and a stand-in there would break that import for the session.
_SOLVER_CALLS = (("highspy", "Highs"), ("cyipopt", "minimize_ipopt"),
                 ("scipy.optimize", "linprog"), ("scipy.optimize", "milp"))
#: Programs whose start makes a test an integration test (the first word of the command, its
#: file name): decomp itself, Python, pytest and the browser. Programs decomp runs to describe
#: its environment (git, uname) are not among them.
_PROGRAMS = ("decomp", "python", "pytest", "chromium", "chrome", "dask")


#: Modules whose HiGHS calls are part of the Lagrangian method, not a reference solver: its
#: restricted problems of kinks only, linear programs (decomp.lagrangian.lpmaster, which
#: solves them by its own interior-point method where highspy is not installed).
_PART_OF_LAGRANGIAN = ("decomp.lagrangian.lpmaster",)


def _called_from(modules, depth=12) -> bool:
    """Whether one of the ``depth`` innermost callers is a function of ``modules``."""
    frame = sys._getframe(2)
    for _ in range(depth):
        if frame is None:
            return False
        if frame.f_globals.get("__name__") in modules:
            return True
        frame = frame.f_back
    return False


#: decomp's methods that call HiGHS or Ipopt (every built-in method but the Lagrangian one).
_SOLVER_METHODS = ("highs", "pyomo-highs", "ipopt", "pyomo-ipopt")


def _solver_methods():
    from decomp import registry

    return {registry.get_method(name, model) for model, name in registry.pairs() if name in _SOLVER_METHODS}


def _program(args) -> str:
    first = args if isinstance(args, (str, bytes, os.PathLike)) else (list(args) or [""])[0]
    first = os.fsdecode(first).split()[0] if isinstance(first, (str, bytes)) else os.fsdecode(first)
    return pathlib.Path(first).name.lower()


_SEEN = pytest.StashKey[list]()


def _guard(item, mp: pytest.MonkeyPatch) -> list:
    """Refuse, and note, what ``item`` reaches without its marker: a solver without ``solver``,
    another process without ``integration``. The notes fail the test even where the code under
    test catches the refusal (see pytest_runtest_makereport)."""
    marks = {m.name for m in item.iter_markers()}
    seen: list[str] = []

    def refuse(what: str, marker: str):
        seen.append(f"the test reached {what} but is not marked {marker!r}")
        raise RuntimeError(f"test not marked {marker!r} reached {what}")

    if "solver" not in marks:
        for module, name in _SOLVER_CALLS:
            try:
                mod = importlib.import_module(module)
            except ImportError:
                continue
            what = f"{module}.{name}"

            def guarded(*a, _w=what, _real=getattr(mod, name), **k):
                if _called_from(_PART_OF_LAGRANGIAN):
                    return _real(*a, **k)
                return refuse(_w, "solver")

            mp.setattr(mod, name, guarded)
        for cls in _solver_methods():
            what = f"the {cls.name!r} method"
            mp.setattr(cls, "solve", lambda *a, _w=what, **k: refuse(_w, "solver"))
    if "integration" not in marks:
        import multiprocessing.process
        import subprocess

        popen_init = subprocess.Popen.__init__

        def checked_popen(self, args, *a, **k):
            program = _program(args)
            if program.startswith(_PROGRAMS) or program == pathlib.Path(sys.executable).name:
                refuse(f"a {program} process", "integration")
            popen_init(self, args, *a, **k)

        mp.setattr(subprocess.Popen, "__init__", checked_popen)
        mp.setattr(multiprocessing.process.BaseProcess, "start",
                   lambda self: refuse("a multiprocessing worker (a Dask cluster?)", "integration"))
    return seen


@pytest.hookimpl(wrapper=True)
def pytest_runtest_protocol(item, nextitem):
    # The guard covers the test's setup too: a module fixture first built for this test is its need.
    mp = pytest.MonkeyPatch()
    item.stash[_SEEN] = _guard(item, mp)
    try:
        return (yield)
    finally:
        mp.undo()


@pytest.hookimpl(wrapper=True)
def pytest_runtest_makereport(item, call):
    report = yield
    seen = item.stash.get(_SEEN, None)
    if seen and report.when in ("setup", "call"):
        report.outcome = "failed"
        report.longrepr = "; ".join(dict.fromkeys(seen))
        seen.clear()
    return report
