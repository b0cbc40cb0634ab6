"""The benchmark cases: which (rung, model, method, knob) each suite runs.

A :class:`Case` is one timed measurement. ``kind="solve"`` times one call of
:func:`decomp.solve` (for the Pyomo methods that call includes building the
model: it is what a user waits for; the phases are kept in ``extra_info``);
``kind="build"`` times the Pyomo model builder alone; ``kind="tables"`` times
the dynamic-programming decomposition by leg (:func:`decomp.dynamic.decompose`,
``method="decomposition"``) from the reference solve's bid prices of ``model``
over ``periods`` booking periods. Instance generation and loading are never timed.

Suites:

* ``micro``: the ``tiny`` rung (40 products), one round, one knob per method;
  for the tests of the suite's machinery.
* ``quick``: rungs to p100k, every available method that fits a 5-minute total
  on 2 cores (Pyomo paths to p10k, PWL to p10k).
* ``full``: rungs to p1m (array methods), Pyomo paths to p100k.

Every suite but ``micro`` also runs the Lagrangian method on the same networks with
other demand models (``demand``: a named mix of :mod:`decomp.demand_mix`: gamma,
low-CV normal, Poisson, negative binomial and a production-like mix of them): at
p10k and p100k in ``quick``, up to p1m in ``full``; a case's ``data`` names its
instance, ``p100k`` or ``p100k-poisson``.

Only methods whose ``available()`` is true and whose (model, method) pair is
registered give cases, so a missing solver shrinks the list instead of
producing skipped cases.
"""

from __future__ import annotations

import dataclasses
import math

SUITES = ("micro", "quick", "full")
#: The demand models the family cases use (named mixes of decomp.demand_mix; "normal" is
#: the ladder's own).
DEMANDS = ("gamma", "lowcv", "poisson", "negbin", "mix")

#: Rung name -> products. The ladder (decomp.ladder) provides all but ``tiny``.
RUNG_SIZES = {"tiny": 40, "p100": 100, "p1k": 1_000, "p10k": 10_000, "p100k": 100_000, "p1m": 1_000_000}
RUNG_ORDER = tuple(RUNG_SIZES)
#: Seed of the generator for rungs the ladder does not provide (every RNG is seeded).
FALLBACK_SEED = 20260101

#: Reference solves (tight) by model: (method, options overrides), first available wins.
REFERENCES = {
    "pnlp": (("lagrangian", {"tol": 1e-12, "dual_method": "newton"}),
             ("ipopt", {"tol": 1e-10}),
             ("pyomo-ipopt", {"tol": 1e-10})),
    "dlp": (("highs", {}), ("pyomo-highs", {})),
    # PWL cases are measured against the exact PNLP: the error is what the
    # approximation costs, which is the trade-off its K buys.
    "pwl": (("lagrangian", {"tol": 1e-12, "dual_method": "newton"}),
            ("ipopt", {"tol": 1e-10})),
}
REFERENCE_MODEL = {"pnlp": "pnlp", "dlp": "dlp", "pwl": "pnlp"}

#: Bid prices below this share of the largest reference bid price are not compared.
BID_PRICE_FLOOR = 1e-3


@dataclasses.dataclass(frozen=True)
class Case:
    """One benchmark case. ``knobs`` are SolverOptions fields (tol, segments, dual_method, limits)."""

    kind: str            # "solve", "build" or "tables"
    rung: str
    model: str
    method: str          # for kind "build": the builder family ("pyomo")
    knobs: tuple = ()    # sorted (name, value) pairs
    rounds: int = 1
    expect_optimal: bool = True
    demand: str = "normal"

    @property
    def options(self) -> dict:
        return dict(self.knobs)

    @property
    def data(self) -> str:
        """The instance: the rung, or the rung with another demand model."""
        return self.rung if self.demand == "normal" else f"{self.rung}-{self.demand}"

    @property
    def n_products(self) -> int:
        return RUNG_SIZES[self.rung]

    @property
    def label(self) -> str:
        """Method label for plots and tables: method plus dual method variant."""
        o = self.options
        if self.kind == "build":
            return f"{self.method}-build"
        if self.method == "lagrangian" and self.model != "sblp":       # sblp: one Lagrangian method, no variants
            return f"lagrangian-{o.get('dual_method', 'newton')}"
        return self.method

    @property
    def knob_label(self) -> str:
        o = self.options
        parts = []
        if self.model == "pwl" and "segments" in o:
            parts.append(f"K{o['segments']}")
        if "tol" in o:
            parts.append(f"tol{o['tol']:.0e}")
        if "periods" in o:
            parts.append(f"T{o['periods']}")
        return "-".join(parts)

    @property
    def id(self) -> str:
        parts = [self.data, self.model, self.label]
        if self.knob_label:
            parts.append(self.knob_label)
        return "-".join(parts)


