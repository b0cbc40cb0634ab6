"""Running a simulation: scenarios, batches of paths, sequential stopping, results.

A *scenario* is one re-optimization interval with one forecast error; every
scenario runs every policy on the same sample paths (common random numbers
across policies and scenarios), and the hindsight bound is computed once per
path. Paths are cut into batches of ``chunk`` and each batch is one task (in
this process or on a Dask worker); a path's demand depends only on the seed
and its index, so results do not depend on the number of workers.

With ``target_halfwidth`` the number of paths is chosen sequentially: a first
round, then more paths (as many as the observed variance says are needed, plus
10%) until the widest paired 95% interval (each policy against the reference,
the first policy listed) is at most the target, or ``paths`` is reached.
"""

from __future__ import annotations

import dataclasses
import itertools
import logging
import math
import time

import numpy as np

from .booking import BookingCurve, fare_rank, sample_paths
from .controller import run_policies
from .errors import SimulationConfigError
from .forecast import ForecastError
from .hindsight import HindsightLP
from .policies import ControlContext, FCFSPolicy, Policy, parse_policies
from .statistics import mean_ci, paired_difference

log = logging.getLogger(__name__)


def _is_int(v) -> bool:
    return isinstance(v, (int, np.integer)) and not isinstance(v, bool)


@dataclasses.dataclass(frozen=True)
class SimulationConfig:
    """What to simulate. ``paths`` is the number of paths (the maximum with a target)."""

    policies: tuple
    paths: int = 200
    horizon: float = 60.0
    reoptimize_every: tuple = (7.0,)
    forecast_errors: tuple = (ForecastError(),)
    seed: int = 0
    curve: BookingCurve = BookingCurve()
    target_halfwidth: float | None = None
    chunk: int = 50
    add_fcfs: bool = True
    arrivals: object = None          # PeriodDemand: requests by periods (at most one per period) instead of the curve

    def __post_init__(self):
        pols = self.policies
        if isinstance(pols, str):
            pols = parse_policies(pols)
        pols = tuple(pols)
        if not pols or not all(isinstance(p, Policy) for p in pols):
            raise SimulationConfigError("policies must be a non-empty list of policies or a specification string")
        if self.add_fcfs and not any(isinstance(p, FCFSPolicy) for p in pols):
            pols = pols + (FCFSPolicy(),)
        object.__setattr__(self, "policies", pols)
        if not _is_int(self.paths) or self.paths < 1:
            raise SimulationConfigError(f"number of paths must be a positive integer, got {self.paths!r}")
        if not (isinstance(self.horizon, (int, float)) and math.isfinite(self.horizon) and self.horizon > 0):
            raise SimulationConfigError(f"booking horizon must be a positive number of days, got {self.horizon!r}")
        every = self.reoptimize_every
        every = tuple(every) if isinstance(every, (list, tuple)) else (every,)
        if not every:
            raise SimulationConfigError("at least one re-optimization interval is needed")
        for r in every:
            if not (isinstance(r, (int, float)) and math.isfinite(r) and r > 0):
                raise SimulationConfigError(f"re-optimization interval must be a positive number of days, got {r!r}")
            if r > self.horizon:
                raise SimulationConfigError(
                    f"re-optimization interval {r:g} days is longer than the booking horizon {self.horizon:g} days")
        object.__setattr__(self, "reoptimize_every", tuple(float(r) for r in every))
        fes = self.forecast_errors
        fes = tuple(fes) if isinstance(fes, (list, tuple)) else (fes,)
        if not fes or not all(isinstance(f, ForecastError) for f in fes):
            raise SimulationConfigError("forecast_errors must be a non-empty list of ForecastError")
        object.__setattr__(self, "forecast_errors", fes)
        if not _is_int(self.seed) or self.seed < 0:
            raise SimulationConfigError(f"seed must be a non-negative integer, got {self.seed!r}")
        if not _is_int(self.chunk) or self.chunk < 1:
            raise SimulationConfigError(f"paths per task must be a positive integer, got {self.chunk!r}")
        if self.target_halfwidth is not None and not (
                isinstance(self.target_halfwidth, (int, float)) and self.target_halfwidth > 0):
            raise SimulationConfigError(f"target half-width must be positive, got {self.target_halfwidth!r}")

    @property
    def scenarios(self) -> list:
        """(forecast error index, re-optimization interval) pairs, forecast error outermost."""
        return list(itertools.product(range(len(self.forecast_errors)), self.reoptimize_every))

    def check(self, instance) -> None:
        for p in self.policies:
            p.check(instance)
        if self.arrivals is not None:
            from ..dynamic.demand import DemandError

            try:
                self.arrivals.check(instance)
                self.arrivals.require_at_most_one_request("sampling requests by periods")
            except DemandError as exc:
                raise SimulationConfigError(str(exc)) from exc

    def to_dict(self) -> dict:
        return {"policies": [p.to_dict() for p in self.policies], "paths": self.paths,
                "horizon": self.horizon, "reoptimize_every": list(self.reoptimize_every),
                "forecast_errors": [f.to_dict() for f in self.forecast_errors], "seed": self.seed,
                "curve": self.curve.to_dict(), "target_halfwidth": self.target_halfwidth, "chunk": self.chunk,
                "arrivals": None if self.arrivals is None else {"periods": self.arrivals.periods,
                                                                "source": self.arrivals.source}}


