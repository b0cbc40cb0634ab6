"""The benchmark cases: time of one solve (or one Pyomo model build) per case.

Only the call inside ``benchmark.pedantic`` is timed. The instance, its
incidence matrices, the reference solve and a warm-up call come before it,
untimed. Accuracy is computed from the result the timed call returned and
asserted after timing (pytest-benchmark's --benchmark-compare-fail covers
timings only); it is stored in ``extra_info`` first, so a failed check is in
the JSON too.
"""

from __future__ import annotations

import pytest

import decomp
from decomp.benchsuite import builders
from decomp.benchsuite.cases import REFERENCE_MODEL, thresholds
from decomp.benchsuite.measure import PeakMemory, accuracy, check, history_records
from decomp.options import SolverOptions


def _timed(benchmark, fn, args, kwargs, rounds, mem: PeakMemory):
    started = []

    def setup():
        # Untimed, before each round: close the previous round's memory
        # window and open this one.
        if started:
            mem.stop()
        started.append(True)
        mem.start()

    out = benchmark.pedantic(fn, args=args, kwargs=kwargs, setup=setup, rounds=rounds,
                             iterations=1, warmup_rounds=0)
    mem.stop()
    return out


@pytest.mark.bench_solve
def test_solve(solve_case, benchmark, instances, references, warm_up, revenue):
    case = solve_case
    inst = instances.get(case.data)
    ref = references.get(case.data, REFERENCE_MODEL[case.model])
    options = SolverOptions(**case.options)
    warm_up(case.model, case.method, options)
    mem = PeakMemory()
    result = _timed(benchmark, decomp.solve, (inst,),
                    {"model": case.model, "method": case.method, "options": options},
                    case.rounds, mem)

    acc = accuracy(inst, result, ref)
    limits = thresholds(case)
    failures = check(acc, limits)
    # Untimed, after the timed call: price the bid prices on the rung's sample paths.
    rev = revenue.price(case.data, REFERENCE_MODEL[case.model], result.bid_price_array)
    benchmark.extra_info.update({
        "case": case.id, "kind": case.kind, "rung": case.rung, "demand": case.demand, "model": case.model,
        "method": case.method, "label": case.label, "knobs": case.options,
        "n_products": inst.n_products, "n_legs": inst.n_legs, "rounds": case.rounds,
        **acc,
        "peak_memory_mib": mem.peak_mib, "peak_rss_mib": mem.peak_rss_mib, "memory_method": mem.method,
        "reference": None if ref is None else ref.summary(),
        "history": history_records(result) if case.method == "lagrangian" else [],
        "thresholds": limits, "accuracy_failures": failures,
        **rev,
    })
    assert not failures, f"{case.id}: " + "; ".join(failures)


@pytest.mark.bench_build
def test_build(build_case, benchmark, instances):
    case = build_case
    inst = instances.get(case.data)
    build = builders.resolve(case.model)
    options = SolverOptions(**case.options)
    build(bcases_tiny(), options)   # warm-up: imports, untimed
    mem = PeakMemory()
    model = _timed(benchmark, build, (inst, options), {}, case.rounds, mem)
    size = builders.size(model)
    benchmark.extra_info.update({
        "case": case.id, "kind": case.kind, "rung": case.rung, "demand": case.demand, "model": case.model,
        "method": case.method, "label": case.label, "knobs": case.options,
        "n_products": inst.n_products, "n_legs": inst.n_legs, "rounds": case.rounds,
        "peak_memory_mib": mem.peak_mib, "peak_rss_mib": mem.peak_rss_mib, "memory_method": mem.method,
        "builder": builders.describe(case.model), **size,
        "accuracy_failures": [],
    })
    # A build that made no variables is not a model of the instance.
    assert size["n_variables"] is not None and size["n_variables"] >= inst.n_products


def bcases_tiny():
    from decomp.benchsuite.cases import load_instance

    return load_instance("tiny")[0]


@pytest.mark.bench_tables
def test_tables(tables_case, benchmark, instances, references):
    """Time of the decomposition by leg from the reference's bid prices (demand spread over periods untimed)."""
    import numpy as np

    from decomp.dynamic import decompose, from_arrival_curves

    case = tables_case
    inst = instances.get(case.data)
    ref = references.get(case.data, case.model)
    periods = int(case.options.get("periods", 200))
    demand = from_arrival_curves(inst, periods)
    decompose(*bcases_tiny_with_demand(periods))          # warm-up (imports), untimed
    mem = PeakMemory()
    tables = _timed(benchmark, decompose, (inst, demand, ref.bid_prices), {}, case.rounds, mem)
    cap = tables.capacity
    per_leg = np.diff(inst.A.indptr)
    benchmark.extra_info.update({
        "case": case.id, "kind": case.kind, "rung": case.rung, "demand": case.demand, "model": case.model,
        "method": case.method, "label": case.label, "knobs": case.options,
        "n_products": inst.n_products, "n_legs": inst.n_legs, "rounds": case.rounds,
        "periods": periods, "leg_steps": tables.info.get("steps"), "threads": tables.info.get("threads"),
        # the work of a direct evaluation: legs x periods x seats x products per leg
        "work_legs_periods_seats_products": int((cap * periods * per_leg).sum()),
        "decomposition_value": tables.value,
        "dlp_bound": None if ref is None else ref.objective,
        "peak_memory_mib": mem.peak_mib, "peak_rss_mib": mem.peak_rss_mib, "memory_method": mem.method,
        "accuracy_failures": [],
    })
    # Every table is a table of non-negative seat values, falling as seats grow (single-leg fact).
    for i in range(tables.n_legs):
        b = tables.leg(i)[:, 1:]
        assert np.all(b >= 0) and np.all(np.diff(b, axis=1) <= 1e-9 * (1 + b[:, 1:]))


def bcases_tiny_with_demand(periods):
    import numpy as np

    from decomp.dynamic import from_arrival_curves

    inst = bcases_tiny()
    return inst, from_arrival_curves(inst, periods), np.zeros(inst.n_legs)
