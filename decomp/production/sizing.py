"""Sizing the nightly run: fit time = a * products^b to benchmark data, project the wall time.

The benchmark data is the pytest-benchmark JSON that ``decomp bench`` writes
(``benchmark.json``): every solve case carries ``extra_info`` with
``n_products``, ``model``, ``method``, ``label`` and ``knobs`` (``tol`` among
them; absent means the default tolerance). Per (model, method, variant, tol)
the median times are fitted on logs (:func:`decomp.benchsuite.fit.fit_power_law`)
and the 95 % prediction interval of log t at the production size comes from the
fit's covariance and residual spread (Student t with n - 2 degrees of freedom,
the textbook prediction interval of a simple linear regression).

Projection for W workers: each task costs its predicted solve time plus a
per-task overhead (instance build, writes, scheduling; measured by a Dask run:
``overhead_per_task_seconds`` in its ``summary.json``), tasks are packed onto
the workers longest first (LPT: each next task goes to the least-loaded
worker), and the cluster start-up is added once. For equal tasks this is
``ceil(tasks / W) * (solve + overhead) + startup``.
"""

from __future__ import annotations

import dataclasses
import heapq
import json
import math
import pathlib

import numpy as np

from ..errors import ConfigError, InstanceError

DEFAULT_TOL = 1e-9   # SolverOptions' default tolerance, assumed when a case gives none


@dataclasses.dataclass(frozen=True)
class BenchCase:
    """One timed solve case of a benchmark file."""

    name: str
    model: str
    method: str
    variant: str          # the case's label (e.g. lagrangian-newton), or the method
    tol: float
    n_products: int
    seconds: float        # median time per round
    source: str
    accuracy_failures: int = 0   # accuracy checks the case failed (kept: its time is still real)
    revenue_loss_rel: float | None = None   # from ``decomp bench --revenue-paths N`` (None: not priced)
    revenue_paths: int | None = None
    revenue_loss_high: float | None = None  # upper end of its paired 95 % interval (None: not recorded)


# -- reading benchmark output --------------------------------------------------------

def _bench_files(path: pathlib.Path) -> list:
    if path.is_file():
        return [path]
    if path.is_dir():
        files = sorted(path.rglob("*.json"))
        if files:
            return files
        raise InstanceError("no benchmark JSON files in folder", file=path)
    raise InstanceError("benchmark file or folder not found", file=path)


def load_bench(path) -> list:
    """Every solve case with a time and a size in a benchmark file, or a folder of them."""
    out = []
    for f in _bench_files(pathlib.Path(path)):
        try:
            data = json.loads(f.read_text())
        except (OSError, ValueError) as exc:
            raise InstanceError(f"not a readable JSON file ({exc})", file=f) from exc
        if not isinstance(data, dict) or not isinstance(data.get("benchmarks"), list):
            if f == pathlib.Path(path):
                raise InstanceError("not a pytest-benchmark JSON file (no 'benchmarks' list)", file=f)
            continue
        for i, b in enumerate(data["benchmarks"], start=1):
            info = b.get("extra_info") or {}
            stats = b.get("stats") or {}
            # A solve stopped by a limit did not do the job: its time says nothing. A solve that
            # converged but missed an accuracy check (e.g. bid prices off a tighter reference where
            # the duals are not unique) still took the time the job takes: kept, and counted.
            if info.get("kind", "solve") != "solve" or info.get("termination", "optimal") != "optimal":
                continue
            n, t = info.get("n_products"), stats.get("median", stats.get("mean"))
            model, method = info.get("model"), info.get("method")
            if not (isinstance(n, (int, float)) and isinstance(t, (int, float)) and model and method):
                continue
            knobs = info.get("knobs") or {}
            tol = info.get("tol", knobs.get("tol", DEFAULT_TOL))
            try:
                tol = float(tol)
            except (TypeError, ValueError) as exc:
                raise InstanceError("tolerance is not a number", file=f, row=i, column="extra_info.tol",
                                    value=tol) from exc
            if n <= 0 or t <= 0:
                raise InstanceError("n_products and time must be positive", file=f, row=i,
                                    column="extra_info.n_products / stats.median", value=(n, t))
            loss = info.get("revenue_loss_rel")
            if loss is not None and (isinstance(loss, bool) or not isinstance(loss, (int, float))
                                     or not math.isfinite(loss)):
                raise InstanceError("revenue loss is not a finite number", file=f, row=i,
                                    column="extra_info.revenue_loss_rel", value=loss)
            paths = info.get("revenue_paths")
            ci = info.get("revenue_loss_ci")
            high = (float(ci[1]) if isinstance(ci, (list, tuple)) and len(ci) == 2
                    and isinstance(ci[1], (int, float)) and math.isfinite(ci[1]) else None)
            out.append(BenchCase(name=str(b.get("name", f"case {i}")), model=str(model), method=str(method),
                                 variant=str(info.get("label") or method), tol=tol, n_products=int(n),
                                 seconds=float(t), source=str(f),
                                 accuracy_failures=len(info.get("accuracy_failures") or ()),
                                 revenue_loss_rel=None if loss is None else float(loss),
                                 revenue_paths=int(paths) if isinstance(paths, (int, float)) else None,
                                 revenue_loss_high=high))
    return out