@dataclasses.dataclass(frozen=True)
class _Spec:
    model: str
    method: str
    knob_sets: tuple          # tuple of dicts
    max_rung: dict            # suite -> last rung (inclusive) or None (not in suite)
    kind: str = "solve"
    expect_optimal: bool = True
    rounds_cap: int | None = None


def _upto(last):
    return RUNG_ORDER[RUNG_ORDER.index("p100"):RUNG_ORDER.index(last) + 1] if last else ()


# The case table. Limits on the first-order dual methods keep them bounded:
# they are expected to stop at a limit on large rungs (reported by status).
_SPECS = (
    _Spec("pnlp", "lagrangian", ({"dual_method": "newton", "tol": 1e-4},
                                 {"dual_method": "newton", "tol": 1e-6},
                                 {"dual_method": "newton", "tol": 1e-9}),
          {"quick": "p100k", "full": "p1m"}),
    _Spec("pnlp", "lagrangian", ({"dual_method": "lbfgsb", "tol": 1e-4, "time_limit": 30.0},
                                 {"dual_method": "lbfgsb", "tol": 1e-6, "time_limit": 30.0}),
          {"quick": "p10k", "full": "p100k"}, expect_optimal=False),
    _Spec("pnlp", "lagrangian", ({"dual_method": "subgradient", "tol": 1e-3, "time_limit": 20.0},),
          {"quick": "p10k", "full": "p100k"}, expect_optimal=False),
    # Ipopt on arrays: the slowest array method at scale, so its tol 1e-6 case stops a rung lower.
    _Spec("pnlp", "ipopt", ({"tol": 1e-6},), {"quick": "p10k", "full": "p100k"}, rounds_cap=2),
    _Spec("pnlp", "ipopt", ({"tol": 1e-9},), {"quick": "p100k", "full": "p1m"}, rounds_cap=2),
    # Pyomo + Ipopt: NL writing and ASL loading dominate its time, so quick stops at p1k.
    _Spec("pnlp", "pyomo-ipopt", ({"tol": 1e-9},), {"quick": "p1k", "full": "p100k"}, rounds_cap=1),
    _Spec("dlp", "highs", ({},), {"quick": "p100k", "full": "p1m"}),
    _Spec("dlp", "pyomo-highs", ({},), {"quick": "p10k", "full": "p100k"}, rounds_cap=1),
    # PWL: K segments per product make K times the columns, so K=64 stops a rung lower.
    _Spec("pwl", "highs", ({"segments": 4}, {"segments": 16}), {"quick": "p10k", "full": "p100k"}, rounds_cap=2),
    _Spec("pwl", "highs", ({"segments": 64},), {"quick": "p1k", "full": "p10k"}, rounds_cap=2),
    _Spec("pwl", "pyomo-highs", ({"segments": 16},), {"quick": "p1k", "full": "p10k"}, rounds_cap=1),
    # The Pyomo model build on its own (method field: the builder family).
    _Spec("pnlp", "pyomo", ({},), {"quick": "p10k", "full": "p100k"}, kind="build", rounds_cap=1),
    _Spec("dlp", "pyomo", ({},), {"quick": "p10k", "full": "p100k"}, kind="build", rounds_cap=1),
    _Spec("pwl", "pyomo", ({"segments": 16},), {"quick": "p1k", "full": "p10k"}, kind="build", rounds_cap=1),
    # Bid-price tables by leg, period and seats left from the DLP's bid prices (200 periods).
    _Spec("dlp", "decomposition", ({"periods": 200},), {"quick": "p10k", "full": "p100k"}, kind="tables",
          rounds_cap=2),
)

