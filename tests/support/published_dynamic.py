"""Test and benchmark helper: the dynamic policies on one published hub-and-spoke problem.

Reads the problem with its per-period request probabilities (tests/support/hubspoke.py),
solves the DLP (HiGHS), computes the decomposition's and the Lagrangian
relaxation's tables, and simulates, on the same requests (drawn period by
period from the published probabilities), the static DLP bid-price policy (one
solve at time 0), the decomposition's tables from the DLP's and from the PNLP's (Ipopt) bid
prices, the relaxation's tables and first-come-first-served.
"""

from __future__ import annotations

import time

from decomp import solve
from decomp.dynamic import decompose, relax
from decomp.simulation import SimulationConfig, parse_policies, simulate

from .hubspoke import read_periods

POLICIES = "dlp:highs,dynamic:dlp:highs,relaxed:dlp:highs,dynamic:pnlp:ipopt,fcfs"


def run(path, paths: int = 200, seed: int = 0) -> dict:
    inst, demand = read_periods(path)
    t0 = time.perf_counter()
    dlp = solve(inst, "dlp", "highs")
    t1 = time.perf_counter()
    tables = decompose(inst, demand, dlp.bid_price_array, threads=1)
    t2 = time.perf_counter()
    rel = relax(inst, demand, dlp.bid_price_array)
    t3 = time.perf_counter()
    T = float(demand.periods)
    cfg = SimulationConfig(policies=parse_policies(POLICIES, periods=demand.periods), paths=paths, horizon=T,
                           reoptimize_every=(T,), arrivals=demand, seed=seed, add_fcfs=False)
    sim = simulate(inst, cfg)
    summary = sim.summary()
    return {"instance": inst, "demand": demand, "dlp": dlp, "tables": tables, "relaxation": rel,
            "simulation": sim, "summary": summary,
            "seconds": {"dlp": t1 - t0, "decomposition": t2 - t1, "relaxation": t3 - t2,
                        "simulation": sim.wall_seconds}}