def select(cases, model: str, method: str, variant: str | None = None) -> dict:
    """Cases of one model and method (and variant), grouped by tolerance: {tol: [cases]}."""
    chosen = [c for c in cases if c.model == model and c.method == method]
    if not chosen:
        have = sorted({f"{c.model}/{c.method}" for c in cases})
        raise ConfigError(f"no benchmark cases for model {model!r}, method {method!r}; "
                          f"the file has: {', '.join(have) or 'none'}")
    variants = sorted({c.variant for c in chosen})
    if variant is None:
        # the method's default variant when present (e.g. lagrangian-newton), else the commonest
        default = [v for v in variants if v in (method, f"{method}-newton")]
        variant = default[0] if default else max(variants, key=lambda v: sum(c.variant == v for c in chosen))
    elif variant not in variants:
        raise ConfigError(f"no benchmark cases for variant {variant!r}; have: {', '.join(variants)}")
    groups = {}
    for c in chosen:
        if c.variant == variant:
            groups.setdefault(c.tol, []).append(c)
    return groups


# -- the fit -------------------------------------------------------------------

@dataclasses.dataclass(frozen=True)
class TimeModel:
    """t(n) = a n^b with its uncertainty; ``q`` is the 95 % Student t quantile."""

    a: float
    b: float
    b_stderr: float | None
    sigma: float | None         # residual sd of log t
    cov: tuple | None           # covariance of (log a, b)
    n_points: int
    n_min: float
    n_max: float
    q: float | None

    @classmethod
    def fit(cls, n, t) -> "TimeModel":
        from ..benchsuite.fit import fit_power_law

        f = fit_power_law(n, t)
        s = f.stderr
        dof = int(s["n_points"]) - 2
        q = None
        if dof > 0:
            from scipy import stats

            q = float(stats.t.ppf(0.975, dof))
        cov = None if s.get("cov") is None else tuple(tuple(r) for r in s["cov"])
        return cls(a=f.a, b=f.b, b_stderr=s.get("b"), sigma=s.get("sigma"), cov=cov,
                   n_points=int(s["n_points"]), n_min=float(s["n_min"]), n_max=float(s["n_max"]), q=q)

    def predict(self, n) -> np.ndarray:
        return self.a * np.asarray(n, dtype=np.float64) ** self.b

    def interval(self, n):
        """(low, high) 95 % prediction interval of the time of one solve at size(s) n, or None."""
        if self.cov is None or self.q is None:
            return None
        x = np.log(np.asarray(n, dtype=np.float64))
        c = np.asarray(self.cov)
        var_fit = c[0, 0] + 2 * x * c[0, 1] + x * x * c[1, 1]
        sd = np.sqrt(np.maximum(var_fit, 0.0) + self.sigma ** 2)
        mid = self.predict(n)
        return mid * np.exp(-self.q * sd), mid * np.exp(self.q * sd)

    def to_dict(self) -> dict:
        return {"a": self.a, "b": self.b, "b_stderr": self.b_stderr, "sigma_log": self.sigma,
                "n_points": self.n_points, "n_range": [self.n_min, self.n_max]}


# -- packing and projection ------------------------------------------------------

def lpt_makespan(times, workers: int) -> float:
    """Finish time of ``times`` on ``workers`` machines, longest first, each to the least-loaded one."""
    workers = int(workers)
    if workers < 1:
        raise ConfigError(f"workers must be at least 1, got {workers}")
    times = np.sort(np.asarray(times, dtype=np.float64))[::-1]
    if times.size == 0:
        return 0.0
    if np.all(times == times[0]):                    # equal tasks: whole rounds
        return float(math.ceil(times.size / workers) * times[0])
    loads = [0.0] * min(workers, times.size)
    heapq.heapify(loads)
    for t in times:                                  # one step per task (hundreds), not per product
        heapq.heappush(loads, heapq.heappop(loads) + float(t))
    return float(max(loads))


