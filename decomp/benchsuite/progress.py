"""A pytest plugin that writes one JSON line per finished case, for ``decomp bench``'s progress bar.

Loaded with ``-p decomp.benchsuite.progress``; inert unless the environment
variable ``DECOMP_BENCH_PROGRESS`` names the file to append to. Lines:
``{"event": "collected", "n": N}`` once, then
``{"event": "done", "nodeid": ..., "outcome": "passed"|"failed"|"skipped", "seconds": s}``.
"""

from __future__ import annotations

import json
import os

ENV = "DECOMP_BENCH_PROGRESS"


def _write(obj):
    path = os.environ.get(ENV)
    if not path:
        return
    with open(path, "a") as fh:
        fh.write(json.dumps(obj) + "\n")
        fh.flush()


def pytest_collection_finish(session):
    _write({"event": "collected", "n": len(session.items)})


def pytest_runtest_logreport(report):
    # One "done" per test: the call phase, or the phase that failed or skipped first.
    if report.when == "call" or (report.when == "setup" and not report.passed):
        _write({"event": "done", "nodeid": report.nodeid, "outcome": report.outcome,
                "seconds": float(getattr(report, "duration", 0.0))})
