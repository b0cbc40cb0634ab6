"""A long parametrized sweep, split between the default run and the slow one.

``thinned(values, every)`` keeps every ``every``-th value in the default run and marks the others
``slow``: the test ids stay the same, the default run samples the sweep evenly, and ``make
test-slow`` (CI's second step) runs the rest, so no value leaves CI.
"""

from __future__ import annotations

import pytest


def thinned(values, every: int) -> list:
    """``values`` as pytest parameters, all but every ``every``-th one (the first included) marked slow."""
    return [v if i % every == 0 else pytest.param(v, marks=pytest.mark.slow) for i, v in enumerate(values)]
