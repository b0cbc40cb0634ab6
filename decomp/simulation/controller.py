"""The acceptance loop, run in lockstep over many sample paths and policies.

Rows are (policy, path) pairs: every policy sees the same requests of the same
paths (common random numbers). Between two re-optimization times each row's
controls are fixed arrays (see :mod:`decomp.simulation.policies`); the
requests of each path in that period are taken one at a time in time order,
the k-th request of every row at once, so the Python loop runs over request
*positions* (a few thousand per period) and numpy handles all rows of a step:

    accept = sold[row, j] < limit[row, j]  and  min over legs of cap[row, leg] > protect[row, j]

and, for the rows of a policy with bid-price tables (capacity- and
time-dependent bid prices, :mod:`decomp.dynamic`), also

    fare[j] >= sum over j's legs of table[leg, period of the request, cap[row, leg]],

then the accepted rows' sold counts go up and their legs lose a seat. A
padding product (index P, limit 0) fills the positions beyond a path's last
request of the period; a padding leg (index L, unlimited seats) fills the legs
of products with fewer legs than the widest.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from .booking import leg_matrix, remaining_forecast, remaining_share
from .policies import TIE_RTOL, ControlContext

#: Seats of the padding leg.
_UNLIMITED = np.int64(1) << 40


def reoptimization_times(horizon: float, every: float) -> np.ndarray:
    """Re-optimization times as fractions of the horizon: 0, R/T, 2R/T, ... (< 1)."""
    k = int(np.ceil(horizon / every - 1e-12))
    return np.arange(max(k, 1)) * (every / horizon)


@dataclasses.dataclass
class PolicyOutcome:
    """Per policy: revenue and seats sold per path, and the re-optimization effort."""

    revenue: np.ndarray
    seats: np.ndarray
    seconds: float
    solves: int
    failures: int                     # solves whose method ended non-optimal
    rescued: int                      # ... priced with the fallback's optimal answer
    priced_non_optimal: int           # ... priced with a non-optimal answer anyway
    statuses: dict


def _set_controls(limit, protect, rows, cs):
    n = rows.stop - rows.start
    P = limit.shape[1] - 1
    limit[rows, :P] = np.broadcast_to(cs.limit, (n, P))
    protect[rows, :P] = 0.0 if cs.protect is None else np.broadcast_to(cs.protect, (n, P))


def run_policies(instance, requests, policies, *, horizon, every, opt_mean, opt_std, curve_params,
                 initial=None, curve=None, arrivals=None) -> list:
    """Simulate every policy on every path of ``requests``; a :class:`PolicyOutcome` per policy.

    ``opt_mean``/``opt_std``: the optimizer's forecast for the whole horizon;
    ``initial``: per policy, the controls at time 0 computed once for all paths
    (a one-row :class:`ControlSet`), or None to compute them here.

    One function on purpose: a row is a (policy, path) pair, and the flat views of the capacity,
    sales, limit and protection arrays that the control updates write and the acceptance loop
    reads are shared by both; between the reoptimization times the loop accepts one request per
    path and policy at a time, vectorized over rows.
    """
    P, L = instance.n_products, instance.n_legs
    n, npol = len(requests.paths), len(policies)
    rows_n = n * npol
    legs = leg_matrix(instance, pad=L)
    legs = np.vstack([legs, np.full((1, legs.shape[1]), L, dtype=np.int64)])   # padding product P
    cap0 = np.floor(np.asarray(instance.capacity, dtype=np.float64) + 1e-9).astype(np.int64)
    cap = np.empty((rows_n, L + 1), dtype=np.int64)
    cap[:, :L] = cap0
    cap[:, L] = _UNLIMITED
    sold = np.zeros((rows_n, P + 1), dtype=np.int64)
    limit = np.zeros((rows_n, P + 1))
    protect = np.zeros((rows_n, P + 1))
    stats = [{"seconds": 0.0, "solves": 0, "failures": 0, "rescued": 0, "priced_non_optimal": 0, "statuses": {}}
             for _ in policies]
    tables = [None] * npol
    fare = np.r_[np.asarray(instance.fare, dtype=np.float64), 0.0]             # padding product earns 0
    fare_tol = TIE_RTOL * np.maximum(1.0, fare)
    states = [[None] * n for _ in policies]

    times = reoptimization_times(horizon, every)
    bounds = np.concatenate([requests.period_bounds(times), requests.counts[:, None]], axis=1)
    path_ix = np.arange(n)
    p_off = (np.arange(rows_n, dtype=np.int64) * (P + 1))
    l_off = (np.arange(rows_n, dtype=np.int64) * (L + 1))[:, None]
    cap_f, sold_f, lim_f, prot_f = cap.reshape(-1), sold.reshape(-1), limit.reshape(-1), protect.reshape(-1)
    K = requests.products.shape[1]

    for k, t in enumerate(times):
        ctx = None
        for p, pol in enumerate(policies):
            rows = slice(p * n, (p + 1) * n)
            if k == 0 and initial is not None:
                cs = initial[p]
                states[p] = [cs.states[0] if cs.states else None] * n
            elif k == 0 or pol.reoptimizes:
                if ctx is None:
                    m, s = remaining_forecast(opt_mean, opt_std, remaining_share(curve_params, t))
                    ctx = ControlContext(instance=instance, mean=m, std=s, t_frac=float(t), curve=curve,
                                         arrivals=arrivals)
                if k == 0:     # every path starts alike: one computation, shared
                    cs = pol.controls(ctx, cap[rows][:1, :L].astype(np.float64), sold[rows][:1, :P], [None])
                    states[p] = [cs.states[0] if cs.states else None] * n
                else:
                    cs = pol.controls(ctx, cap[rows, :L].astype(np.float64), sold[rows, :P], states[p])
                    states[p] = cs.states
                st = stats[p]
                for name in ("seconds", "solves", "failures", "rescued", "priced_non_optimal"):
                    st[name] += getattr(cs, name)
                for key, v in cs.statuses.items():
                    st["statuses"][key] = st["statuses"].get(key, 0) + v
            else:
                continue
            _set_controls(limit, protect, rows, cs)
            tables[p] = cs.tables

        lo, hi = bounds[:, k], bounds[:, k + 1]
        steps = int((hi - lo).max()) if n else 0
        if steps == 0:
            continue
        pos = lo[None, :] + np.arange(steps)[:, None]                 # (steps, n)
        prod = np.where(pos < hi[None, :], requests.products[path_ix[None, :], np.minimum(pos, K - 1)], P)
        PR = np.tile(prod, (1, npol))                                  # (steps, rows): same requests for every policy
        FP = PR + p_off[None, :]
        with_tables = [(p, tb) for p, tb in enumerate(tables) if tb is not None]
        if with_tables:
            tt = np.where(pos < hi[None, :], requests.times[path_ix[None, :], np.minimum(pos, K - 1)], 0.0)
        for s in range(steps):
            fl = legs[PR[s]] + l_off
            fp = FP[s]
            ok = (sold_f[fp] < lim_f[fp]) & (cap_f[fl].min(axis=1) > prot_f[fp])
            for p, tb in with_tables:
                rows = slice(p * n, (p + 1) * n)
                period = np.minimum((tt[s] * tb.periods).astype(np.int64), tb.periods - 1)
                pl = legs[PR[s, rows]]                                         # (n, W), padding leg L
                seats = cap[rows][np.arange(n)[:, None], pl]
                price = tb.lookup(pl, period[:, None], seats).sum(axis=1)
                ok[rows] &= fare[PR[s, rows]] >= price - fare_tol[PR[s, rows]]
            sold_f[fp] += ok
            cap_f[fl] -= ok[:, None]

    if rows_n and cap[:, :L].min() < 0:
        raise AssertionError("acceptance loop oversold a leg")   # a bug, not bad input
    revenue = (sold[:, :P] @ instance.fare).reshape(npol, n)
    seats = (cap0[None, :] - cap[:, :L]).sum(axis=1).reshape(npol, n)
    return [PolicyOutcome(revenue=revenue[p], seats=seats[p].astype(np.float64), **stats[p])
            for p in range(npol)]
