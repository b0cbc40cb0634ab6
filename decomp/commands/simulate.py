"""``decomp simulate``: what a model, a method and a tolerance earn in the booking process.

Every policy runs on the same sample paths (common random numbers); each path
also gets its perfect-hindsight bound (the DLP on its realized demand) and
first-come-first-served is added as a baseline. Policies (comma-separated):
``MODEL[:METHOD[:TOL]]`` bid-price control (e.g. ``pnlp:lagrangian:1e-9``,
``dlp:highs``; a product whose fare equals its bid-price sum is sold up to the
model's allocation), ``plain:MODEL[:METHOD[:TOL]]`` (every request whose fare is
at least the sum), ``partitioned:MODEL[:METHOD[:TOL]]`` booking limits from the
model's allocation, ``fcfs``, and on single-leg instances ``emsrb`` or
``nested:Y1[/Y2...]`` nested protection levels, ``dynamic:MODEL[:METHOD[:TOL]]``
capacity- and time-dependent bid-price tables (one dynamic program per leg
over ``--periods`` periods, from the static model's bid prices; computed once)
and ``relaxed:MODEL[:METHOD[:TOL]]`` (tables of the Lagrangian relaxation of the
network program; needs at most one request per period). With a table policy the
report also gives each policy's revenue as a share of the network bound (the
DLP value). ``--reoptimize-every``,
``--forecast-bias`` and ``--sigma-factor`` take comma-separated lists; every
combination is a scenario, and lists give the plots. Writes
OUT/simulation.json, OUT/simulation.md and PNG plots.

A re-optimization whose method ends non-optimal (iteration or time limit,
numerical trouble) is solved again by ``--fallback`` (default ``auto``, as in
``decomp run``: ``highs`` for the DLP and PWL, ``ipopt`` for a normal-demand
PNLP, ``lagrangian:lbfgsb`` otherwise; ``none`` turns it off). Each policy
counts its re-optimizations, those that ended non-optimal, those the fallback
rescued and those that still priced with a non-optimal answer
(``reoptimizations`` in simulation.json); the last are a WARNING in the report
and on stderr.

On a network with markets (customers choosing by logit; see decomp.choice) customers
arrive by market and choose among what is open, the same customers for every policy;
the policies are ``sblp[:METHOD]`` (bid prices of the sales-based LP, each customer
offered the available set that maximizes expected fare net of displacement),
``dlp[:METHOD]`` and ``pnlp[:METHOD]`` (bid prices from an independent-demand forecast
made from sales with everything open) and ``fcfs``; the report gives each policy's
revenue, its paired difference against the first policy and its share of the sales-based
LP's value, an upper bound on any policy's expected revenue. ``--reestimate N`` adds N
cycles of re-estimating each independent-demand forecast from its own sales (spiral-down).
Options of the independent-demand simulation only (forecast errors, periods, target
half-width, the cluster) are refused there.
"""

from __future__ import annotations

import re
import sys

from . import _progress
from ._options import count, number, positive, positive_number


#: Default policies of a network without markets, and of one with markets (customer choice).
INDEPENDENT_POLICIES = "pnlp:lagrangian:1e-9,dlp:highs,fcfs"
CHOICE_POLICIES = "sblp:lagrangian,dlp:highs,pnlp:lagrangian,fcfs"


def _floats(text: str, what: str, low: float, above: bool = False) -> list:
    """Comma-separated finite numbers, each >= low (> low with ``above``); errors name ``what``."""
    import math

    from ..simulation.errors import SimulationConfigError

    try:
        vals = [float(v) for v in str(text).split(",") if v.strip()]
    except ValueError as exc:
        raise SimulationConfigError(f"{what}: expected comma-separated numbers, got {text!r}") from exc
    if not vals:
        raise SimulationConfigError(f"{what}: no value given")
    for v in vals:
        if not math.isfinite(v) or (v <= low if above else v < low):
            raise SimulationConfigError(f"{what}: every value must be a finite number {'>' if above else '>='} "
                                        f"{low:g}, got {v:g}")
    return vals