#: The demand-family cases: Newton's method at the default tol on every demand model, to
#: p100k (quick) and p1m (full); Ipopt on the low-CV network, the direct method there.
_FAMILY_SPECS = (
    _Spec("pnlp", "lagrangian", ({"dual_method": "newton", "tol": 1e-9},), {"quick": "p100k", "full": "p1m"},
          rounds_cap=1),
)
_FAMILY_FROM = "p10k"
_LOWCV_IPOPT = _Spec("pnlp", "ipopt", ({"tol": 1e-9},), {"quick": "p10k", "full": "p100k"}, rounds_cap=1)

#: Rounds by rung (each round is one solve; the report uses the minimum and the median).
_ROUNDS = {"tiny": 1, "p100": 3, "p1k": 3, "p10k": 2, "p100k": 1, "p1m": 1}

#: The Pyomo method whose builders a build case times, by model.
BUILD_METHOD = {"pnlp": "pyomo-ipopt", "dlp": "pyomo-highs", "pwl": "pyomo-highs"}


def _checked_method(spec) -> str:
    """The registered method a case needs: the builder's, the reference's (tables) or its own."""
    if spec.kind == "build":
        return BUILD_METHOD[spec.model]
    if spec.kind == "tables":
        return REFERENCES[spec.model][0][0]
    return spec.method


def _method_ok(method: str, model: str, registry_pairs, available) -> bool:
    return (model, method) in registry_pairs and available(method)


def suite_cases(suite: str, registry_pairs, available) -> list:
    """The cases of ``suite`` for the registered (model, method) pairs that are available.

    ``registry_pairs``: set of (model, method); ``available(method) -> bool``.
    """
    if suite not in SUITES:
        raise ValueError(f"unknown suite {suite!r}; suites: {', '.join(SUITES)}")
    cases = []
    for spec in _SPECS + _CHOICE_SPECS:
        method_for_check = _checked_method(spec)
        if not _method_ok(method_for_check, spec.model, registry_pairs, available):
            continue
        if suite == "micro":
            if spec.model == "sblp":          # the micro suite's tiny rung has no markets
                continue
            if spec.method == "ipopt" and spec.knob_sets[0].get("tol", 1e-9) > 1e-9:
                continue
            if spec.model == "pwl" and spec.method == "highs" and spec.knob_sets[0]["segments"] > 16:
                continue
            rungs, knob_sets = ("tiny",), spec.knob_sets[-1:]
        else:
            upto = _choice_upto if spec.model == "sblp" else _upto
            rungs, knob_sets = upto(spec.max_rung.get(suite)), spec.knob_sets
        for rung in rungs:
            rounds = _ROUNDS[rung] if spec.rounds_cap is None else min(_ROUNDS[rung], spec.rounds_cap)
            for ks in knob_sets:
                cases.append(Case(kind=spec.kind, rung=rung, model=spec.model, method=spec.method,
                                  knobs=tuple(sorted(ks.items())), rounds=rounds,
                                  expect_optimal=spec.expect_optimal))
    if suite != "micro":
        cases += _family_cases(suite, registry_pairs, available)
    order = {r: i for i, r in enumerate(RUNG_ORDER)}
    demand = {d: i for i, d in enumerate(("normal",) + DEMANDS)}
    # Rung by rung (and demand model) so one instance is in memory at a time; builds first.
    cases.sort(key=lambda c: (order[c.rung], demand[c.demand], c.kind != "build"))
    return cases


