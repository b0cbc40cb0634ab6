"""Booking controls and their specifications.

Every control is expressed, for each (path, product), by two numbers that the
acceptance loop reads (see :mod:`decomp.simulation.controller`): a request is
accepted when ``sold < limit`` for its product, when every leg of it has a
seat left, and when the smallest remaining capacity over its legs exceeds
``protect`` (seats held back for higher fares).

* :class:`BidPricePolicy` (spec ``MODEL[:METHOD[:TOL]]``, e.g.
  ``pnlp:lagrangian:1e-9``, ``dlp:highs``): open (limit = inf) when the fare is
  at least the sum of the current bid prices of its legs, closed otherwise.
  Products whose fare *equals* the bid-price sum (within 1e-6 relative) are
  the model's marginal products; every binding leg of a DLP has one, and
  selling all of its requests would hand the leg to the first low fare that
  asks. By default (``ties="allocation"``) such a product is sold up to the
  model's allocation of it; ``ties="accept"`` (spec ``plain:MODEL[:METHOD[:TOL]]``)
  applies the plain rule: accept whenever the fare is at least the sum.
* :class:`PartitionedPolicy` (``partitioned:MODEL[:METHOD[:TOL]]``): each
  product may sell its (rounded) allocation from the model.
* :class:`NestedPolicy` (``emsrb``, or ``nested:Y1[/Y2...]`` for fixed levels;
  single-leg instances only): products are fare classes on the one leg, in
  descending fare order; class ``k+1`` may sell only while more than ``y_k``
  seats remain, ``y_k`` the protection level for classes ``1..k``. EMSR-b
  (normal approximation of the aggregated demand of the higher classes, as is
  common practice); with two classes it is Littlewood's rule.
* :class:`FCFSPolicy` (``fcfs``): every request is sold while seats last.
* :class:`TablePolicy` (``dynamic:MODEL[:METHOD[:TOL]]``, ``relaxed:MODEL[:METHOD[:TOL]]``):
  capacity- and time-dependent bid prices (:mod:`decomp.dynamic`), computed
  once at time 0 from the static model's bid prices, by the decomposition by
  leg (``dynamic``) or the Lagrangian relaxation of the network program
  (``relaxed``; needs at most one request per period). A request is accepted
  when its fare covers the sum of its legs' table values for the period it
  arrives in and the seats its legs have left.

Policies with a model re-optimize at every re-optimization time from the
remaining capacity of the path and the optimizer's remaining forecast,
warm-started from the previous bid prices of that path.

A solve that ends non-optimal (iteration or time limit, numerical trouble,
uncertified) is solved again from a cold start by the policy's fallback, the
one ``decomp run --fallback`` uses (:func:`decomp.production.fallback.solve_with_fallback`;
``auto``: ``highs`` for the DLP and PWL, ``ipopt`` for a normal-demand PNLP,
``lagrangian:lbfgsb`` otherwise; ``None`` turns it off). Each :class:`ControlSet`
counts its solves, those whose method ended non-optimal (``failures``), those
the fallback rescued (``rescued``: priced with the fallback's optimal answer)
and those that still priced with a non-optimal answer (``priced_non_optimal``);
a non-optimal solve with no usable bid prices keeps the previous controls.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import time

import numpy as np
from scipy import special

from ..errors import UnknownMethodError
from ..production.fallback import AUTO, solve_with_fallback
from ..registry import DEFAULT_METHOD
from .errors import SimulationConfigError

log = logging.getLogger(__name__)

MODELS = ("dlp", "pnlp", "pwl")
#: Relative tolerance of the tie between a fare and its bid-price sum.
TIE_RTOL = 1e-6


@dataclasses.dataclass
class ControlSet:
    """Controls of ``n`` rows (paths) of one policy, and what computing them cost."""

    limit: np.ndarray                 # (n, P) float: sell while sold < limit
    protect: np.ndarray | None        # (n, P) float or None (0): sell while min leg capacity > protect
    states: list                      # per row: what the next re-optimization starts from
    seconds: float = 0.0
    solves: int = 0
    failures: int = 0                 # solves whose method ended non-optimal
    rescued: int = 0                  # ... of which the fallback's optimal answer priced
    priced_non_optimal: int = 0       # ... of which a non-optimal answer priced anyway
    statuses: dict = dataclasses.field(default_factory=dict)
    tables: object = None             # BidPriceTables: also require fare >= sum of the legs' table values
    bounds: dict = dataclasses.field(default_factory=dict)   # upper bounds on expected revenue, by name


@dataclasses.dataclass(frozen=True)
class ControlContext:
    """What a policy sees when it (re-)optimizes: the network and the optimizer's remaining forecast."""

    instance: object                  # the network (true forecast; only the structure and fares are used)
    mean: np.ndarray                  # optimizer's remaining mean per product
    std: np.ndarray                   # optimizer's remaining std per product
    t_frac: float
    curve: object = None              # the booking curve (per-period demand of the table policies)
    arrivals: object = None           # PeriodDemand when requests come by periods, else None