def project(task_products, model: TimeModel, workers: int, overhead: float = 0.0, startup: float = 0.0) -> dict:
    """Projected wall seconds (central and 95 % interval) of the tasks on ``workers``."""
    p = np.asarray(task_products, dtype=np.float64)
    mid = model.predict(p)
    out = {"workers": int(workers), "wall_seconds": startup + lpt_makespan(mid + overhead, workers)}
    iv = model.interval(p)
    if iv is None:
        out["wall_low"] = out["wall_high"] = None
    else:
        out["wall_low"] = startup + lpt_makespan(iv[0] + overhead, workers)
        out["wall_high"] = startup + lpt_makespan(iv[1] + overhead, workers)
    return out


def smallest_workers(task_products, model, window, overhead=0.0, startup=0.0, key="wall_seconds",
                     limit: int | None = None):
    """The fewest workers whose projection (``key``) fits the window, or None."""
    n = len(task_products)
    for w in range(1, (limit or n) + 1):
        v = project(task_products, model, w, overhead, startup)[key]
        if v is not None and v <= window:
            return w
    return None


# -- production shape ----------------------------------------------------------------

def instance_products(folder) -> int:
    """Products in an instance folder, without reading it whole."""
    folder = pathlib.Path(folder)
    meta = folder / "meta.json"
    if meta.is_file():
        try:
            n = json.loads(meta.read_text()).get("n_products")
            if isinstance(n, int) and n > 0:
                return n
        except ValueError:
            pass
    if (folder / "products.parquet").is_file():
        import pyarrow.parquet as pq

        return int(pq.ParquetFile(folder / "products.parquet").metadata.num_rows)
    if (folder / "products.csv").is_file():
        with open(folder / "products.csv", "rb") as fh:
            lines = sum(chunk.count(b"\n") for chunk in iter(lambda: fh.read(1 << 20), b""))
        return max(lines - 1, 0)
    raise InstanceError("no products table (products.csv or products.parquet)", file=folder)


def task_sizes(dates: int, products: int | None = None, networks: int = 1, instances=None) -> np.ndarray:
    """Products per task: ``dates`` x ``networks`` tasks of ``products``, or per instance folder x dates."""
    if instances is not None:
        root = pathlib.Path(instances)
        if not root.is_dir():
            raise InstanceError("instances folder not found", file=root)
        folders = sorted(p for p in root.iterdir() if p.is_dir() and not p.name.startswith("."))
        if not folders:
            raise InstanceError("no instance folders", file=root)
        sizes = np.array([instance_products(f) for f in folders], dtype=np.float64)
        return np.tile(sizes, max(int(dates or 1), 1))
    if not products or products < 1:
        raise ConfigError("give --products P (per network) or --instances DIR")
    if dates < 1 or networks < 1:
        raise ConfigError("--dates and --networks must be at least 1")
    return np.full(int(dates) * int(networks), float(products))


def read_run_overhead(path) -> tuple:
    """(overhead per task, cluster start) in seconds from a ``decomp run`` summary.json: its
    ``measurements`` (kept across a rerun that solved nothing), or the ``totals`` of older summaries."""
    try:
        data = json.loads(pathlib.Path(path).read_text())
        t = data.get("measurements") or data["totals"]
        ov, st = t.get("overhead_per_task_seconds"), t.get("cluster_start_seconds", 0.0)
    except (OSError, ValueError, KeyError, TypeError, AttributeError) as exc:
        raise InstanceError(f"not a decomp run summary ({exc})", file=path, column="totals") from exc
    if ov is None:
        raise InstanceError("the summary has no measured overhead (no task ran in it)", file=path,
                            column="totals.overhead_per_task_seconds")
    return float(ov), float(st or 0.0)


def read_run_solves(path) -> list:
    """(products, solve seconds) of every task of a ``decomp run`` summary.json that ended ok.

    A task skipped as finished keeps the solve time recorded when it ran (in an earlier
    invocation on the same output folder, with the same arguments), so a pilot run again counts.
    """
    try:
        tasks = json.loads(pathlib.Path(path).read_text())["tasks"]
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise InstanceError(f"not a decomp run summary ({exc})", file=path, column="tasks") from exc
    out = [(float(t["n_products"]), float(t["seconds_solve"])) for t in tasks
           if t.get("task_status", t.get("status")) == "ok"                          # "status": earlier runs
           and isinstance(t.get("n_products"), (int, float)) and isinstance(t.get("seconds_solve"), (int, float))]
    if not out:
        raise InstanceError("the summary has no task that ran to ok in it", file=path, column="tasks")
    return out