def register(sub):
    p = sub.add_parser("simulate", help="booking simulation of bid-price and other controls (Dask)",
                       description=__doc__)
    # argparse takes "-0.2,0,0.2" for an option (only "-0.2" looks like a number to it); a list of
    # numbers starting with a negative one is a value here (no option of this command looks like one)
    p._negative_number_matcher = re.compile(r"^-(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?(,[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?)*$")
    p.add_argument("instance", help="instance folder, or a ladder rung name (p1k, p10k, ...)")
    p.add_argument("--policies", default=None,
                   help=f"comma-separated policy specifications (default: {INDEPENDENT_POLICIES}; on networks with "
                        f"markets {CHOICE_POLICIES})")
    p.add_argument("--reestimate", type=count, default=0, metavar="CYCLES",
                   help="networks with markets: re-estimate each independent-demand forecast from its own sales "
                        "for CYCLES seasons (spiral-down; default: 0, off)")
    p.add_argument("--paths", type=positive, default=200,
                   help="sample paths (the maximum with --target-halfwidth; default: %(default)s)")
    p.add_argument("--target-halfwidth", type=positive_number, default=None,
                   help="add paths until every paired 95%% half-width (vs the first policy) is at most this "
                        "(default: off, run --paths)")
    p.add_argument("--reoptimize-every", default="7", help="days between re-optimizations, list allowed (default: 7)")
    p.add_argument("--horizon", type=positive_number, default=60.0, help="booking horizon in days (default: %(default)g)")
    p.add_argument("--forecast-bias", default="0",
                   help="optimizer sees mean x (1 + B); list allowed, e.g. -0.2,0,0.2 (default: %(default)s)")
    p.add_argument("--sigma-factor", default="1", help="optimizer sees std x S; list allowed (default: %(default)s)")
    p.add_argument("--bias-spread", type=number(0.0), default=0.0,
                   help="per-product random bias B + spread x N(0,1), seeded (default: 0, aggregate)")
    p.add_argument("--periods", type=positive, default=200,
                   help="booking periods of the table policies (dynamic:, relaxed:) (default: %(default)s)")
    p.add_argument("--fallback", default="auto", metavar="METHOD",
                   help="method that solves again a re-optimization the policy's method leaves non-optimal: "
                        "auto, none, a method name, or lagrangian:DUAL (newton, lbfgsb, subgradient); "
                        "as in decomp run (default: %(default)s)")
    p.add_argument("--seed", type=count, default=0, help="seed of the sample paths (default: %(default)s)")
    p.add_argument("--chunk", type=positive, default=50, help="paths per task (default: %(default)s)")
    c = p.add_argument_group("cluster")
    c.add_argument("--scheduler", help="address of an existing Dask scheduler (default: an embedded cluster)")
    c.add_argument("--workers", type=count, default=None,
                   help="worker processes of the embedded cluster (default: one per core; 0: in this process)")
    p.add_argument("--out", required=True, help="output folder (required)")
    p.add_argument("--no-progress", action="store_true", help=_progress.HELP)
    p.set_defaults(func=run)


def run(args) -> int:
    from ..paths import refusing
    from ..simulation import report, simulate
    from ..simulation.cluster import open_client
    from ..simulation.errors import SimulationConfigError
    from ._options import load_instance

    every, errors, fb = _checked_options(args)
    instance = load_instance(args.instance)
    if instance.markets is not None:
        return _choice(args, instance, every, errors, fb)
    if args.reestimate:
        raise SimulationConfigError("--reestimate needs a network with markets (customer choice)")
    cfg = _checked_config(args, instance, every, errors, fb)
    if args.workers == 0 and args.scheduler is None:
        print("decomp simulate: --workers 0: the paths run in this process (no Dask cluster)", file=sys.stderr)
    else:
        _progress.quiet_dask_logs(getattr(args, "verbose", False))
    on_progress, close_bar = _path_progress(_progress.wanted(args))
    try:
        with open_client(args.workers, args.scheduler) as client:
            result = simulate(instance, cfg, client=client, on_progress=on_progress)
    finally:
        close_bar()
    summary = result.summary()
    with refusing(args.out):
        files = report.write(summary, args.out)
    print("\n".join(report.header_lines(summary)))
    print()
    print(report.text_table(summary))
    print()
    for f in files:
        print(f"wrote {f}")
    for line in report.reoptimization_lines(summary):
        if line.startswith("WARNING"):
            print(f"decomp simulate: {line}", file=sys.stderr)
    return 0


def _checked_options(args) -> tuple:
    """(reoptimize-every days, forecast errors, fallback) from the arguments, checked before
    anything is loaded or simulated (exit 2, the option named)."""
    from ..errors import UnknownMethodError
    from ..paths import output_folder
    from ..production import fallback
    from ..simulation import ForecastError
    from ._options import check_method

    output_folder(args.out, "--out")
    every = _floats(args.reoptimize_every, "--reoptimize-every", 0.0, above=True)
    biases = _floats(args.forecast_bias, "--forecast-bias", -1.0, above=True)
    sigmas = _floats(args.sigma_factor, "--sigma-factor", 0.0)
    errors = [ForecastError(bias=b, sigma_factor=s, spread=args.bias_spread) for b in biases for s in sigmas]
    fb = fallback.parse(args.fallback)
    if isinstance(fb, fallback.Fallback):
        for model in ("dlp", "pnlp"):              # a fallback serves the policies' models
            try:
                check_method(fb.method, model, "--fallback")
                break
            except UnknownMethodError:
                if model == "pnlp":
                    raise
    return every, errors, fb