def _family_cases(suite, registry_pairs, available) -> list:
    """The cases of the demand models other than the ladder's (see the module docstring)."""
    out = []
    first = RUNG_ORDER.index(_FAMILY_FROM)
    for demand in DEMANDS:
        specs = _FAMILY_SPECS + ((_LOWCV_IPOPT,) if demand == "lowcv" else ())
        for spec in specs:
            if not _method_ok(spec.method, spec.model, registry_pairs, available):
                continue
            for rung in _upto(spec.max_rung.get(suite)):
                if RUNG_ORDER.index(rung) < first:
                    continue
                for ks in spec.knob_sets:
                    out.append(Case(kind="solve", rung=rung, model=spec.model, method=spec.method,
                                    knobs=tuple(sorted(ks.items())), rounds=1, demand=demand))
    return out


def thresholds(case: Case) -> dict:
    """Accuracy limits asserted after timing (None: recorded, not asserted).

    * ``max_violation_rel``: capacity violation relative to max(1, c_i).
    * ``gap``: the certified gap, when the case expects an optimal finish;
      ``gap_if_optimal`` for cases that may stop at a limit: checked only
      when the method claims an optimal finish.
    * ``objective_error``: relative objective error against the reference.
      For PNLP methods it may not exceed the certified gap (weak duality: for
      a feasible allocation, optimum - primal <= dual - primal) plus slack.
    * ``bid_price_error``: largest relative bid-price error where the
      reference bid price is >= 1e-3 of the largest; asserted for the PNLP at
      tight tolerance only (the DLP's duals are not unique; the PWL is an
      approximation, whose error is what the benchmark measures).
    """
    o = case.options
    tol = o.get("tol")
    out = {"max_violation_rel": 1e-6, "gap": None, "objective_error": None, "bid_price_error": None,
           "require_optimal": case.expect_optimal}
    if case.kind != "solve":
        return {}
    if case.model == "pnlp":
        t = tol if tol is not None else 1e-9
        if case.expect_optimal:
            out["gap"] = 10 * t + 1e-10
        else:
            # may stop at a limit (reported by status); when it claims optimal, the claim must hold
            out["gap_if_optimal"] = 10 * t + 1e-10
        out["objective_error"] = "gap"   # <= the case's own certified gap (+ 1e-8)
        # bid prices are unique where every term is smooth (the ladder's normal demand); with
        # piecewise-linear terms (discrete or known demand) the dual optimum is a set
        if case.expect_optimal and t <= 1e-8 and case.demand == "normal":
            out["bid_price_error"] = 1e-5
    elif case.model == "dlp":
        out["gap"] = 1e-6
        out["objective_error"] = 1e-7
    elif case.model == "sblp":
        # the certified gap of the sales LP: the decomposition's own tol (it rates a finish optimal only at a
        # certified gap <= tol: the target is 1e-9 at 1,000,000 products), 1e-7 for the direct methods
        # (an interior point with crossover certifies far below it); bid prices of an LP are not unique
        out["gap"] = (tol if tol is not None else 1e-9) if case.method == "lagrangian" else 1e-7
        out["objective_error"] = 1e-8
    elif case.model == "pwl":
        out["gap"] = 1e-6
        k = int(o.get("segments", 16))
        # The K-segment approximation's own error against the exact PNLP:
        # measured 0.07/K^2 to 0.08/K^2 (K = 4, 16, 64; p100 to p10k), so the
        # error falls as K^-2; 0.5/K^2 leaves a factor of six.
        out["objective_error"] = 0.5 / (k * k)
    return out


def fmt_float(v) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "-"
    return f"{v:.3g}"


