"""What a benchmark case records besides time: accuracy against a reference, memory, versions.

Accuracy is computed from the :class:`~decomp.result.SolveResult` the timed
call returned, against a tight reference solve of the same instance:

* ``objective_error``: |objective - reference objective| / max(1, |reference|);
* ``bid_price_error``: max_i |pi_i - pi*_i| / pi*_i over legs with
  pi*_i >= 1e-3 max(pi*) (smaller bid prices are noise-dominated);
* ``max_violation`` / ``max_violation_rel``: from the result's certificate,
  recomputed from the allocation when the certificate is missing.

Peak memory is the growth of the process's resident set during the solve
(``peak_memory_mib``, a lower bound: memory the allocator kept from earlier
solves is reused without growth) and the absolute peak resident set
(``peak_rss_mib``, an upper bound: it includes the instance and the rest of
the process):
on Linux the high-water mark (VmHWM) is reset before the solve by writing 5
to /proc/self/clear_refs and read after it, so C allocations (HiGHS, Ipopt)
count; elsewhere it falls back to the RSS difference after minus before (a
lower bound), and says so in ``memory_method``.
"""

from __future__ import annotations

import dataclasses
import gc
import math
import os
import platform

import numpy as np

from ..certify import relative_gap
from .cases import BID_PRICE_FLOOR

_STATUS = "/proc/self/status"
_CLEAR_REFS = "/proc/self/clear_refs"


def _status_kib(key: str) -> int | None:
    try:
        with open(_STATUS) as fh:
            for line in fh:
                if line.startswith(key):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


