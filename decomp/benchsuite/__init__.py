"""The benchmark suite's machinery: case table, measurements, runner, report, plots, compare, fit.

The cases themselves are pytest-benchmark tests in ``bench/``; ``decomp
bench`` runs them through :func:`decomp.benchsuite.runner.run_suite`.
:func:`decomp.benchsuite.fit.fit_power_law` is shared with production sizing.
"""

from .fit import PowerLawFit, fit_power_law

__all__ = ["PowerLawFit", "fit_power_law"]