def initial_controls(instance, config: SimulationConfig) -> dict:
    """Per forecast error, the time-0 controls of every policy (shared by all paths)."""
    params = config.curve.parameters(fare_rank(instance))
    from .booking import remaining_forecast, remaining_share

    out = {}
    for i, fe in enumerate(config.forecast_errors):
        m, s = fe.apply(instance.mean, instance.std, config.seed)
        rm, rs = remaining_forecast(m, s, remaining_share(params, 0.0))
        ctx = ControlContext(instance=instance, mean=rm, std=rs, t_frac=0.0, curve=config.curve,
                             arrivals=config.arrivals)
        cap = np.floor(np.asarray(instance.capacity, dtype=np.float64) + 1e-9)[None, :]
        sold = np.zeros((1, instance.n_products), dtype=np.int64)
        out[i] = [p.controls(ctx, cap, sold, [None]) for p in config.policies]
    return out


def run_chunk(instance, config: SimulationConfig, paths, initial) -> dict:
    """Simulate the given path indices under every scenario (one task)."""
    c0 = time.process_time()
    t0 = time.perf_counter()
    rank = fare_rank(instance)
    params = config.curve.parameters(rank)
    if config.arrivals is None:
        req = sample_paths(instance, paths, config.seed, config.curve, rank=rank)
    else:
        req = config.arrivals.sample_paths(instance, paths, config.seed)
    t1 = time.perf_counter()
    bound = HindsightLP(instance).revenues(req.demand)
    t2 = time.perf_counter()
    scen = []
    for fe_i, every in config.scenarios:
        m, s = config.forecast_errors[fe_i].apply(instance.mean, instance.std, config.seed)
        scen.append(run_policies(instance, req, config.policies, horizon=config.horizon, every=every,
                                 opt_mean=m, opt_std=s, curve_params=params, initial=initial[fe_i],
                                 curve=config.curve, arrivals=config.arrivals))
    t3 = time.perf_counter()
    return {"paths": np.asarray(paths), "bound": bound, "requests": req.counts.astype(np.float64),
            "scenarios": scen, "seconds": {"sample": t1 - t0, "hindsight": t2 - t1, "policies": t3 - t2,
                        "task_cpu": time.process_time() - c0}}


