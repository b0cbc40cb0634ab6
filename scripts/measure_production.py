#!/usr/bin/env python
"""Measure the production-run targets on this machine.

    .venv/bin/python scripts/measure_production.py --out /tmp/prod-measure

Steps (each a real ``decomp run`` on an embedded LocalCluster, PNLP by the
chosen method to --tol, a generated base network of --products products and
a per-date demand variation):

1. throughput: --throughput-tasks dates cold on 1 worker, then on --workers
   workers (ratio of tasks per second, cluster start excluded);
2. benchmark data for sizing: --bench FILE, or ``decomp bench --suite quick
   -k "pnlp and lagrangian and newton"`` run into OUT/bench;
3. sizing: ``decomp size`` for --dates tasks on --workers, with the per-task
   overhead and start-up measured in step 1's multi-worker run (not in the
   run it predicts), from the benchmark alone and calibrated by that pilot
   run's solve times (``decomp size --calibrate``);
4. the cold run: --dates dates on --workers workers;
5. the warm run: the next night's forecasts (variation seed + 1, so every
   date's demand changed) warm-started from the cold run's bid prices;
   with --warm-same also a warm run on unchanged forecasts.

Writes OUT/measure.json and prints a table. The machine may be shared: the
wall times are as noisy as its load (the load average is recorded).
"""

from __future__ import annotations

import argparse
import json
import os
import pathlib
import subprocess
import sys
import time