def load_instance(data: str):
    """(instance, source) for a case's ``data``: a rung (the ladder's instance, or the seeded
    generator's), or ``rung-demand``, the rung's network with that demand model applied
    (:func:`decomp.demand_mix.apply`, seeded with the rung's seed).

    ``tiny`` (the micro suite's rung) always comes from the generator.
    """
    rung, _, demand = data.partition("-")
    if demand:
        from decomp import demand_mix

        if demand not in DEMANDS:
            raise ValueError(f"unknown demand model {demand!r}; demand models: {', '.join(DEMANDS)}")
        inst, source = load_instance(rung)
        seed = int(inst.meta.get("seed", FALLBACK_SEED))
        return (demand_mix.apply(inst, demand_mix.NAMED[demand], seed),
                f"{source} with decomp.demand_mix.NAMED[{demand!r}] (seed {seed})")
    if rung not in RUNG_SIZES:
        raise ValueError(f"unknown rung {rung!r}; rungs: {', '.join(RUNG_ORDER)}")
    if rung in CHOICE_RUNG_SIZES:                       # customer choice: a network with markets
        from decomp.choice.generate import generate_choice

        n = RUNG_SIZES[rung]
        return generate_choice(n, seed=CHOICE_SEED), f"decomp.choice.generate.generate_choice({n}, seed={CHOICE_SEED})"
    if rung != "tiny":
        try:
            from decomp import ladder
        except ImportError:
            ladder = None
        if ladder is not None and rung in tuple(ladder.RUNGS):
            return ladder.load_rung(rung), f"decomp.ladder.load_rung({rung!r})"
    from decomp.generator import generate

    n = RUNG_SIZES[rung]
    return generate(n, seed=FALLBACK_SEED), f"decomp.generator.generate({n}, seed={FALLBACK_SEED})"


def availability() -> tuple:
    """(registered pairs, {method: (ok, reason)}) from the registry; no solver is run."""
    from decomp import registry

    pairs = set(registry.pairs())
    status = {}
    for model, name in sorted(pairs):
        if name not in status:
            cls = registry.get_method(name, model)
            ok, reason = cls.available()
            status[name] = (bool(ok), str(reason or ""))
    return pairs, status


def excluded(suite: str, pairs, status) -> list:
    """Methods of the case table that give no cases in this run, with the reason."""
    out = []
    seen = set()
    for spec in _SPECS + _CHOICE_SPECS:
        name = _checked_method(spec)
        key = (spec.model, name)
        if key in seen:
            continue
        seen.add(key)
        if key not in pairs:
            out.append({"model": spec.model, "method": name, "reason": "not registered"})
        elif not status.get(name, (False, ""))[0]:
            out.append({"model": spec.model, "method": name, "reason": status[name][1] or "not available"})
    return out


# ---------------------------------------------------------------------------------------------
# Customer choice (decomp.choice): the sales-based LP on networks with markets
# ---------------------------------------------------------------------------------------------
#: Choice rungs: the generator's network of that size with its products sold in markets
#: (decomp.choice.generate.generate_choice, seeded); 100,000+ markets at c1m.
CHOICE_RUNG_SIZES = {"c1k": 1_000, "c10k": 10_000, "c100k": 100_000, "c1m": 1_000_000}
CHOICE_SEED = 20270101
RUNG_SIZES.update(CHOICE_RUNG_SIZES)
RUNG_ORDER = tuple(RUNG_SIZES)
_ROUNDS.update({"c1k": 3, "c10k": 2, "c100k": 1, "c1m": 1})
#: The decomposition at a tight tol is the reference: its certificate is computed from the instance
#: alone, and HiGHS' interior-point method takes minutes at c1m.
REFERENCES["sblp"] = (("lagrangian", {"tol": 1e-12}), ("highs", {}))
REFERENCE_MODEL["sblp"] = "sblp"

_CHOICE_SPECS = (
    _Spec("sblp", "lagrangian", ({"tol": 1e-9},), {"quick": "c100k", "full": "c1m"}),
    # HiGHS (interior point and crossover) on the same LP: 27 s at c100k, minutes at c1m
    _Spec("sblp", "highs", ({},), {"quick": "c100k", "full": "c1m"}, rounds_cap=1),
    _Spec("sblp", "pyomo-highs", ({},), {"quick": "c1k", "full": "c10k"}, rounds_cap=1),   # build included
)


def _choice_upto(last):
    names = tuple(CHOICE_RUNG_SIZES)
    return names[:names.index(last) + 1] if last else ()
