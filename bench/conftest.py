"""pytest configuration of the benchmark suite: the --suite option, the case list, shared fixtures.

Cases come from :func:`decomp.benchsuite.cases.suite_cases` for the methods
that are registered and available, so nothing is skipped. Instances and the
reference solves are held by session fixtures (one rung's instance in memory
at a time); nothing is cached at module level.
"""

from __future__ import annotations

import os
import time

import pytest

from decomp.benchsuite import builders
from decomp.benchsuite import cases as bcases
from decomp.benchsuite.measure import Reference, versions

_CASES_KEY = pytest.StashKey[dict]()
_STATE_KEY = pytest.StashKey[dict]()


def pytest_addoption(parser):
    group = parser.getgroup("decomp-bench")
    group.addoption("--suite", action="store", default="quick", choices=bcases.SUITES,
                    help="benchmark suite: micro (tests), quick (<= 5 min), full (to 1,000,000 products)")
    group.addoption("--revenue-paths", action="store", type=int, default=0, metavar="N",
                    help="price each solve case's bid prices on N booking sample paths after timing, "
                         "against the reference's on the same paths (default 0: off)")


def pytest_configure(config):
    config.addinivalue_line("markers", "bench_solve: a timed decomp.solve case")
    config.addinivalue_line("markers", "bench_build: a timed Pyomo model build case")
    config.addinivalue_line("markers", "bench_tables: a timed decomposition of the network program by leg")
    config.stash[_STATE_KEY] = {"started": time.time(), "load_start": _loadavg(), "rung_sources": {},
                                "references": {}, "revenue_references": {}}
    if config.getoption("--revenue-paths") < 0:
        raise pytest.UsageError("--revenue-paths must be 0 (off) or a positive number of sample paths")


def _loadavg():
    try:
        return list(os.getloadavg())
    except OSError:
        return None


def _suite_cases(config) -> dict:
    if _CASES_KEY not in config.stash:
        suite = config.getoption("--suite")
        pairs, status = bcases.availability()
        avail = lambda m: status.get(m, (False, ""))[0]  # noqa: E731
        all_cases = bcases.suite_cases(suite, pairs, avail)
        excluded = bcases.excluded(suite, pairs, status)
        build_ok = {}
        for c in all_cases:
            if c.kind == "build" and c.model not in build_ok:
                build_ok[c.model] = builders.available(c.model)
                if not build_ok[c.model][0]:
                    excluded.append({"model": c.model, "method": "pyomo-build", "reason": build_ok[c.model][1]})
        config.stash[_CASES_KEY] = {
            "suite": suite,
            "solve": [c for c in all_cases if c.kind == "solve"],
            "build": [c for c in all_cases if c.kind == "build" and build_ok[c.model][0]],
            "tables": [c for c in all_cases if c.kind == "tables"],
            "excluded": excluded,
        }
    return config.stash[_CASES_KEY]


def pytest_generate_tests(metafunc):
    for kind in ("solve", "build", "tables"):
        name = f"{kind}_case"
        if name in metafunc.fixturenames:
            cs = _suite_cases(metafunc.config)[kind]
            if cs:
                metafunc.parametrize(name, cs, ids=[c.id for c in cs])


def pytest_collection_modifyitems(session, config, items):
    # A test function with no cases (its methods unavailable) is deselected,
    # not skipped; the rest run rung by rung, builds first within a rung.
    keep, drop = [], []
    for item in items:
        cs = getattr(item, "callspec", None)
        case = None if cs is None else (cs.params.get("solve_case") or cs.params.get("build_case")
                                        or cs.params.get("tables_case"))
        (keep if case is not None else drop).append(item)
    if drop:
        config.hook.pytest_deselected(items=drop)
    order = {r: i for i, r in enumerate(bcases.RUNG_ORDER)}
    demand = {d: i for i, d in enumerate(("normal",) + bcases.DEMANDS)}

    def key(item):
        p = item.callspec.params
        c = p.get("solve_case") or p.get("build_case") or p.get("tables_case")
        return (order[c.rung], demand[c.demand], c.kind != "build")

    keep.sort(key=key)
    items[:] = keep


class InstanceStore:
    """Instances by rung, loaded on first use; holds one rung at a time."""

    def __init__(self, sources: dict):
        self._rung = None
        self._inst = None
        self._sources = sources

    def get(self, rung: str):
        if rung != self._rung:
            self._inst = None
            inst, source = bcases.load_instance(rung)
            # Build the incidence matrices now so no case times their construction.
            inst.A, inst.AT  # noqa: B018
            self._rung, self._inst = rung, inst
            self._sources[rung] = {"source": source, "n_products": inst.n_products, "n_legs": inst.n_legs}
        return self._inst