class Policy:
    label: str = ""
    spec: str = ""
    reoptimizes: bool = False

    def check(self, instance) -> None:
        """Raise SimulationConfigError when the policy cannot run on ``instance``."""

    def controls(self, ctx: ControlContext, capacity: np.ndarray, sold: np.ndarray, states: list) -> ControlSet:
        raise NotImplementedError

    def to_dict(self) -> dict:
        return {"label": self.label, "spec": self.spec}


def _fallback_label(setting):
    return None if setting is None else (setting if isinstance(setting, str) else setting.label)


class FCFSPolicy(Policy):
    def __init__(self):
        self.label = self.spec = "fcfs"

    def controls(self, ctx, capacity, sold, states):
        n, P = sold.shape
        return ControlSet(limit=np.full((n, P), np.inf), protect=None, states=list(states))


class _ModelPolicy(Policy):
    reoptimizes = True

    def __init__(self, model: str, method: str | None, tol: float | None, spec: str, fallback=AUTO):
        self.model, self.method, self.tol, self.spec = model, method or DEFAULT_METHOD[model], tol, spec
        self.fallback = fallback          # AUTO, a production.fallback.Fallback, or None (off)

    def options(self):
        from ..options import SolverOptions

        kw = {"threads": 1}
        if self.tol is not None:
            kw["tol"] = self.tol
        return SolverOptions(**kw)

    def check(self, instance):
        from ..registry import get_method

        get_method(self.method, self.model)   # UnknownMethodError names the valid ones
        if self.fallback is not None and not isinstance(self.fallback, str):
            get_method(self.fallback.method, self.model)
        self.options()                        # ConfigError on a bad tolerance

    def _solve(self, sub, warm_start, counts: dict, t_frac: float):
        """One solve, with the fallback when the method ends non-optimal; counted in ``counts``.

        Returns (the result to price with, its status key). ``counts`` holds
        ``failures``, ``rescued``, ``priced_non_optimal`` and ``statuses`` (of
        the policy's own method).
        """
        from ..registry import solve

        res, used, attempts = solve_with_fallback(sub, self.model, self.method, self.options(), warm_start,
                                                  self.fallback, solve)
        first = attempts[0]
        key = f"{first['termination']}/{first['solution_status']}"
        counts["statuses"][key] = counts["statuses"].get(key, 0) + 1
        if first["task_status"] == "ok":
            return res, key
        counts["failures"] += 1
        usable = res.bid_price_array is not None and np.all(np.isfinite(res.bid_price_array))
        tried = ", then ".join(f"{a['method']} {a.get('termination') or a['task_status']}" for a in attempts)
        if res.ok:
            counts["rescued"] += 1
            log.warning("%s: solve at t=%.3f ended %s (%s); priced with the fallback %s (%s)",
                        self.label, t_frac, key, first["message"], used, tried)
        elif usable:
            counts["priced_non_optimal"] += 1
            log.warning("%s: solve at t=%.3f ended %s (%s); PRICING WITH A NON-OPTIMAL ANSWER of %s (%s)",
                        self.label, t_frac, key, first["message"], used, tried)
        else:
            log.warning("%s: solve at t=%.3f ended %s (%s); no usable bid prices (%s)",
                        self.label, t_frac, key, first["message"], tried)
        return res, f"{res.termination.value}/{res.solution_status.value}"

    def _solve_rows(self, ctx, capacity, states):
        """One solve per row; returns (bid prices (n, L), allocations (n, P), new states, counts)."""
        inst = ctx.instance
        n = capacity.shape[0]
        pis = np.zeros((n, inst.n_legs))
        xs = np.zeros((n, inst.n_products))
        counts = {"seconds": 0.0, "failures": 0, "rescued": 0, "priced_non_optimal": 0, "statuses": {}}
        new_states = []
        for r in range(n):               # one solve per path: a Python step per path, not per product
            prev = states[r] if r < len(states) else None
            sub = inst.with_forecast(mean=ctx.mean, std=ctx.std, capacity=np.maximum(capacity[r], 0.0))
            t0 = time.perf_counter()
            res, key = self._solve(sub, None if prev is None else prev["pi"], counts, ctx.t_frac)
            counts["seconds"] += time.perf_counter() - t0
            pi, x = res.bid_price_array, res.allocation
            if pi is None or not np.all(np.isfinite(pi)):
                if prev is None:
                    raise SimulationConfigError(
                        f"policy {self.spec!r}: the first solve returned no bid prices ({key}: {res.message})")
                pi, x = prev["pi"], prev["x"]           # keep the previous controls
            if x is None:
                x = np.full(inst.n_products, np.nan)
            pis[r], xs[r] = pi, x
            new_states.append({"pi": np.array(pi), "x": np.array(x)})
        return pis, xs, new_states, counts