def _run(batch_arg, days, start, method, tol, out, workers, seed=0, warm=None):
    from decomp.options import SolverOptions
    from decomp.production.batch import DateVariation, build_batch, date_range
    from decomp.production.runner import RunConfig, run_batch

    if out.exists():
        # decomp run resumes: finished tasks would be skipped and the wall time measure nothing
        raise SystemExit(f"{out} exists: a measurement needs a fresh --out (decomp run would resume it)")
    b = build_batch(batch_arg, date_range(days=days, start=start), DateVariation(seed=seed))
    cfg = RunConfig(model="pnlp", method=method, options=SolverOptions(tol=tol, threads=1), out=str(out),
                    warm_start_from=None if warm is None else str(warm))
    t0 = time.perf_counter()
    s = run_batch(b, cfg, workers=workers)
    t = s["totals"]
    print(f"  {out.name}: {t['n_tasks']} tasks ({t['ok']} ok, {t['failed']} failed, {t['skipped']} skipped) "
          f"wall {t['wall_seconds']:.1f} s (cluster start {t['cluster_start_seconds']:.1f} s), "
          f"overhead/task {t['overhead_per_task_seconds'] or 0:.3f} s; load {os.getloadavg()[0]:.1f}",
          flush=True)
    its = [x["iterations"] for x in s["tasks"] if isinstance(x.get("iterations"), int)]
    solve = [x["seconds_solve"] for x in s["tasks"] if isinstance(x.get("seconds_solve"), float)]
    return {"out": str(out), "tasks": t["n_tasks"], "ok": t["ok"], "failed": t["failed"],
            "skipped": t["skipped"], "wall_seconds": t["wall_seconds"],
            "cluster_start_seconds": t["cluster_start_seconds"],
            "run_seconds": t["wall_seconds"] - t["cluster_start_seconds"],
            "overhead_per_task_seconds": t["overhead_per_task_seconds"], "max_gap": t["max_gap"],
            "mean_iterations": sum(its) / len(its) if its else None,
            "mean_solve_seconds": sum(solve) / len(solve) if solve else None,
            "client_seconds": time.perf_counter() - t0, "load_after": os.getloadavg()}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--out", required=True, type=pathlib.Path)
    ap.add_argument("--products", type=int, default=100_000)
    ap.add_argument("--seed", type=int, default=1, help="generator seed of the base network")
    ap.add_argument("--dates", type=int, default=365)
    ap.add_argument("--start", default="2027-01-01")
    ap.add_argument("--method", default="lagrangian")
    ap.add_argument("--tol", type=float, default=1e-9)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--window", default="3m", help="the target wall time (default: %(default)s)")
    ap.add_argument("--throughput-tasks", type=int, default=24)
    ap.add_argument("--bench", help="decomp bench output to size from (default: run the quick suite's lagrangian cases)")
    ap.add_argument("--fit-min-products", type=int, default=1000,
                    help="fit only benchmark cases this large (default: %(default)s)")
    ap.add_argument("--skip", nargs="*", default=[], choices=("throughput", "sizing", "cold", "warm"))
    ap.add_argument("--warm-same", action="store_true", help="also a warm run on unchanged forecasts")
    args = ap.parse_args(argv)

    from decomp.production import sizing
    from decomp.production.durations import parse_duration

    out = args.out
    out.mkdir(parents=True, exist_ok=True)
    report_path = out / "measure.json"
    rep = json.loads(report_path.read_text()) if report_path.exists() else {}
    rep.update(products=args.products, dates=args.dates, method=args.method, tol=args.tol, workers=args.workers,
               cpu_count=os.cpu_count(), note="shared machine: timings are as noisy as its load")
    base = f"gen:{args.products}:{args.seed}"

    def save():
        from decomp import atomic

        atomic.write_json(report_path, rep)

    if "throughput" not in args.skip:
        print("1. throughput", flush=True)
        one = _run(base, args.throughput_tasks, args.start, args.method, args.tol, out / "tp-1", 1)
        many = _run(base, args.throughput_tasks, args.start, args.method, args.tol, out / f"tp-{args.workers}",
                    args.workers)
        rep["throughput"] = {"one_worker": one, "many_workers": many,
                             "ratio": one["run_seconds"] / many["run_seconds"]}
        print(f"   throughput ratio {args.workers} vs 1 worker: {rep['throughput']['ratio']:.2f}x", flush=True)
        save()

    if "sizing" not in args.skip:
        print("2. benchmark data", flush=True)
        bench = args.bench
        if bench is None:
            bench = str(out / "bench")
            if not (out / "bench" / "benchmark.json").exists():
                cmd = [sys.executable, "-m", "decomp.cli", "bench", "--suite", "quick", "-k", "pnlp and lagrangian and newton",
                       "--out", bench, "--no-progress"]
                print("   " + " ".join(cmd), flush=True)
                subprocess.run(cmd, check=False)
        print("3. sizing", flush=True)
        tp = rep.get("throughput", {}).get("many_workers")
        if tp is None:
            raise SystemExit("sizing needs the throughput step's multi-worker run (do not skip it)")
        cases = sizing.load_bench(bench)
        kw = dict(model="pnlp", method=args.method, tol=args.tol,
                  task_products=sizing.task_sizes(args.dates, args.products), workers=args.workers,
                  window=parse_duration(args.window), overhead=tp["overhead_per_task_seconds"],
                  startup=tp["cluster_start_seconds"], fit_min_products=args.fit_min_products)
        s = sizing.size_run(cases, **kw)
        # the same, calibrated by the pilot run's measured solve times (decomp size --calibrate)
        cal = sizing.size_run(cases, calibration=sizing.read_run_solves(pathlib.Path(tp["out"]) / "summary.json"),
                              **kw)
        rep["sizing_calibrated"] = {"factor": cal["calibration_factor"],
                                    "projected_seconds": cal["result"]["wall_seconds"]}
        print(f"   calibrated by the pilot run (x{cal['calibration_factor']:.2f}): projected "
              f"{cal['result']['wall_seconds']:.1f} s", flush=True)
        rep["sizing"] = {"bench": bench, "fit": s["result"]["fit"], "projected_seconds": s["result"]["wall_seconds"],
                         "interval": [s["result"]["wall_low"], s["result"]["wall_high"]],
                         "per_task_solve_seconds": s["result"]["per_task_solve_seconds"],
                         "overhead_per_task_seconds": tp["overhead_per_task_seconds"],
                         "startup_seconds": tp["cluster_start_seconds"]}
        print(f"   projected {s['result']['wall_seconds']:.1f} s for {args.dates} tasks on {args.workers} workers "
              f"(solve {s['result']['per_task_solve_seconds']:.3f} s + overhead "
              f"{tp['overhead_per_task_seconds']:.3f} s per task)", flush=True)
        save()

    if "cold" not in args.skip:
        print("4. cold run", flush=True)
        rep["cold"] = _run(base, args.dates, args.start, args.method, args.tol, out / "cold", args.workers)
        save()

    if "warm" not in args.skip:
        print("5. warm run (next night's forecasts, from the cold run's bid prices)", flush=True)
        rep["warm_changed"] = _run(base, args.dates, args.start, args.method, args.tol, out / "warm-changed",
                                   args.workers, seed=1, warm=out / "cold")
        if args.warm_same:
            rep["warm_same"] = _run(base, args.dates, args.start, args.method, args.tol, out / "warm-same",
                                    args.workers, seed=0, warm=out / "cold")
        save()

    print("\nresults (shared machine, noisy):")
    if "cold" in rep:
        print(f"  cold run: {rep['cold']['wall_seconds']:.1f} s wall for {rep['cold']['tasks']} tasks "
              f"(target <= {parse_duration(args.window):.0f} s); max gap {rep['cold']['max_gap']}")
    for k in ("warm_changed", "warm_same"):
        if k in rep:
            print(f"  {k}: {rep[k]['wall_seconds']:.1f} s wall; mean iterations {rep[k]['mean_iterations']}, "
                  f"cold {rep.get('cold', {}).get('mean_iterations')}")
    if "throughput" in rep:
        print(f"  throughput ratio: {rep['throughput']['ratio']:.2f}x (target >= 1.7x)")
    if "sizing" in rep and "cold" in rep:
        err = rep["sizing"]["projected_seconds"] / rep["cold"]["wall_seconds"] - 1
        rep["sizing"]["error_vs_cold"] = err
        print(f"  sizing: projected {rep['sizing']['projected_seconds']:.1f} s vs measured "
              f"{rep['cold']['wall_seconds']:.1f} s: {100 * err:+.1f} % (target within 20 %)")
        if "sizing_calibrated" in rep:
            err_c = rep["sizing_calibrated"]["projected_seconds"] / rep["cold"]["wall_seconds"] - 1
            rep["sizing_calibrated"]["error_vs_cold"] = err_c
            print(f"  sizing calibrated by the pilot run: projected "
                  f"{rep['sizing_calibrated']['projected_seconds']:.1f} s: {100 * err_c:+.1f} %")
        save()
    print(f"written {report_path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
