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