@dataclasses.dataclass
class SimulationResult:
    """Per-path outcomes of every (scenario, policy) and their summaries."""

    config: SimulationConfig
    instance_name: str
    n_legs: int
    n_products: int
    total_capacity: float
    paths: np.ndarray
    bound: np.ndarray
    requests: np.ndarray
    revenue: np.ndarray          # (scenarios, policies, paths)
    seats: np.ndarray            # (scenarios, policies, paths)
    seconds: np.ndarray          # (scenarios, policies): re-optimization seconds (all paths, with time 0)
    solves: np.ndarray
    failures: np.ndarray           # [scenario, policy]: solves whose method ended non-optimal
    rescued: np.ndarray            # ... of which the fallback's optimal answer priced
    priced_non_optimal: np.ndarray  # ... of which a non-optimal answer priced anyway
    statuses: list               # [scenario][policy] -> {status: count}
    wall_seconds: float
    phase_seconds: dict
    rounds: list
    network_bounds: dict = dataclasses.field(default_factory=dict)   # name -> upper bound on expected revenue

    def network_bound(self):
        """(name, value) of the lowest network bound the policies computed, or None."""
        if not self.network_bounds:
            return None
        name = min(self.network_bounds, key=self.network_bounds.get)
        return name, self.network_bounds[name]

    @property
    def n_paths(self) -> int:
        return len(self.paths)

    def share(self, s: int, p: int) -> np.ndarray:
        b = self.bound
        return np.where(b > 0, self.revenue[s, p] / np.where(b > 0, b, 1.0), 1.0)

    def paired(self, s: int) -> list:
        """Each policy against the reference (the first one listed)."""
        rev = self.revenue[s]
        out = []
        for p in range(1, rev.shape[0]):
            d = paired_difference(rev[p], rev[0])
            out.append({"policy": self.config.policies[p].label, "reference": self.config.policies[0].label, **d})
        return out

    def max_paired_halfwidth(self) -> float:
        hws = [d["halfwidth"] for s in range(self.revenue.shape[0]) for d in self.paired(s)]
        hws = [h for h in hws if not math.isnan(h)]
        return max(hws) if hws else math.nan

    def summary(self) -> dict:
        cfg = self.config
        scen = []
        for s, (fe_i, every) in enumerate(cfg.scenarios):
            pols = []
            nb = self.network_bound()
            for p, pol in enumerate(cfg.policies):
                pols.append({
                    "share_of_network_bound": None if nb is None else mean_ci(self.revenue[s, p] / nb[1]),
                    "policy": pol.label, "spec": pol.spec,
                    "revenue": mean_ci(self.revenue[s, p]),
                    "load_factor": mean_ci(self.seats[s, p] / max(self.total_capacity, 1e-300)),
                    "share_of_bound": mean_ci(self.share(s, p)),
                    "reopt_seconds": float(self.seconds[s, p]),
                    "reopt_seconds_per_path": float(self.seconds[s, p]) / max(1, self.n_paths),
                    "solves": int(self.solves[s, p]), "failed_solves": int(self.failures[s, p]),
                    "reoptimizations": {"solves": int(self.solves[s, p]), "non_optimal": int(self.failures[s, p]),
                                        "rescued_by_fallback": int(self.rescued[s, p]),
                                        "priced_non_optimal": int(self.priced_non_optimal[s, p])},
                    "solve_statuses": dict(self.statuses[s][p]),
                })
            scen.append({"reoptimize_every": every, "forecast_error": cfg.forecast_errors[fe_i].to_dict(),
                         "forecast_error_label": cfg.forecast_errors[fe_i].label(),
                         "policies": pols, "paired": self.paired(s)})
        return {
            "instance": {"name": self.instance_name, "n_legs": self.n_legs, "n_products": self.n_products,
                         "capacity": self.total_capacity},
            "config": cfg.to_dict(), "paths": self.n_paths,
            "requests_per_path": mean_ci(self.requests),
            "hindsight_bound": mean_ci(self.bound),
            "network_bounds": dict(self.network_bounds),
            "network_bound": None if self.network_bound() is None else {
                "name": self.network_bound()[0], "value": self.network_bound()[1]},
            "scenarios": scen,
            "rounds": self.rounds,
            "wall_seconds": self.wall_seconds, "phase_seconds": self.phase_seconds,
        }


#: What each policy's controls count, summed over the initial solve and every task.
_COUNTS = ("seconds", "solves", "failures", "rescued", "priced_non_optimal")