REVENUE_ESTIMATE = ("the benchmark's revenue_loss_rel, (reference mean - case mean) / reference mean over "
                    "common sample paths, and the upper end of its paired 95 % interval (revenue_loss_ci): a "
                    "tolerance is within the limit only when that upper end is")
#: Fewest benchmark sizes a time fit is made from (two points fit any line exactly: no spread, no interval).
MIN_FIT_SIZES = 3


def loosest_within_loss(groups: dict, max_loss: float, baseline_tol: float) -> dict:
    """The loosest benchmarked tolerance whose revenue loss is at most ``max_loss`` at the largest rung.

    ``groups``: {tol: [BenchCase]} of one model, method and variant (:func:`select`). The
    largest rung is the largest size with a priced case; at it each tolerance's loss is the
    largest over its cases there (the point estimate, see :data:`REVENUE_ESTIMATE`) and its
    time the median of their median times. ``seconds_saved_measured``: the baseline
    tolerance's time minus the answer's at that rung (None when the baseline is not
    priced there).
    """
    if not (isinstance(max_loss, (int, float)) and math.isfinite(max_loss) and max_loss >= 0):
        raise ConfigError(f"--revenue-loss must be a relative loss >= 0 (e.g. 0.001), got {max_loss}")
    priced = [c for cs in groups.values() for c in cs if c.revenue_loss_rel is not None]
    if not priced:
        any_case = next(c for cs in groups.values() for c in cs)
        raise ConfigError(f"the benchmark has no revenue data for {any_case.model}/{any_case.variant}; run "
                          f"`decomp bench --revenue-paths N` (e.g. 200) and size from its benchmark.json")
    n_star = max(c.n_products for c in priced)
    rows = []
    for t in sorted(groups):
        at = [c for c in groups[t] if c.n_products == n_star and c.revenue_loss_rel is not None]
        if not at:
            continue
        loss = max(c.revenue_loss_rel for c in at)
        highs = [c.revenue_loss_high for c in at]
        high = None if any(h is None for h in highs) else max(highs)
        why = ("no interval recorded (rerun decomp bench --revenue-paths N)" if high is None else
               "interval within" if high <= max_loss else
               "interval reaches past the limit" if loss <= max_loss else "point estimate past the limit")
        rows.append({"tol": t, "revenue_loss_rel": loss, "revenue_loss_high": high,
                     "seconds": float(np.median([c.seconds for c in at])),
                     "paths": min((c.revenue_paths for c in at if c.revenue_paths), default=None),
                     "cases": [c.name for c in at], "within": bool(high is not None and high <= max_loss),
                     "why": why})
    ok = [r for r in rows if r["within"]]
    best = max(ok, key=lambda r: r["tol"]) if ok else None
    base = [r for r in rows if math.isclose(r["tol"], baseline_tol, rel_tol=1e-9)]
    saved = None
    if best is not None and base:
        saved = base[0]["seconds"] - best["seconds"]
    return {"max_loss_rel": float(max_loss), "estimate": REVENUE_ESTIMATE, "rung_products": int(n_star),
            "by_tol": rows, "loosest_tol": None if best is None else best["tol"],
            "revenue_loss_rel": None if best is None else best["revenue_loss_rel"],
            "baseline_tol": float(baseline_tol),
            "seconds_saved_measured": saved}


#: A calibration applied at more than this multiple of the pilot's largest task is flagged: what a
#: pilot measures (the machine's contention on top of the benchmark) is known at the pilot's size.
CALIBRATION_REACH_WARN = 10.0