class ReferenceStore:
    """Tight reference solves by (rung, model), computed once per session."""

    def __init__(self, instances: InstanceStore, summaries: dict):
        self._instances = instances
        self._refs = {}
        self._summaries = summaries

    def get(self, rung: str, model: str) -> Reference | None:
        key = (rung, model)
        if key not in self._refs:
            self._refs[key] = self._solve(rung, model)
            if self._refs[key] is not None:
                self._summaries[f"{rung}/{model}"] = self._refs[key].summary()
        return self._refs[key]

    def _solve(self, rung, model):
        import decomp
        from decomp.options import SolverOptions

        pairs, status = bcases.availability()
        for method, opts in bcases.REFERENCES[model]:
            if (model, method) in pairs and status[method][0]:
                inst = self._instances.get(rung)
                t0 = time.perf_counter()
                res = decomp.solve(inst, model=model, method=method, options=SolverOptions(**opts))
                return Reference(model=model, method=method, options=dict(opts),
                                 objective=None if res.objective is None else float(res.objective),
                                 bid_prices=None if res.bid_price_array is None else res.bid_price_array.copy(),
                                 gap=res.gap, status=res.termination.value,
                                 seconds=time.perf_counter() - t0)
        return None


class RevenueStore:
    """Revenue of the reference bid prices by (rung, model), priced once per session.

    Every case of a rung is priced on the same seeded sample paths as its
    reference (common random numbers); ``paths == 0`` turns pricing off.
    """

    def __init__(self, paths: int, instances: InstanceStore, references: ReferenceStore, summaries: dict):
        self.paths = int(paths)
        self._instances = instances
        self._references = references
        self._summaries = summaries
        self._refs = {}

    def reference(self, rung: str, model: str):
        from decomp.benchsuite.measure import price_bid_prices, public_revenue, revenue_seed

        key = (rung, model)
        if key not in self._refs:
            ref = self._references.get(rung, model)
            rev = None
            if ref is not None:
                rev = price_bid_prices(self._instances.get(rung), ref.bid_prices, self.paths, revenue_seed(rung))
            self._refs[key] = rev
            self._summaries[f"{rung}/{model}"] = public_revenue(rev)
        return self._refs[key]

    def price(self, rung: str, model: str, bid_prices) -> dict:
        """The revenue fields of a case's bid prices (empty when pricing is off)."""
        from decomp.benchsuite.measure import price_bid_prices, revenue_fields, revenue_seed

        if self.paths <= 0:
            return {}
        ref = self.reference(rung, model)
        rev = price_bid_prices(self._instances.get(rung), bid_prices, self.paths, revenue_seed(rung))
        return revenue_fields(rev, ref)


@pytest.fixture(scope="session")
def revenue(request, instances, references) -> RevenueStore:
    state = request.config.stash[_STATE_KEY]
    return RevenueStore(request.config.getoption("--revenue-paths"), instances, references,
                        state["revenue_references"])


@pytest.fixture(scope="session")
def instances(request) -> InstanceStore:
    return InstanceStore(request.config.stash[_STATE_KEY]["rung_sources"])


@pytest.fixture(scope="session")
def references(request, instances) -> ReferenceStore:
    return ReferenceStore(instances, request.config.stash[_STATE_KEY]["references"])


@pytest.fixture(scope="session")
def warm_up():
    """Run each (model, method) once, untimed, on the tiny rung before its first timed case.

    First calls pay one-off costs (imports, loading the solver library) that
    are not what a case measures.
    """
    import decomp

    done = set()
    tiny = {}

    def run(model, method, options):
        if (model, method) in done:
            return
        if "inst" not in tiny:
            tiny["inst"], _ = bcases.load_instance("tiny")
        if model == "sblp" and "choice" not in tiny:     # customer choice: a small network with markets
            from decomp.choice.generate import generate_choice

            tiny["choice"] = generate_choice(200, seed=bcases.CHOICE_SEED)
        decomp.solve(tiny["choice" if model == "sblp" else "inst"], model=model, method=method, options=options)
        done.add((model, method))

    return run


def pytest_benchmark_update_machine_info(config, machine_info):
    import psutil

    machine_info["decomp"] = {
        "logical_cpus": os.cpu_count(),
        "physical_cores": psutil.cpu_count(logical=False),
        "memory_total_gib": round(psutil.virtual_memory().total / 2**30, 2),
        "load_average_at_start": config.stash[_STATE_KEY]["load_start"],
        "versions": versions(),
    }


def pytest_benchmark_update_json(config, benchmarks, output_json):
    state = config.stash[_STATE_KEY]
    info = _suite_cases(config)
    output_json["decomp"] = {
        "suite": info["suite"],
        "excluded_methods": info["excluded"],
        "rungs": state["rung_sources"],
        "references": state["references"],
        "revenue": {"paths": config.getoption("--revenue-paths"),
                    "references": state["revenue_references"],
                    "note": "fixed bid prices priced by decomp.simulation.run.revenue_for_bid_prices on "
                            "seeded sample paths (seed per rung: the same paths for every case of a rung "
                            "and its reference); revenue_loss_rel = (reference mean - case mean) / "
                            "reference mean, a point estimate; revenue_loss_ci: its paired 95 % t interval "
                            "over the per-path differences"},
        "load_average_at_end": _loadavg(),
        "session_seconds": time.time() - state["started"],
        "memory_note": "peak_memory_mib: growth of the resident set over the solve (a lower bound: "
                       "memory the allocator kept from earlier solves is reused without growth); "
                       "peak_rss_mib: the process's peak resident set during the solve (an upper bound, "
                       "instance included); Linux VmHWM reset via /proc/self/clear_refs before each round",
    }
