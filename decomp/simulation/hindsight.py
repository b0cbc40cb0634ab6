"""The perfect-hindsight bound: the DLP with each path's realized demand.

``max f.x  s.t.  A x <= c,  0 <= x <= d`` with ``d`` the path's realized
request totals. Any policy sells an integer ``x`` that satisfies these
constraints, so the LP optimum bounds every policy's revenue on that path.
One HiGHS model is built per batch of paths and only the column bounds change
between paths, so each solve starts from the previous optimal basis.
"""

from __future__ import annotations

import numpy as np

from .errors import SimulationConfigError


class HindsightLP:
    def __init__(self, instance):
        import highspy

        from ..methods.highs import new_highs

        self._highspy = highspy
        self.P = instance.n_products
        h = new_highs()
        # No "threads" option: HiGHS keeps one thread scheduler per process, and
        # a run asking for another thread count than the first one fails.
        for key, value in (("output_flag", False), ("log_to_console", False)):
            status = h.setOptionValue(key, value)
            if status != highspy.HighsStatus.kOk:
                raise SimulationConfigError(f"HiGHS rejected option {key}={value!r} ({status})")
        lp = highspy.HighsLp()
        A = instance.A.tocsc()
        lp.num_col_ = self.P
        lp.num_row_ = instance.n_legs
        lp.col_cost_ = -np.asarray(instance.fare, dtype=np.float64)     # HiGHS minimizes
        lp.col_lower_ = np.zeros(self.P)
        lp.col_upper_ = np.zeros(self.P)
        lp.row_lower_ = np.full(instance.n_legs, -highspy.kHighsInf)
        lp.row_upper_ = np.asarray(instance.capacity, dtype=np.float64)
        lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
        lp.a_matrix_.start_ = A.indptr.astype(np.int32)
        lp.a_matrix_.index_ = A.indices.astype(np.int32)
        lp.a_matrix_.value_ = A.data.astype(np.float64)
        if h.passModel(lp) != highspy.HighsStatus.kOk:
            raise SimulationConfigError("HiGHS did not accept the hindsight LP")
        self.h = h
        self._cols = np.arange(self.P, dtype=np.int32)
        self._zeros = np.zeros(self.P)

    def revenue(self, demand) -> float:
        """Optimal hindsight revenue for one path's realized totals ``demand`` (length P)."""
        hs = self._highspy
        d = np.asarray(demand, dtype=np.float64)
        self.h.changeColsBounds(self.P, self._cols, self._zeros, d)
        run_status = self.h.run()
        if run_status == hs.HighsStatus.kError:
            raise RuntimeError("hindsight LP: HiGHS run() returned an error (see HiGHS log with output_flag on)")
        status = self.h.getModelStatus()
        if status != hs.HighsModelStatus.kOptimal:
            raise RuntimeError(f"hindsight LP did not solve to optimality: {self.h.modelStatusToString(status)}")
        return -float(self.h.getInfo().objective_function_value)

    def revenues(self, demand_rows) -> np.ndarray:
        return np.array([self.revenue(d) for d in demand_rows])
