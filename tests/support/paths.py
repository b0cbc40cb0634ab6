"""Paths the tests read: the project's root and the published problems kept beside it."""

from __future__ import annotations

import pathlib

#: The project's root (README.md, pyproject.toml, instances/).
ROOT = pathlib.Path(__file__).resolve().parents[2]
#: Published hub-and-spoke test problems, kept outside the project (see tests that use it).
EXTERNAL = ROOT.parent / "shared" / "external" / "hub-spoke-2009"