class PeakMemory:
    """Peak RSS growth over a region; call :meth:`start` before and :meth:`stop` after.

    ``peak_mib`` keeps the largest growth over several start/stop pairs
    (rounds); ``peak_rss_mib`` the largest absolute resident set seen during
    a round (instance and everything else the process holds included: an
    upper bound on what the solve needs, where the growth is a lower bound
    because memory freed by earlier solves and kept by the allocator is
    reused without growing the resident set).
    """

    def __init__(self):
        self.peak_mib = None
        self.peak_rss_mib = None
        self.method = None
        self._base = None
        self._hwm = os.path.exists(_CLEAR_REFS) and _status_kib("VmHWM") is not None

    def start(self):
        gc.collect()
        if self._hwm:
            try:
                with open(_CLEAR_REFS, "w") as fh:
                    fh.write("5")
            except OSError:
                self._hwm = False
        self._base = self._rss_kib()

    def stop(self):
        if self._base is None:
            return
        if self._hwm:
            peak = _status_kib("VmHWM")
            self.method = "rss_hwm_delta"   # Linux VmHWM after reset, minus RSS at start
        else:
            peak = self._rss_kib()
            self.method = "rss_delta"       # RSS after minus before (a lower bound on the peak)
        mib = max(0.0, (peak - self._base) / 1024.0)
        self.peak_mib = mib if self.peak_mib is None else max(self.peak_mib, mib)
        self.peak_rss_mib = peak / 1024.0 if self.peak_rss_mib is None else max(self.peak_rss_mib, peak / 1024.0)
        self._base = None

    def _rss_kib(self) -> int:
        v = _status_kib("VmRSS")
        if v is not None:
            return v
        import psutil

        return int(psutil.Process().memory_info().rss // 1024)


@dataclasses.dataclass(frozen=True)
class Reference:
    """A tight reference solve of one instance and model (kept small: no allocation)."""

    model: str
    method: str
    options: dict
    objective: float | None
    bid_prices: np.ndarray | None
    gap: float | None
    status: str
    seconds: float

    def summary(self) -> dict:
        return {"model": self.model, "method": self.method, "options": self.options,
                "objective": _num(self.objective), "gap": _num(self.gap), "status": self.status,
                "seconds": _num(self.seconds)}


def _num(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def bid_price_error(pi, ref_pi, floor: float = BID_PRICE_FLOOR) -> float | None:
    """Largest relative error of ``pi`` where ``ref_pi`` >= floor * max(ref_pi)."""
    if pi is None or ref_pi is None:
        return None
    pi = np.asarray(pi, dtype=np.float64)
    ref_pi = np.asarray(ref_pi, dtype=np.float64)
    if pi.shape != ref_pi.shape or ref_pi.size == 0:
        return None
    top = float(np.max(ref_pi))
    if not top > 0:
        return None
    mask = ref_pi >= floor * top
    err = np.abs(pi[mask] - ref_pi[mask]) / ref_pi[mask]
    return float(np.max(err)) if err.size else None


def violation(instance, result):
    """(max violation in seats, relative) from the certificate, else from the allocation."""
    cert = result.certificate
    if cert is not None:
        return _num(cert.max_violation), _num(cert.max_violation_rel)
    if result.allocation is None:
        return None, None
    excess = instance.leg_load(result.allocation) - instance.capacity
    v = float(max(0.0, np.max(excess))) if excess.size else 0.0
    rel = float(max(0.0, np.max(excess / np.maximum(1.0, instance.capacity)))) if excess.size else 0.0
    return v, rel


def history_records(result, limit: int = 300) -> list:
    """The per-iteration history as small dicts, thinned to at most ``limit`` records."""
    hist = list(result.history or ())
    if len(hist) > limit:
        idx = np.unique(np.linspace(0, len(hist) - 1, limit).round().astype(int))
        hist = [hist[i] for i in idx]
    out = []
    for h in hist:
        d = dataclasses.asdict(h) if dataclasses.is_dataclass(h) else dict(h)
        out.append({k: (_num(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else v)
                    for k, v in d.items()})
    return out


#: Seed of the revenue paths of rung r: REVENUE_SEED + its index in RUNG_ORDER. The same
#: seed for every case of a rung and its reference: common random numbers.
REVENUE_SEED = 20261202


def revenue_seed(data: str) -> int:
    """The seed of a case's sample paths: per rung (a demand model's cases share their rung's)."""
    from .cases import RUNG_ORDER

    return REVENUE_SEED + RUNG_ORDER.index(data.partition("-")[0])


def price_bid_prices(instance, bid_prices, paths: int, seed: int) -> dict | None:
    """Mean revenue (and its 95 % interval) of fixed bid-price control on ``paths`` sample paths.

    None when there are no finite bid prices to price. Uses
    :func:`decomp.simulation.run.revenue_for_bid_prices` (same seed, same paths), or on a
    network with markets :func:`decomp.choice.simulation.path_revenues_for_bid_prices`
    (customers choosing among the open products; each offered the best revenue-ordered set).
    """
    if bid_prices is None:
        return None
    bp = np.asarray(bid_prices, dtype=np.float64)
    if bp.shape != (instance.n_legs,) or not np.all(np.isfinite(bp)):
        return None
    if getattr(instance, "markets", None) is not None:     # customers choose (decomp.choice.simulation)
        from decomp.choice.simulation import path_revenues_for_bid_prices
    else:
        from decomp.simulation.run import path_revenues_for_bid_prices
    from decomp.simulation.statistics import mean_ci

    per_path = path_revenues_for_bid_prices(instance, bp, int(paths), int(seed))
    ci = mean_ci(per_path)
    # path_revenue: kept in memory for the paired interval of the loss, not written
    return {"mean": _num(ci["mean"]), "ci": [_num(ci["low"]), _num(ci["high"])], "paths": int(paths),
            "seed": int(seed), "path_revenue": per_path}


def public_revenue(rev: dict | None) -> dict | None:
    """A priced revenue without its per-path values (for the benchmark JSON)."""
    return None if rev is None else {k: v for k, v in rev.items() if k != "path_revenue"}


def revenue_fields(case_rev: dict | None, ref_rev: dict | None) -> dict:
    """The revenue fields of a case: its priced revenue and its relative loss against the reference's.

    ``revenue_loss_rel`` = (reference revenue - case revenue) / reference revenue, both
    means over the same sample paths (a point estimate; negative when the case earned more).
    ``revenue_loss_ci``: its paired 95 % t interval, from the per-path differences (common
    random numbers: path k is the same demand for the case and the reference).
    """
    out = {"revenue_mean": None, "revenue_ci": None, "revenue_loss_rel": None, "revenue_loss_ci": None,
           "revenue_reference_mean": None, "revenue_paths": None, "revenue_seed": None}
    if case_rev is None:
        return out
    out.update(revenue_mean=case_rev["mean"], revenue_ci=case_rev["ci"], revenue_paths=case_rev["paths"],
               revenue_seed=case_rev["seed"])
    if ref_rev is not None and ref_rev["mean"] is not None and case_rev["mean"] is not None:
        out["revenue_reference_mean"] = ref_rev["mean"]
        if ref_rev["mean"] != 0:
            out["revenue_loss_rel"] = (ref_rev["mean"] - case_rev["mean"]) / abs(ref_rev["mean"])
            a, b = ref_rev.get("path_revenue"), case_rev.get("path_revenue")
            if a is not None and b is not None and len(a) == len(b) >= 2:
                from decomp.simulation.statistics import mean_ci

                d = mean_ci((np.asarray(a) - np.asarray(b)) / abs(ref_rev["mean"]))
                out["revenue_loss_ci"] = [_num(d["low"]), _num(d["high"])]
    return out


def accuracy(instance, result, reference: Reference | None) -> dict:
    """Accuracy fields of one result against its reference."""
    v, vrel = violation(instance, result)
    gap = result.gap
    if gap is None and result.certificate is not None:
        gap = result.certificate.gap
    obj_err = None
    if reference is not None and reference.objective is not None and result.objective is not None:
        obj_err = abs(relative_gap(result.objective, reference.objective))
    bp_err = None if reference is None else bid_price_error(result.bid_price_array, reference.bid_prices)
    cert = result.certificate
    return {
        "objective": _num(result.objective),
        "bound": _num(result.bound),
        "gap": _num(gap),
        "objective_error": _num(obj_err),
        "bid_price_error": _num(bp_err),
        "max_violation": v,
        "max_violation_rel": vrel,
        "kkt_residual": None if cert is None else _num(cert.kkt_residual),
        "iterations": result.iterations,
        "termination": result.termination.value,
        "solution_status": result.solution_status.value,
        "solver": result.solver,
        "solver_version": result.solver_version,
        "raw_status": result.raw_status,
        "phase_seconds": {k: float(val) for k, val in result.seconds.items()},
    }


def check(acc: dict, limits: dict) -> list:
    """Failed accuracy checks as messages (empty when all pass)."""
    fails = []
    if not limits:
        return fails
    if limits.get("require_optimal") and acc["termination"] != "optimal":
        fails.append(f"termination {acc['termination']} (expected optimal)")
    lim = limits.get("max_violation_rel")
    if lim is not None and (acc["max_violation_rel"] is None or acc["max_violation_rel"] > lim):
        fails.append(f"capacity violation {acc['max_violation_rel']} > {lim}")
    lim = limits.get("gap")
    if lim is not None and (acc["gap"] is None or acc["gap"] > lim):
        fails.append(f"certified gap {acc['gap']} > {lim}")
    lim = limits.get("gap_if_optimal")
    if lim is not None and acc["termination"] == "optimal" and (acc["gap"] is None or acc["gap"] > lim):
        fails.append(f"claims optimal with certified gap {acc['gap']} > {lim}")
    lim = limits.get("objective_error")
    if lim == "gap":
        g = acc["gap"]
        lim = None if g is None else max(g, 0.0) + 1e-8
    if lim is not None and (acc["objective_error"] is None or acc["objective_error"] > lim):
        fails.append(f"objective error {acc['objective_error']} > {lim:.3g}")
    lim = limits.get("bid_price_error")
    if lim is not None and (acc["bid_price_error"] is None or acc["bid_price_error"] > lim):
        fails.append(f"bid-price error {acc['bid_price_error']} > {lim}")
    return fails


def versions() -> dict:
    """Installed versions of Python and the numeric and solver packages (None when absent)."""
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": platform.python_version()}
    for dist in ("numpy", "scipy", "pyomo", "highspy", "cyipopt-wheels", "cyipopt", "matplotlib",
                 "psutil", "pytest-benchmark"):
        try:
            out[dist] = version(dist)
        except PackageNotFoundError:
            out[dist] = None
    return out