class BidPricePolicy(_ModelPolicy):
    def __init__(self, model, method=None, tol=None, spec=None, ties="allocation", fallback=AUTO):
        if ties not in ("allocation", "accept"):
            raise SimulationConfigError(f"ties must be 'allocation' or 'accept', got {ties!r}")
        method = method or DEFAULT_METHOD[model]
        spec = spec or ":".join([model, method] + ([f"{tol:g}"] if tol is not None else []))
        super().__init__(model, method, tol, spec, fallback)
        self.ties = ties
        self.label = f"bid {spec}"

    def controls(self, ctx, capacity, sold, states):
        inst = ctx.instance
        pis, xs, new_states, counts = self._solve_rows(ctx, capacity, states)
        bp_sum = (inst.AT @ pis.T).T                         # (n, P): sum of leg bid prices
        fare = inst.fare[None, :]
        tie_tol = TIE_RTOL * np.maximum(1.0, fare)
        limit = np.where(fare > bp_sum + tie_tol, np.inf, 0.0)
        tie = np.abs(fare - bp_sum) <= tie_tol
        if self.ties == "accept":
            limit[tie] = np.inf
        else:
            alloc = np.where(np.isfinite(xs), np.floor(xs + 0.5), np.inf)
            limit = np.where(tie, sold + alloc, limit)
        return ControlSet(limit=limit, protect=None, states=new_states, solves=len(new_states), **counts)

    def to_dict(self):
        return {**super().to_dict(), "kind": "bid_price", "model": self.model, "method": self.method,
                "tol": self.tol, "ties": self.ties, "fallback": _fallback_label(self.fallback)}


