"""Measure the Lagrangian method's targets (a script, not a test: timings are noisy).

    .venv/bin/python scripts/measure_lagrangian.py [--sizes 10000,100000,1000000]
        [--repeats 3] [--ipopt-upto 100000] [--out results/lagrangian.json]

For each size it builds decomp.generator.generate(n, seed=15) (the p1m rung's seed
for 1,000,000), then reports:

* solve time of the method (its ``build`` and ``solve`` phases, best and all of
  ``--repeats`` runs), iterations, certified gap (from decomp.certify);
* time per iteration, and the log-log slope of it against products;
* peak memory: tracemalloc's peak of Python/numpy allocations during one solve
  (a separate run, since tracing slows it down) and the process's peak RSS;
* warm start: iterations and time after every mean is moved by a uniform
  factor in [0.95, 1.05] (seeded), from the unmoved instance's bid prices;
* optionally the 'ipopt' method on the same instance (sizes up to --ipopt-upto).

Also prints a load indicator (1-minute load average over CPUs): on a shared
machine all figures scale with it.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import sys
import time
import tracemalloc

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from decomp import SolverOptions, solve  # noqa: E402
from decomp.generator import generate  # noqa: E402


def _run(inst, warm=None, **kw):
    c = time.process_time()
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(**kw), warm_start=warm)
    _CPU[id(r)] = time.process_time() - c      # build + solve + certify, CPU seconds
    return r


_CPU = {}


def _cpu(r):
    return _CPU[id(r)]


def _first_certified(r, tol=1e-9):
    """(iteration, solve seconds) at which the history's certified gap first met tol."""
    for h in r.history:
        if h.gap is not None and h.gap <= tol:
            return h.iteration, h.seconds
    return None, None


def _peak_rss_mib():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def measure(n, repeats, ipopt_upto, seed=15):
    t = time.perf_counter()
    inst = generate(n, seed=seed)
    gen_s = time.perf_counter() - t
    runs = []
    for _ in range(repeats):
        r = _run(inst)
        runs.append(r)
    best = min(runs, key=lambda r: r.seconds["build"] + r.seconds["solve"])
    times = [r.seconds["build"] + r.seconds["solve"] for r in runs]
    out = {
        "products": n, "legs": inst.n_legs, "generate_s": gen_s,
        "termination": best.termination.value, "solution_status": best.solution_status.value,
        "iterations": best.iterations, "gap": best.gap,
        "max_violation_rel": best.certificate.max_violation_rel,
        "kkt_residual": best.certificate.kkt_residual,
        "build_s": best.seconds["build"], "solve_s": best.seconds["solve"],
        "certify_s": best.seconds["certify"], "method_s_all": times,
        "per_iteration_s": best.seconds["solve"] / max(best.iterations, 1),
        "linear_solver": best.options.get("linear_solver"),
        "cpu_s_all": [_cpu(r) for r in runs],
    }
    it1, s1 = _first_certified(best)
    out.update(first_certified_iteration=it1, first_certified_solve_s=s1)
    # memory: tracemalloc peak during one solve (numpy reports its buffers to it)
    tracemalloc.start()
    tracemalloc.reset_peak()
    _run(inst)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    out["tracemalloc_peak_mib"] = peak / 2 ** 20
    out["peak_rss_mib_so_far"] = _peak_rss_mib()
    # warm start after a +-5 % forecast change
    rng = np.random.default_rng(seed + 1)
    moved = inst.with_forecast(mean=inst.mean * rng.uniform(0.95, 1.05, inst.n_products))
    cold = _run(moved)
    warm = _run(moved, warm=best.bid_price_array)
    wit, _ = _first_certified(warm)
    out.update(warm_iterations=warm.iterations, warm_first_certified_iteration=wit,
               warm_gap=warm.gap, warm_status=warm.termination.value,
               warm_s=warm.seconds["build"] + warm.seconds["solve"],
               cold_moved_iterations=cold.iterations,
               cold_moved_s=cold.seconds["build"] + cold.seconds["solve"])
    if ipopt_upto and n <= ipopt_upto:
        ri = solve(inst, "pnlp", "ipopt")
        out.update(ipopt_s=ri.seconds["build"] + ri.seconds["solve"], ipopt_status=ri.termination.value,
                   ipopt_objective=ri.objective,
                   objective_rel_diff=(best.objective - ri.objective) / abs(ri.objective))
        out["speedup_vs_ipopt"] = out["ipopt_s"] / (out["build_s"] + out["solve_s"])
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10000,30000,100000,300000,1000000")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--ipopt-upto", type=int, default=0, help="also run 'ipopt' up to this many products")
    ap.add_argument("--out", default=None, help="write the figures as JSON here")
    args = ap.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",")]
    rows = []
    for n in sizes:
        load = os.getloadavg()[0] / (os.cpu_count() or 1)
        row = measure(n, args.repeats, args.ipopt_upto)
        row["load_per_cpu_before"] = load
        rows.append(row)
        print(f"{n:>9} products {row['legs']:>5} legs: {row['termination']:<15} it={row['iterations']:>3} "
              f"gap={row['gap']:.1e} build={row['build_s']:.3f}s solve={row['solve_s']:.3f}s "
              f"(runs {', '.join(f'{t:.2f}' for t in row['method_s_all'])}) "
              f"per-it={row['per_iteration_s'] * 1e3:.1f}ms mem={row['tracemalloc_peak_mib']:.0f}MiB "
              f"warm it={row['warm_iterations']} (gap<=1e-9 at it {row['warm_first_certified_iteration']}; "
              f"cold {row['cold_moved_iterations']}) load={load:.1f} "
              f"| certified at it {row['first_certified_iteration']} after {row['first_certified_solve_s']:.2f}s"
              + (f" ipopt={row['ipopt_s']:.2f}s x{row['speedup_vs_ipopt']:.0f}" if "ipopt_s" in row else ""),
              flush=True)
    if len(rows) >= 2:
        p = np.array([r["products"] for r in rows], dtype=float)
        t = np.array([r["per_iteration_s"] for r in rows])
        slope = float(np.polyfit(np.log(p), np.log(t), 1)[0])
        print(f"log-log slope of time per iteration vs products: {slope:.3f}")
    else:
        slope = None
    print(f"peak RSS of this process: {_peak_rss_mib():.0f} MiB")
    if args.out:
        from decomp.atomic import write_text

        write_text(args.out, json.dumps({"rows": rows, "per_iteration_slope": slope,
                                         "peak_rss_mib": _peak_rss_mib()}, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