def calibrate(fit: TimeModel, pairs, task_products) -> dict:
    """The factor pilot / benchmark fit, and how far it is carried.

    ``pairs``: (products, solve seconds) of the pilot's tasks. The factor is the median of
    measured / predicted over them. A pilot whose tasks are all smaller than the smallest
    benchmark case of the fit is refused (ConfigError): the fit is an extrapolation there, and
    small solves are mostly fixed costs, so the ratio says little about the production size.
    ``reach`` is the production's largest task over the pilot's largest; above
    :data:`CALIBRATION_REACH_WARN` the answer carries a warning.
    """
    n_c, s_c = np.array(pairs, dtype=np.float64).T
    pilot_max, task_max = float(n_c.max()), float(np.max(task_products))
    if pilot_max < fit.n_min / 1.0000001:
        raise ConfigError(
            f"the pilot is too small to calibrate with: its largest task has {pilot_max:,.0f} products, below "
            f"the smallest benchmark case of the fit ({fit.n_min:,.0f}); at that size solves are mostly fixed "
            f"costs, so its ratio to the fit says little about {task_max:,.0f}-product tasks. Run the pilot at "
            f"{fit.n_min:,.0f} products or more (best: the production size), or size without --calibrate")
    ratios = s_c / fit.predict(n_c)
    reach = task_max / pilot_max
    warning = None
    if reach > CALIBRATION_REACH_WARN:
        warning = (f"the calibration is measured on pilot tasks of up to {pilot_max:,.0f} products and applied at "
                   f"{task_max:,.0f}, {reach:,.0f}x beyond the pilot; run the pilot nearer the production size")
    return {"factor": float(np.median(ratios)), "pilot_tasks": int(len(n_c)),
            "pilot_products": [float(n_c.min()), pilot_max], "ratio_range": [float(ratios.min()), float(ratios.max())],
            "applied_at_products": task_max, "reach": reach, "warning": warning}


def size_run(cases, *, model, method, tol, task_products, workers, window, overhead=0.0, startup=0.0,
             variant=None, fit_min_products: int | None = None, calibration=None,
             revenue_loss: float | None = None) -> dict:
    """The sizing answer: fit, projection on ``workers``, fits or not, margin, smallest workers, other tols.

    ``fit_min_products`` leaves smaller cases out of the fit (their fixed costs bend the curve).
    ``calibration``: (products, solve seconds) pairs measured in a pilot Dask run of the same
    method and tolerance on the production machine; every fit is then scaled by the median of
    measured / predicted, which carries the machine's contention (workers sharing cores and
    memory bandwidth, other load) that a one-process benchmark does not see.
    ``revenue_loss``: also answer the loosest benchmarked tolerance whose revenue loss
    is within it (:func:`loosest_within_loss`) and the solve time it saves per task
    against ``tol`` (measured at the benchmark rung; projected at the tasks' size from
    both fits when the answer's tolerance has cases at two sizes or more).
    """
    groups, tols, t0 = _groups_at(cases, model, method, variant, tol, fit_min_products)
    task_products = np.asarray(task_products, dtype=np.float64)
    factor = cal = None
    if calibration:
        cal = calibrate(_time_model(groups[t0]), calibration, task_products)
        factor = cal["factor"]

    def answer(t):
        return _answer(t, groups[t], _time_model(groups[t], factor), task_products, workers, window,
                       overhead, startup)

    main, tm = answer(t0)
    looser = [t for t in tols if t > t0 * (1 + 1e-9)]
    others = [answer(t)[0] for t in looser if len({c.n_products for c in groups[t]}) >= MIN_FIT_SIZES]
    too_few = [t for t in looser if len({c.n_products for c in groups[t]}) < MIN_FIT_SIZES]
    w_max = min(max(2 * workers, (main["smallest_workers"] or 2 * workers) + 2, 8), len(task_products))
    curve = [project(task_products, tm, w, overhead, startup) for w in range(1, w_max + 1)]
    revenue = None
    if revenue_loss is not None:
        revenue = loosest_within_loss(groups, revenue_loss, t0)
        revenue["seconds_saved_per_task"] = None
        lt = revenue["loosest_tol"]
        if lt is not None and len({c.n_products for c in groups[lt]}) >= MIN_FIT_SIZES:
            per_l = float(_time_model(groups[lt], factor).predict(np.max(task_products)))
            revenue["per_task_solve_seconds"] = per_l
            revenue["seconds_saved_per_task"] = main["per_task_solve_seconds"] - per_l
    return {"model": model, "method": method, "variant": next(iter(groups[t0])).variant,
            "revenue": revenue,
            "tasks": int(task_products.size), "products_min": float(task_products.min()),
            "products_max": float(task_products.max()), "workers": int(workers), "window_seconds": window,
            "overhead_per_task_seconds": overhead, "startup_seconds": startup, "calibration_factor": factor,
            "calibration": cal,
            "result": main, "looser": others, "looser_too_few_sizes": too_few, "curve": curve}


