"""Shared test fixtures."""

from __future__ import annotations

import pathlib

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[1]
#: Published hub-and-spoke test problems, kept outside the project (see tests that use it).
EXTERNAL = ROOT.parent / "shared" / "external" / "hub-spoke-2009"


@pytest.fixture
def root() -> pathlib.Path:
    return ROOT


@pytest.fixture(scope="module")
def p100_dir(tmp_path_factory) -> pathlib.Path:
    """The ladder rung p100 written as an instance folder (once per module)."""
    from decomp import ladder
    from decomp.io import write_instance

    path = tmp_path_factory.mktemp("inst") / "p100"
    write_instance(ladder.load_rung("p100"), path)
    return path


@pytest.fixture(autouse=True)
def _history_store_in_tmp(tmp_path_factory, monkeypatch):
    """Runs of decomp bench and baseline check add themselves to the history store: in the tests,
    a temporary one (never bench/results/history.sqlite of the project or of the current folder)."""
    monkeypatch.setenv("DECOMP_HISTORY", str(tmp_path_factory.mktemp("history") / "history.sqlite"))


def pytest_addoption(parser):
    parser.addoption("--run-slow", action="store_true", default=False,
                     help="also run the tests marked slow (long sweeps; left out of the default run)")


def pytest_collection_modifyitems(config, items):
    # Tests marked slow are deselected (not skipped) unless --run-slow is given.
    if config.getoption("--run-slow"):
        return
    slow = [item for item in items if item.get_closest_marker("slow") is not None]
    if slow:
        config.hook.pytest_deselected(items=slow)
        items[:] = [item for item in items if item.get_closest_marker("slow") is None]