def _merge(parts: list, n_scen: int, n_pol: int, initial: dict, config) -> dict:
    parts = sorted(parts, key=lambda r: int(r["paths"][0]) if len(r["paths"]) else -1)
    cat = lambda key: np.concatenate([r[key] for r in parts]) if parts else np.zeros(0)  # noqa: E731
    rev = np.zeros((n_scen, n_pol, 0))
    seats = np.zeros((n_scen, n_pol, 0))
    if parts:
        rev = np.stack([np.stack([np.concatenate([r["scenarios"][s][p].revenue for r in parts])
                                  for p in range(n_pol)]) for s in range(n_scen)])
        seats = np.stack([np.stack([np.concatenate([r["scenarios"][s][p].seats for r in parts])
                                    for p in range(n_pol)]) for s in range(n_scen)])
    counts = {k: np.zeros((n_scen, n_pol), dtype=np.float64 if k == "seconds" else np.int64)
              for k in _COUNTS}
    statuses = [[{} for _ in range(n_pol)] for _ in range(n_scen)]
    for s, (fe_i, _) in enumerate(config.scenarios):
        for p in range(n_pol):
            # the time-0 controls (solved once per forecast error, shared by all paths), then every task
            for c in [initial[fe_i][p]] + [r["scenarios"][s][p] for r in parts]:
                for k in _COUNTS:
                    counts[k][s, p] += getattr(c, k)
                for k, v in c.statuses.items():
                    statuses[s][p][k] = statuses[s][p].get(k, 0) + v
    phases = {}
    for r in parts:
        for k, v in r["seconds"].items():
            phases[k] = phases.get(k, 0.0) + v
    return dict(paths=cat("paths"), bound=cat("bound"), requests=cat("requests"), revenue=rev, seats=seats,
                **counts, statuses=statuses, phase_seconds=phases)


def simulate(instance, config: SimulationConfig, *, client=None, on_progress=None) -> SimulationResult:
    """Run ``config`` on ``instance``; ``client``: a Dask client, or None to run here.

    ``on_progress(paths_done, paths_planned)`` is called after each task.
    """
    config.check(instance)
    t_start = time.perf_counter()
    t0 = time.perf_counter()
    initial = initial_controls(instance, config)
    t_initial = time.perf_counter() - t0
    inst_ref = instance
    if client is not None:
        inst_ref = client.scatter(instance, broadcast=True)
    parts, rounds = [], []
    done = 0
    planned = config.paths if config.target_halfwidth is None else min(config.paths, max(30, config.chunk))
    result = None
    while True:
        todo = np.arange(done, planned)
        chunks = [todo[i:i + config.chunk] for i in range(0, len(todo), config.chunk)]
        if on_progress is not None:
            on_progress(done, planned)
        if client is None:
            for c in chunks:
                parts.append(run_chunk(instance, config, c, initial))
                if on_progress is not None:
                    on_progress(int(sum(len(r["paths"]) for r in parts)), planned)
        else:
            from distributed import as_completed

            futs = [client.submit(run_chunk, inst_ref, config, c, initial, pure=False) for c in chunks]
            for fut in as_completed(futs):
                parts.append(fut.result())
                if on_progress is not None:
                    on_progress(int(sum(len(r["paths"]) for r in parts)), planned)
        done = planned
        merged = _merge(parts, len(config.scenarios), len(config.policies), initial, config)
        result = SimulationResult(
            config=config, instance_name=instance.name, n_legs=instance.n_legs, n_products=instance.n_products,
            total_capacity=float(np.floor(np.asarray(instance.capacity) + 1e-9).sum()),
            wall_seconds=time.perf_counter() - t_start, rounds=rounds,
            network_bounds=_network_bounds(initial, config),
            **{**merged, "phase_seconds": {**merged["phase_seconds"], "initial_controls": t_initial}})
        hw = result.max_paired_halfwidth()
        rounds.append({"paths": int(done), "max_paired_halfwidth": None if math.isnan(hw) else hw})
        if config.target_halfwidth is None or done >= config.paths:
            break
        if not math.isnan(hw) and hw <= config.target_halfwidth:
            break
        need = config.paths if math.isnan(hw) else math.ceil(1.1 * done * (hw / config.target_halfwidth) ** 2)
        planned = int(min(config.paths, max(done + config.chunk, need)))
        log.info("paired half-width %.4g > target %.4g with %d paths; going to %d", hw, config.target_halfwidth,
                 done, planned)
    return result


