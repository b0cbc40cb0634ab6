"""``decomp run``: the nightly production run on Dask.

BATCH is a folder of instance folders (one task each), an instance folder, or
``gen:PRODUCTS[:SEED]`` (a generated network); with ``--dates FIRST:LAST`` or
``--dates N`` (N dates from ``--start``; as in ``decomp size``) every base network is solved once per departure date, with a
deterministic per-date demand variation. Each task's bid prices (Parquet) and
result (JSON) land in OUT/tasks/<key>/, written atomically; rerunning with the
same arguments skips finished tasks once their output is verified (checksum,
one bid price per leg, same instance content); a task that ended non-optimal
is solved again. ``--warm-start`` an earlier run's OUT starts each task
from the bid prices of the same key there.

A task whose method ends non-optimal is solved again by ``--fallback`` (default
``auto``: highs for dlp/pwl, ipopt for a normal-demand pnlp, lagrangian:lbfgsb
for other pnlp demand; ``none`` turns it off); the task record and the summary
say which method produced the published bid prices.

One run at a time per OUT (a lock; a second run exits 1 naming the holder).
SIGTERM and Ctrl-C both stop the run, keep what is finished and write the
summary marked interrupted (exit 1); one that arrives after the last task has
finished is noted in the summary, which is written all the same, and the exit
code is that of the finished run. A Ctrl-C at the terminal stops the client
only: the workers ignore it and are closed by the client. A full or read-only OUT stops the run with that
reason, keeping every finished task. The embedded cluster speaks TLS with
credentials made for the run (no other local user can connect); the Dask
dashboard is off unless ``--dashboard PORT`` (loopback only). ``--scheduler``
connects with the credentials of Dask's configuration (README, Reliability).
The summary is written to OUT/summary.json and OUT/summary.md.
"""

from __future__ import annotations

import sys

from . import _progress
from ._options import count, demand_mix, duration, number, port, positive, positive_number
from ._vocabulary import old_name


def register(sub):
    p = sub.add_parser("run", help="solve a batch of departure dates on Dask (resumable)", description=__doc__)
    p.add_argument("batch", help="folder of instances, an instance folder, or gen:PRODUCTS[:SEED]")
    from .generate import DEMAND_HELP

    p.add_argument("--demand", type=demand_mix, metavar="MIX",
                   help="of a gen:PRODUCTS[:SEED] batch: " + DEMAND_HELP)
    p.add_argument("--out", required=True, help="output folder (finished tasks in it are skipped; required)")
    p.add_argument("--model", default="pnlp", choices=("dlp", "pnlp", "pwl"), help="default: %(default)s")
    p.add_argument("--method", default=None,
                   help="method of --model (default: lagrangian for pnlp, highs for dlp and pwl)")
    p.add_argument("--tol", type=positive_number, default=1e-9, help="optimality tolerance (default: %(default)g)")
    p.add_argument("--time-limit", type=positive_number, default=None, help="seconds per task solve (default: none)")
    p.add_argument("--iteration-limit", type=positive, default=None, metavar="N",
                   help="iterations per task solve (default: the method's own)")
    p.add_argument("--fallback", default="auto", metavar="METHOD",
                   help="method for tasks the primary leaves non-optimal: auto, none, a method "
                        "name, or lagrangian:DUAL (newton, lbfgsb, subgradient) (default: %(default)s)")
    g = p.add_argument_group("departure dates")
    g.add_argument("--dates", metavar="N|FIRST:LAST",
                   help="N dates from --start, or FIRST:LAST inclusive ISO dates, e.g. 2027-01-01:2027-12-31 "
                        "(default: one date, --start)")
    old_name(g, "--days", new="--dates N", dest="days", type=positive, metavar="N")
    g.add_argument("--start", help="first date of --dates N (default: today, UTC)")
    g.add_argument("--variation-seed", type=int, default=0,
                   help="seed of the per-date demand variation (default: %(default)s)")
    g.add_argument("--variation-sigma", type=number(0.0), default=0.10,
                   help="per-product lognormal sigma of the daily variation (default: %(default)s)")
    g.add_argument("--seasonal", type=number(0.0, maximum=1.0, below=True), default=0.15,
                   help="seasonal amplitude, in [0, 1) (default: %(default)s)")
    c = p.add_argument_group("cluster")
    c.add_argument("--scheduler", help="address of an existing Dask scheduler (OUT must be visible to its "
                                       "workers; default: an embedded cluster)")
    c.add_argument("--workers", type=positive, help="worker processes of the embedded cluster (default: one per core)")
    c.add_argument("--retries", type=count, default=2, help="retries of a task that raised (default: %(default)s)")
    c.add_argument("--dashboard", type=port, metavar="PORT",
                   help="serve the Dask dashboard of the embedded cluster on 127.0.0.1:PORT (0: any free "
                        "port; default: no dashboard)")
    p.add_argument("--warm-start", dest="warm_start_from", metavar="DIR",
                   help="an earlier run's OUT folder: each task starts from the bid prices of the same key "
                        "there, as solve --warm-start does from one result (default: cold starts)")
    old_name(p, "--warm-start-from", new="--warm-start", dest="warm_start_from", metavar="DIR")
    p.add_argument("--window", type=duration,
                   help="optimization window with its unit, e.g. 2h, 90m, 5400s (for the progress "
                        "bar and summary; default: none)")
    p.add_argument("--no-progress", action="store_true", help=_progress.HELP)
    p.set_defaults(func=run)