class PartitionedPolicy(_ModelPolicy):
    def __init__(self, model, method=None, tol=None, spec=None, fallback=AUTO):
        method = method or DEFAULT_METHOD[model]
        spec = spec or ":".join(["partitioned", model, method] + ([f"{tol:g}"] if tol is not None else []))
        super().__init__(model, method, tol, spec, fallback)
        self.label = spec

    def controls(self, ctx, capacity, sold, states):
        pis, xs, new_states, counts = self._solve_rows(ctx, capacity, states)
        if not np.all(np.isfinite(xs)):
            raise SimulationConfigError(f"policy {self.spec!r}: the method returned no allocation to partition")
        limit = sold + np.floor(np.maximum(xs, 0.0) + 0.5)
        return ControlSet(limit=limit, protect=None, states=new_states, solves=len(new_states), **counts)

    def to_dict(self):
        return {**super().to_dict(), "kind": "partitioned", "model": self.model, "method": self.method, "tol": self.tol,
                "fallback": _fallback_label(self.fallback)}


class TablePolicy(_ModelPolicy):
    """Bid-price tables by leg, period and seats left, from a static model's bid prices."""

    reoptimizes = False
    KINDS = ("dynamic", "relaxed")

    def __init__(self, kind, model, method=None, tol=None, spec=None, periods: int = 200, fallback=AUTO):
        if kind not in self.KINDS:
            raise SimulationConfigError(f"table policy kind must be one of {', '.join(self.KINDS)}, got {kind!r}")
        if not isinstance(periods, int) or isinstance(periods, bool) or periods < 1:
            raise SimulationConfigError(f"periods of the table policy must be a positive integer, got {periods!r}")
        method = method or DEFAULT_METHOD[model]
        spec = spec or ":".join([kind, model, method] + ([f"{tol:g}"] if tol is not None else []))
        super().__init__(model, method, tol, spec, fallback)
        self.kind, self.periods = kind, periods
        self.label = spec

    def demand(self, ctx):
        from ..dynamic.demand import from_arrival_curves

        if ctx.arrivals is not None:
            return ctx.arrivals
        return from_arrival_curves(ctx.instance, self.periods, mean=ctx.mean, curve=ctx.curve)

    def controls(self, ctx, capacity, sold, states):
        from ..dynamic.decomposition import decompose
        from ..dynamic.demand import DemandError
        from ..dynamic.relaxation import CONVERGED, STATIONARY, relax

        inst = ctx.instance
        n, P = sold.shape
        if states and states[0] is not None:          # computed once, at time 0
            return ControlSet(limit=np.full((n, P), np.inf), protect=None, states=list(states),
                              tables=states[0]["tables"], bounds=dict(states[0]["bounds"]))
        t0 = time.perf_counter()
        sub = inst.with_forecast(mean=ctx.mean, std=ctx.std, capacity=np.maximum(capacity[0], 0.0))
        counts = {"failures": 0, "rescued": 0, "priced_non_optimal": 0, "statuses": {}}
        res, key = self._solve(sub, None, counts, ctx.t_frac)
        pi = res.bid_price_array
        if pi is None or not np.all(np.isfinite(pi)):
            raise SimulationConfigError(f"policy {self.spec!r}: the static solve returned no bid prices "
                                        f"({key}: {res.message})")
        bounds = {}
        if self.model == "dlp" and res.ok and res.objective is not None:
            bounds["DLP"] = float(res.objective)
        try:
            demand = self.demand(ctx)
            if self.kind == "dynamic":
                tables = decompose(sub, demand, pi, threads=1, source=f"{self.model}:{self.method}")
            else:
                out = relax(sub, demand, pi)
                tables = out.tables
                if ctx.arrivals is not None:     # a bound for the period model, which is then what books
                    bounds["Lagrangian relaxation"] = float(out.bound)
                if out.termination not in (CONVERGED, STATIONARY):
                    log.warning("%s: the bound's search stopped at %s", self.label, out.termination)
        except DemandError as exc:
            raise SimulationConfigError(f"policy {self.spec!r}: {exc}") from exc
        state = {"tables": tables, "bounds": bounds}
        return ControlSet(limit=np.full((n, P), np.inf), protect=None, states=[state] * n,
                          seconds=time.perf_counter() - t0, solves=1, tables=tables, bounds=bounds, **counts)

    def to_dict(self):
        return {**super().to_dict(), "kind": f"table:{self.kind}", "model": self.model, "method": self.method,
                "tol": self.tol, "periods": self.periods, "fallback": _fallback_label(self.fallback)}


