"""The sales LP by Lagrangian relaxation of the leg capacities: one small problem per market.

Two phases, each in its own module:

1. :mod:`decomp.choice.newton` comes close: projected Newton on the smoothed dual, the
   smoothing driven down from 0.15 to 0.001 of each market's top fare (:class:`decomp.choice.newton.Schedule`);
2. :mod:`decomp.choice.master` finishes exactly: markets whose best offer set is
   unambiguous at those bid prices are fixed, the rest keep revenue-ordered sets as
   columns of a restricted choice-based LP (HiGHS), priced exactly market by market
   at its duals until nothing is added (stabilized by a box around phase 1's prices).

The answer is the master's: its sales (feasible for the sales LP) and its duals, the
bid prices; :mod:`decomp.choice.certify` then checks both from the instance alone.
Closed legs (capacity 0) get the smallest price that closes their products; legs no
sellable product uses get 0.
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np

from ..result import IterationRecord, Termination
from . import columns, master, mnl, newton
from .network import ChoiceNetwork

log = logging.getLogger(__name__)

#: Width of the band of free markets and of the stabilizing box, in smoothing widths.
BAND_WIDTHS = 5.0
BOX_WIDTHS = 3.0
#: Master rounds before the method gives up (each adds a column or frees a market).
MAX_ROUNDS = 200

#: Master loop outcome -> Termination.
_OUTCOME = {"optimal": Termination.OPTIMAL, "round_limit": Termination.ITERATION_LIMIT,
            "time_limit": Termination.TIME_LIMIT, "kTimeLimit": Termination.TIME_LIMIT,
            "kIterationLimit": Termination.ITERATION_LIMIT}


@dataclasses.dataclass(frozen=True)
class Outcome:
    """What the decomposition returns: allocation, bid prices, status and its story."""

    x: np.ndarray
    pi: np.ndarray
    termination: Termination
    raw_status: str
    message: str
    iterations: int
    newton_iterations: int
    master_rounds: int
    free_markets: int
    history: tuple
    seconds_build: float
    seconds_solve: float


def solve(instance, options, warm_start=None) -> Outcome:
    """Solve the sales LP of ``instance`` (see the module docstring)."""
    t0 = time.perf_counter()
    deadline = None if options.time_limit is None else t0 + float(options.time_limit)
    net = ChoiceNetwork.of(instance)
    used = (net.legs_m.getnnz(axis=0) + net.legs_o.getnnz(axis=0)) > 0
    fixed = ~used | net.closed
    ranges = columns.market_ranges(net.mp)
    t1 = time.perf_counter()
    pi0 = np.zeros(instance.n_legs) if warm_start is None else np.asarray(warm_start, dtype=np.float64)
    schedule = newton.Schedule()
    if options.iteration_limit is not None:
        schedule = dataclasses.replace(schedule, max_iterations=int(options.iteration_limit))
    pi_n, t, steps, _ = newton.approach(net, pi0, schedule, deadline=deadline, fixed=fixed)
    history = [IterationRecord(s.iteration, s.value, None, None, s.step, float("nan"), s.seconds) for s in steps]
    mu = t * np.maximum(net.top, 1e-12)
    smooth_R = mnl.smoothed_value(net.mp, net.net_fares(pi_n)[0], mu).value
    delta_m = BAND_WIDTHS * mu
    delta_o = BAND_WIDTHS * t * net.fare_o
    free = master.free_markets(net, pi_n, delta_m, smooth_R)
    box = BOX_WIDTHS * t * net.fare_scale
    m = master.Master(net, pi_n, free, delta_m, delta_o, ranges, box, verbose=options.verbose)
    scale = float(net.mp.arrivals @ net.top + net.mean_o @ net.fare_o)
    # a market is priced in when it gains more than eps: the gains then left add up to at most 1e-3 tol of
    # the revenue scale; never below 1e-13 of it (the rounding of the pricing itself)
    eps = max(1e-3 * options.tol, 1e-13) * max(1.0, scale) / max(1, net.mp.n_markets + len(net.mean_o))
    rounds = MAX_ROUNDS if options.iteration_limit is None else max(1, int(options.iteration_limit))
    status, duals = m.run(eps, rounds, deadline=deadline)
    for r in m.rounds:
        history.append(IterationRecord(len(history) + 1, r.objective, r.objective, None, 0.0, float("nan"),
                                       time.perf_counter() - t1))
    if duals is not None:
        pi = np.where(fixed & ~net.closed, 0.0, duals.pi)
        x = _within_capacity(net, net.allocation(*m.primal()))   # a stop with seats bought: scaled to fit
    else:                                   # no master answer at all: phase 1's prices, sales scaled to fit
        pi = np.where(fixed & ~net.closed, 0.0, pi_n)
        x = _scaled_best_sales(net, pi)
    pi = net.closing_prices(pi)
    term = _OUTCOME.get(status, Termination.NUMERICAL_ERROR if status.startswith("k") else Termination.UNKNOWN)
    message = (f"{len(steps)} Newton iterations to smoothing {t:g}, {len(m.rounds)} master rounds "
               f"({int(m.free.sum())} of {net.mp.n_markets} markets free, {m.cols.n} offer-set columns): {status}")
    t2 = time.perf_counter()
    return Outcome(x=x, pi=pi, termination=term, raw_status=status, message=message,
                   iterations=len(steps) + len(m.rounds), newton_iterations=len(steps), master_rounds=len(m.rounds),
                   free_markets=int(m.free.sum()), history=tuple(history), seconds_build=t1 - t0,
                   seconds_solve=t2 - t1)


def _within_capacity(net, x) -> np.ndarray:
    """``x`` scaled by the largest theta <= 1 that fits every leg (feasible: a mix with offering nothing)."""
    load = net.instance.leg_load(x)
    over = load > net.capacity * (1 + 1e-12) + 1e-9
    if not over.any():
        return x
    return x * float(np.min(net.capacity[over] / load[over]))


def _scaled_best_sales(net, pi) -> np.ndarray:
    """The best offer sets' sales at ``pi``, scaled down to fit every leg (feasible: a mix with offering nothing)."""
    from . import dual

    point = dual.evaluate(net, pi)
    load = net.load(point.x_m, point.x_o)
    with np.errstate(divide="ignore", invalid="ignore"):
        room = np.where(load > 0, net.capacity / load, np.inf)
    theta = float(min(1.0, room.min(initial=np.inf)))
    return net.allocation(theta * point.x_m, theta * point.x_o)