def run(args) -> int:
    import logging

    # distributed logs every worker start and stop at INFO; keep the terminal for the progress bar
    # (imported first: importing it sets its loggers' levels from its config)
    import distributed  # noqa: F401

    for name in ("distributed", "distributed.nanny", "distributed.scheduler", "distributed.core",
                 "distributed.http.proxy", "distributed.diskutils", "distributed.worker"):
        logging.getLogger(name).setLevel(logging.INFO if getattr(args, "verbose", False) else logging.ERROR)
    from ..options import SolverOptions
    from ..production.batch import DateVariation, build_batch
    from ..production.durations import format_duration
    from ..production.fallback import Fallback, parse as parse_fallback
    from ..production.lock import RunLockedError
    from ..production.runner import OutputFolderError, RunConfig, run_batch
    from ..production.signals import terminate_as_interrupt

    from ..paths import output_folder
    from ._options import check_method, existing_folder, method_or_default

    window = args.window
    output_folder(args.out, "--out")               # before anything starts: exit 2, the path named
    method = method_or_default(args.method, args.model)
    check_method(method, args.model)
    fallback = parse_fallback(args.fallback)
    if isinstance(fallback, Fallback):
        check_method(fallback.method, args.model, "--fallback")
    if args.scheduler is not None:
        _check_scheduler(args.scheduler)
    if args.warm_start_from is not None:
        existing_folder(args.warm_start_from, "--warm-start")
    dates = run_dates(args)
    variation = DateVariation(seed=args.variation_seed, sigma=args.variation_sigma, seasonal=args.seasonal)
    batch = build_batch(args.batch, dates, variation, demand=args.demand)
    options = SolverOptions(tol=args.tol, time_limit=args.time_limit, iteration_limit=args.iteration_limit,
                            threads=1)
    cfg = RunConfig(model=args.model, method=method, options=options, out=args.out,
                    warm_start_from=args.warm_start_from, fallback=args.fallback)
    bar = {}
    show_bar = _progress.wanted(args)

    def on_event(kind, rec, prog):
        if not show_bar:
            if kind == "failed":
                print(f"task {rec['key']} failed: {rec.get('error')}", file=sys.stderr)
            return
        from tqdm import tqdm

        if kind == "start":
            bar["b"] = tqdm(total=prog.todo, unit="task", desc="decomp run", file=sys.stderr,
                            dynamic_ncols=True)
            return
        b = bar["b"]
        if kind == "failed":
            b.write(f"task {rec['key']} failed: {rec.get('error')}")
        proj = prog.projected_seconds()
        post = {"failed": prog.failed, "finish": format_duration(proj)}
        if window:
            post["window"] = format_duration(window)
            post["fits"] = "yes" if proj is not None and proj <= window else "NO"
        b.set_postfix(post, refresh=False)
        b.update(1)

    print(f"decomp run: {batch.description}; {args.model} by {method}, tol {args.tol:g}; out {cfg.out}")
    try:
        with terminate_as_interrupt():
            s = run_batch(batch, cfg, scheduler=args.scheduler, workers=args.workers, retries=args.retries,
                          window=window, on_event=on_event, dashboard=args.dashboard)
    except (RunLockedError, OutputFolderError) as exc:
        print(f"decomp run: error: {exc}", file=sys.stderr)
        return 1
    except (OSError, TimeoutError) as exc:
        where = f"the scheduler at {args.scheduler}" if args.scheduler else "the embedded cluster"
        print(f"decomp run: error: could not use {where}: {type(exc).__name__}: {exc}", file=sys.stderr)
        return 1
    finally:
        if "b" in bar:
            bar["b"].close()
    t = s["totals"]
    print(f"{t['n_tasks']} tasks: {t['ok']} ok, {t['not_optimal']} not optimal, {t['failed']} failed, "
          f"{t['skipped']} skipped (finished earlier); wall {format_duration(t['wall_seconds'])}"
          + (f" of window {format_duration(window)}: {'fits' if t['fits_window'] else 'DOES NOT FIT'}"
             if window else ""))
    if t.get("fallback_used"):
        print(f"fallback ({args.fallback}) published the bid prices of {t['fallback_used']} task(s)")
    if s.get("signal_after_last_task"):
        print(f"decomp run: {s['signal_after_last_task']} arrived after the last task had finished; the run "
              f"is complete and its summary written", file=sys.stderr)
    if s.get("stopped"):
        print(f"decomp run: STOPPED: {s['stopped']}; {t['ok']} finished task(s) kept; rerun with the same "
              f"arguments once the folder can be written", file=sys.stderr)
    for task in s["tasks"]:
        if task["task_status"] in ("failed", "not_optimal") and not (s.get("stopped")
                                                                     and task.get("error") == s["stopped"]):
            print(f"  {task['key']}: {task['task_status']}: {task.get('error')}")
    if s.get("summary_error"):
        from ..production.summary import to_markdown

        print(f"decomp run: summary {s['summary_error']}; the summary follows here instead", file=sys.stderr)
        print(to_markdown(s))
        return 1
    print(f"summary: {cfg.out}/summary.md, {cfg.out}/summary.json")
    return 0 if t["ok"] == t["n_tasks"] else 1