def emsrb_levels(fare_desc, mean_desc, std_desc) -> np.ndarray:
    """EMSR-b protection levels y_1..y_{k-1} for classes in descending fare order.

    y_i protects classes 1..i against class i+1: with the aggregate of classes
    1..i taken as normal (mean sum, variance sum, demand-weighted fare F_i),
    y_i = max(0, M_i + S_i z_i), z_i = Phi^-1(1 - f_{i+1} / F_i). Returns a
    non-decreasing array of length k - 1.
    """
    f = np.asarray(fare_desc, dtype=np.float64)
    m = np.asarray(mean_desc, dtype=np.float64)
    s = np.asarray(std_desc, dtype=np.float64)
    if len(f) < 2:
        return np.zeros(0)
    M = np.cumsum(m)[:-1]
    S = np.sqrt(np.cumsum(s * s))[:-1]
    W = np.cumsum(f * m)[:-1]
    Fbar = np.where(M > 0, W / np.where(M > 0, M, 1.0), f[:-1])
    ratio = np.clip(f[1:] / Fbar, 1e-12, 1.0)
    z = -special.ndtri(ratio)                   # Phi^-1(1 - ratio) without cancellation
    y = np.where(S > 0, M + S * z, np.where(ratio < 1.0, M, 0.0))
    return np.maximum.accumulate(np.maximum(y, 0.0))


class NestedPolicy(Policy):
    """Nested protection levels on a single leg: EMSR-b, or fixed levels."""

    def __init__(self, levels=None, spec=None):
        self.levels = None if levels is None else np.asarray(levels, dtype=np.float64)
        if self.levels is not None and (np.any(self.levels < 0) or not np.all(np.isfinite(self.levels))):
            raise SimulationConfigError(f"nested protection levels must be finite and >= 0, got {levels!r}")
        self.reoptimizes = self.levels is None
        self.spec = spec or ("emsrb" if levels is None else "nested:" + "/".join(f"{v:g}" for v in self.levels))
        self.label = self.spec

    def check(self, instance):
        if instance.n_legs != 1 or np.any(instance.legs_per_product != 1):
            raise SimulationConfigError(
                f"policy {self.spec!r} needs a single-leg instance (this one has {instance.n_legs} legs)")
        if self.levels is not None and len(self.levels) > max(0, instance.n_products - 1):
            raise SimulationConfigError(
                f"policy {self.spec!r}: {len(self.levels)} protection levels for {instance.n_products} fare classes "
                f"(at most classes - 1)")

    def protection(self, ctx) -> np.ndarray:
        """Per product, the seats protected for the classes above it."""
        fare = ctx.instance.fare
        order = np.argsort(-fare, kind="stable")            # class 1 = highest fare
        k = len(fare)
        if self.levels is None:
            y = emsrb_levels(fare[order], ctx.mean[order], ctx.std[order])
        else:
            y = np.zeros(k - 1)
            y[:len(self.levels)] = self.levels
            y = np.maximum.accumulate(y)
        above = np.r_[0.0, y]                               # class i+1 is held below y_i
        out = np.empty(k)
        out[order] = above
        return out

    def controls(self, ctx, capacity, sold, states):
        n, P = sold.shape
        prot = np.broadcast_to(self.protection(ctx), (n, P))
        return ControlSet(limit=np.full((n, P), np.inf), protect=np.array(prot), states=list(states))

    def to_dict(self):
        return {**super().to_dict(), "kind": "nested",
                "levels": None if self.levels is None else self.levels.tolist()}