def _network_bounds(initial: dict, config) -> dict:
    """Upper bounds on expected revenue the policies computed at time 0 with the true forecast.

    Only scenarios without forecast error count (a bound for a biased forecast
    bounds nothing about the true demand); the lowest value per name is kept.
    """
    out = {}
    for fe_i, fe in enumerate(config.forecast_errors):
        if not fe.exact:
            continue
        for cs in initial[fe_i]:
            for name, v in (cs.bounds or {}).items():
                if v is not None and math.isfinite(v):
                    out[name] = min(v, out.get(name, math.inf))
    return out


class _StaticBidPrices(Policy):
    """Fixed bid prices for the whole horizon (ties accepted): for pricing a set of bid prices."""

    def __init__(self, bid_prices):
        self.bid_prices = np.asarray(bid_prices, dtype=np.float64)
        self.label = self.spec = "static bid prices"

    def check(self, instance):
        if self.bid_prices.shape != (instance.n_legs,) or not np.all(np.isfinite(self.bid_prices)):
            raise SimulationConfigError(
                f"bid prices must be {instance.n_legs} finite numbers aligned with instance.leg_ids, "
                f"got shape {self.bid_prices.shape}")

    def controls(self, ctx, capacity, sold, states):
        from .policies import ControlSet, TIE_RTOL

        n, P = sold.shape
        fare = ctx.instance.fare
        open_ = fare >= ctx.instance.leg_sum(self.bid_prices) - TIE_RTOL * np.maximum(1.0, fare)
        limit = np.where(open_, np.inf, 0.0)
        return ControlSet(limit=np.broadcast_to(limit, (n, P)).copy(), protect=None, states=list(states))


def revenue_for_bid_prices(instance, bid_prices, paths: int = 200, seed: int = 0, *, horizon: float = 60.0,
                           curve: BookingCurve | None = None):
    """Mean revenue of fixed bid-price control over ``paths`` sample paths: ``(mean, (low, high))``.

    ``bid_prices``: a dict by leg id or an array aligned with ``instance.leg_ids``;
    the interval is the t-based 95% confidence interval. The bid prices are not
    re-optimized; the same seed gives the same paths (common random numbers
    across calls, so two sets of bid prices are compared on the same demand).
    """
    if isinstance(bid_prices, dict):
        missing = [l for l in instance.leg_ids.tolist() if l not in bid_prices]
        if missing:
            raise SimulationConfigError(f"bid prices missing for {len(missing)} legs, e.g. {missing[:3]}")
        bid_prices = np.array([float(bid_prices[l]) for l in instance.leg_ids.tolist()])
    cfg = SimulationConfig(policies=(_StaticBidPrices(bid_prices),), paths=paths, horizon=horizon,
                           reoptimize_every=(horizon,), seed=seed, curve=curve or BookingCurve(), add_fcfs=False)
    res = simulate(instance, cfg)
    ci = mean_ci(res.revenue[0, 0])
    return ci["mean"], (ci["low"], ci["high"])


def path_revenues_for_bid_prices(instance, bid_prices, paths: int = 200, seed: int = 0, *,
                                 horizon: float = 60.0, curve: BookingCurve | None = None) -> np.ndarray:
    """Revenue of each sample path under fixed bid-price control (the paths of :func:`revenue_for_bid_prices`).

    Path ``k`` is the same demand for every call with the same seed, so two sets of
    bid prices give paired revenues (for a paired interval of their difference).
    """
    if isinstance(bid_prices, dict):
        bid_prices = np.array([float(bid_prices[l]) for l in instance.leg_ids.tolist()])
    cfg = SimulationConfig(policies=(_StaticBidPrices(bid_prices),), paths=paths, horizon=horizon,
                           reoptimize_every=(horizon,), seed=seed, curve=curve or BookingCurve(), add_fcfs=False)
    return np.asarray(simulate(instance, cfg).revenue[0, 0], dtype=np.float64)