def _check_scheduler(address: str) -> None:
    """An external scheduler's address: not empty; without TLS, a warning (anyone who can reach a
    plain tcp:// scheduler can run code on its workers; see the README, Reliability)."""
    from ..errors import ConfigError

    if not address.strip():
        raise ConfigError("--scheduler is empty: give the address of a running Dask scheduler, "
                          "or leave --scheduler out for the embedded cluster")
    if not address.startswith("tls://"):
        print(f"decomp: warning: --scheduler {address}: not a tls:// address; whoever can reach it can run "
              f"code on its workers. Use TLS with credentials (README, Reliability)", file=sys.stderr)
        return
    from distributed.security import Security

    sec = Security()                               # what Dask's configuration gives the client
    if not (sec.tls_ca_file and sec.tls_client_cert and sec.tls_client_key):
        raise ConfigError(f"--scheduler {address}: a TLS scheduler needs the client's credentials in Dask's "
                          f"configuration (distributed.comm.tls.ca-file, .client.cert, .client.key; e.g. "
                          f"DASK_DISTRIBUTED__COMM__TLS__CA_FILE); see the README, Reliability")


def run_dates(args) -> list:
    """The departure dates of ``--dates N|FIRST:LAST`` (N from ``--start``), or of the old ``--days N``."""
    from ..errors import ConfigError
    from ..production.batch import date_range

    days = getattr(args, "days", None)
    if args.dates is not None and days is not None:
        raise ConfigError("give --dates only (--days is its old name), not both")
    text = args.dates
    if text is not None and ":" not in str(text):
        try:
            days, text = int(str(text).strip()), None
        except ValueError:
            raise ConfigError(f"--dates {args.dates!r}: expected N or FIRST:LAST ISO dates, e.g. 365 or "
                              f"2027-01-01:2027-12-31") from None
        if days < 1:
            raise ConfigError(f"--dates must be at least 1, got {days}")
    return date_range(text, days, args.start)