def _tol(text: str, spec: str) -> float:
    try:
        v = float(text)
    except ValueError as exc:
        raise SimulationConfigError(f"policy {spec!r}: tolerance {text!r} is not a number") from exc
    if not (math.isfinite(v) and 0 < v < 1):
        raise SimulationConfigError(f"policy {spec!r}: tolerance must be in (0, 1), got {text!r}")
    return v


def parse_policy(spec: str, periods: int = 200, fallback=AUTO) -> Policy:
    """One policy from its specification (see the module docstring).

    ``periods``: of the table policies; ``fallback``: of the policies with a
    model (``production.fallback.parse`` of ``--fallback``: AUTO, a Fallback, or None).
    """
    text = spec.strip()
    parts = [p.strip() for p in text.split(":")]
    head = parts[0].lower()
    valid = ("MODEL[:METHOD[:TOL]] with MODEL in dlp, pnlp, pwl; plain:MODEL[:METHOD[:TOL]]; "
             "partitioned:MODEL[:METHOD[:TOL]]; dynamic:MODEL[:METHOD[:TOL]]; relaxed:MODEL[:METHOD[:TOL]]; "
             "fcfs; emsrb; nested:Y1[/Y2...]")
    if not text:
        raise SimulationConfigError(f"empty policy specification; valid forms: {valid}")
    if head == "fcfs" and len(parts) == 1:
        return FCFSPolicy()
    if head == "emsrb" and len(parts) == 1:
        return NestedPolicy(None)
    if head == "nested" and len(parts) == 2:
        try:
            levels = [float(v) for v in parts[1].split("/")]
        except ValueError as exc:
            raise SimulationConfigError(f"policy {spec!r}: protection levels must be numbers separated by '/'") from exc
        return NestedPolicy(levels, spec=text)
    if head in ("partitioned", "plain") + TablePolicy.KINDS and 2 <= len(parts) <= 4:
        model = parts[1].lower()
        if model not in MODELS:
            raise SimulationConfigError(f"policy {spec!r}: unknown model {parts[1]!r}; valid models: {', '.join(MODELS)}")
        method = parts[2] if len(parts) > 2 and parts[2] else None
        tol = _tol(parts[3], spec) if len(parts) > 3 else None
        if head == "plain":
            return BidPricePolicy(model, method, tol, spec=text, ties="accept", fallback=fallback)
        if head in TablePolicy.KINDS:
            return TablePolicy(head, model, method, tol, spec=text, periods=periods, fallback=fallback)
        return PartitionedPolicy(model, method, tol, spec=text, fallback=fallback)
    if head in MODELS and 1 <= len(parts) <= 3:
        method = parts[1] if len(parts) > 1 and parts[1] else None
        tol = _tol(parts[2], spec) if len(parts) > 2 else None
        return BidPricePolicy(head, method, tol, spec=text, fallback=fallback)
    raise SimulationConfigError(f"unknown policy {spec!r}; valid forms: {valid}")


def parse_policies(text: str, instance=None, periods: int = 200, fallback=AUTO) -> list:
    """A comma-separated list of specifications; checked against ``instance`` when given."""
    if not isinstance(text, str) or not text.strip():
        raise SimulationConfigError("no policies given (e.g. --policies 'pnlp:lagrangian:1e-9,dlp:highs,fcfs')")
    out = [parse_policy(s, periods=periods, fallback=fallback) for s in text.split(",")]
    labels = [p.label for p in out]
    dup = sorted({l for l in labels if labels.count(l) > 1})
    if dup:
        raise SimulationConfigError(f"policy listed twice: {', '.join(dup)}")
    if instance is not None:
        for p in out:
            try:
                p.check(instance)
            except UnknownMethodError as exc:
                raise SimulationConfigError(f"policy {p.spec!r}: {exc}") from exc
    return out