def _groups_at(cases, model, method, variant, tol, fit_min_products) -> tuple:
    """(the cases of the method by tolerance, the tolerances, the one matching ``tol``); a
    ConfigError when ``tol`` has no cases or too few sizes to fit."""
    if fit_min_products:
        cases = [c for c in cases if c.n_products >= fit_min_products]
    groups = select(cases, model, method, variant)
    tols = sorted(groups)
    match = [t for t in tols if math.isclose(t, tol, rel_tol=1e-9)]
    if not match:
        raise ConfigError(f"no benchmark cases at tol {tol:g} for {model}/{method}; "
                          f"tolerances there: {', '.join(f'{t:g}' for t in tols)}")
    sizes = sorted({c.n_products for c in groups[match[0]]})
    if len(sizes) < MIN_FIT_SIZES:
        raise ConfigError(
            f"the benchmark has {model}/{method} at tol {tol:g} on {len(sizes)} size(s) "
            f"({', '.join(f'{n:,}' for n in sizes)} products"
            + (f", from {fit_min_products:,} up" if fit_min_products else "") + f"); a time fit needs at least "
            f"{MIN_FIT_SIZES} (with fewer there is no spread to size a prediction interval from): benchmark "
            f"more rungs, or lower --fit-min-products")
    return groups, tols, match[0]


def _time_model(cases, factor: float | None = None) -> TimeModel:
    """The time fit of ``cases``, scaled by the calibration ``factor`` when there is one."""
    tm = TimeModel.fit([c.n_products for c in cases], [c.seconds for c in cases])
    return tm if factor is None else dataclasses.replace(tm, a=tm.a * factor)


def _answer(t, cases, tm: TimeModel, task_products, workers, window, overhead, startup) -> tuple:
    """(the sizing at tolerance ``t`` with time model ``tm``: projection, fit to the window, margin,
    fewest workers, whether the tasks' sizes lie outside the fitted range; tm)."""
    pr = project(task_products, tm, workers, overhead, startup)
    res = {"tol": t, "fit": tm.to_dict(), "per_task_solve_seconds": float(tm.predict(np.max(task_products))), **pr,
           "cases": [c.name for c in cases],
           "cases_with_accuracy_failures": sum(1 for c in cases if c.accuracy_failures),
           "fits": pr["wall_seconds"] <= window, "margin_seconds": window - pr["wall_seconds"],
           "fits_high": None if pr["wall_high"] is None else pr["wall_high"] <= window,
           "smallest_workers": smallest_workers(task_products, tm, window, overhead, startup),
           "smallest_workers_high": (None if pr["wall_high"] is None else
                                     smallest_workers(task_products, tm, window, overhead, startup,
                                                      key="wall_high")),
           "extrapolated": bool(np.max(task_products) > tm.n_max * 1.0000001
                                or np.min(task_products) < tm.n_min / 1.0000001)}
    return res, tm


def plot(sizing: dict, path) -> None:
    """PNG of projected wall time against workers, the window drawn, written atomically."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from .. import atomic

    w = [c["workers"] for c in sizing["curve"]]
    mid = [c["wall_seconds"] / 60 for c in sizing["curve"]]
    fig, ax = plt.subplots(figsize=(7, 4.2))
    ax.plot(w, mid, marker="o", ms=3, label=f"projected ({sizing['method']}, tol {sizing['result']['tol']:g})")
    if sizing["curve"][0]["wall_low"] is not None:
        ax.fill_between(w, [c["wall_low"] / 60 for c in sizing["curve"]],
                        [c["wall_high"] / 60 for c in sizing["curve"]], alpha=0.25, label="95 % prediction")
    ax.axhline(sizing["window_seconds"] / 60, color="crimson", ls="--", label="window")
    ax.axvline(sizing["workers"], color="grey", ls=":", label=f"{sizing['workers']} workers")
    ax.set_xlabel("workers")
    ax.set_ylabel("wall time (minutes)")
    ax.set_yscale("log")
    cal = sizing.get("calibration")
    calibrated = (f"calibrated: benchmark fit x {cal['factor']:.2f} from pilot tasks of up to "
                  f"{cal['pilot_products'][1]:,.0f} products ({cal['reach']:.3g}x beyond them)" if cal
                  else "NOT calibrated: benchmark machine times (use --calibrate with a pilot run)")
    ax.set_title(f"{sizing['tasks']} tasks of {sizing['products_max']:,.0f} products: {sizing['model']}\n"
                 f"{calibrated}", fontsize=10)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    with atomic.atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    plt.close(fig)