def _checked_config(args, instance, every, errors, fb):
    """The SimulationConfig of a network without markets, its policies checked against the
    instance (exit 2, the option named)."""
    from ..errors import UnknownMethodError
    from ..simulation import SimulationConfig, parse_policies
    from ..simulation.errors import SimulationConfigError
    from ._options import check_scheduler

    text = args.policies if args.policies is not None else INDEPENDENT_POLICIES
    try:
        policies = parse_policies(text, periods=args.periods, fallback=fb)
    except (SimulationConfigError, UnknownMethodError) as exc:
        raise SimulationConfigError(f"--policies {text!r}: {exc}") from None
    cfg = SimulationConfig(policies=policies, paths=args.paths, horizon=args.horizon, reoptimize_every=every,
                           forecast_errors=errors, seed=args.seed, target_halfwidth=args.target_halfwidth,
                           chunk=args.chunk)
    try:
        cfg.check(instance)
    except (SimulationConfigError, UnknownMethodError) as exc:
        raise SimulationConfigError(f"--policies {text!r}: {exc}") from None
    if args.scheduler is not None:
        check_scheduler(args.scheduler)
    return cfg


def _path_progress(show_bar: bool) -> tuple:
    """(on_progress for simulate, close): a bar of paths done, its total as planned so far."""
    bar = {}

    def on_progress(done, planned):
        if not show_bar:
            return
        from tqdm import tqdm

        if "b" not in bar:
            bar["b"] = tqdm(total=planned, unit="path", desc="decomp simulate", file=sys.stderr, dynamic_ncols=True)
        b = bar["b"]
        if b.total != planned:
            b.total = planned
        b.n = done
        b.refresh()

    def close():
        if "b" in bar:
            bar["b"].close()

    return on_progress, close


def _choice(args, instance, every, errors, fb) -> int:
    """The simulation with customer choice (decomp.choice.simulation) and, with --reestimate, the spiral loop."""
    from ..choice import report, simulation, spiral
    from ..errors import UnknownMethodError
    from ..paths import refusing
    from ..registry import get_method
    from ..simulation.errors import SimulationConfigError

    unused = [flag for flag, given in (
        ("--forecast-bias/--sigma-factor/--bias-spread", any(not e.exact for e in errors)),
        ("--target-halfwidth", args.target_halfwidth is not None),
        ("--scheduler/--workers", args.scheduler is not None or args.workers not in (None, 0)),
        ("--periods", args.periods != 200),
        ("a list of --reoptimize-every", len(every) > 1)) if given]
    if unused:
        raise SimulationConfigError(f"{', '.join(unused)}: not used on a network with markets (customer choice); "
                                    "leave them out")
    if args.paths < 2:
        raise SimulationConfigError(f"--paths {args.paths}: the choice simulation needs at least 2 paths (for its "
                                    "paired intervals)")
    text = args.policies if args.policies is not None else CHOICE_POLICIES
    try:
        policies = simulation.parse_policies(text, fb)
        for pol in policies:
            if pol.model is not None:                 # priced by a solve: the method must solve its model
                get_method(pol.method, pol.model)
    except (SimulationConfigError, UnknownMethodError) as exc:
        raise SimulationConfigError(f"--policies {text!r}: {exc}") from None
    every_days = every[0] if every[0] < args.horizon else None
    cfg = simulation.ChoiceSimConfig(policies=policies, paths=args.paths, seed=args.seed, horizon=args.horizon,
                                     reoptimize_every=every_days, chunk=args.chunk, fallback=fb)
    result = simulation.simulate(instance, cfg)
    summary = result.summary()
    spirals = {}
    for pol in cfg.policies:
        if args.reestimate and isinstance(pol, simulation.IndependentBidPrices):
            cycles = spiral.run(instance, pol, args.reestimate, args.paths, seed=args.seed,
                                reoptimize_every=every_days, horizon=args.horizon, bound=result.bound)
            spirals[pol.label] = [c.to_dict() for c in cycles]
    with refusing(args.out):
        files = report.write(args.out, summary, spirals)
    print(report.text(summary, spirals))
    for f in files:
        print(f"wrote {f}")
    return 0
