"""The cases a baseline records (instance x model x method x options) and the named suites."""

from __future__ import annotations

import dataclasses
import logging
from typing import Any, Mapping

import numpy as np

from ..errors import ConfigError, DecompError
from ..instance import Instance
from ..options import SolverOptions

log = logging.getLogger(__name__)

# --------------------------------------------------------------------------- cases and suites
@dataclasses.dataclass(frozen=True)
class InstanceSpec:
    """How to build a suite's instance: ``source`` is 'ladder' (``params['rung']``),
    'generator' (``params['n_products']``, ``params['seed']``) or 'micro'
    (``params['seed']``, ``params['n_products']``: a tiny seeded network built here)."""

    name: str
    source: str
    params: Mapping[str, Any] = dataclasses.field(default_factory=dict)

    def build(self) -> Instance:
        if self.source == "ladder":
            from .. import ladder

            return ladder.load_rung(self.params["rung"])
        if self.source == "generator":
            from .. import generator

            return generator.generate(int(self.params["n_products"]), seed=int(self.params.get("seed", 0)))
        if self.source == "micro":
            return micro_instance(int(self.params.get("seed", 0)), int(self.params.get("n_products", 12)),
                                  name=self.name)
        raise ConfigError(f"unknown instance source {self.source!r} (valid: ladder, generator, micro)")


@dataclasses.dataclass(frozen=True)
class Case:
    """One recorded solve: an instance, a model, a method and its options.

    ``instance`` is an :class:`InstanceSpec` or an :class:`Instance` (tests
    pass small hand-built instances; its ``meta['name']`` names it).
    """

    instance: Any
    model: str
    method: str
    options: SolverOptions = dataclasses.field(default_factory=SolverOptions)
    label: str | None = None

    @property
    def instance_name(self) -> str:
        return self.instance.name if isinstance(self.instance, (InstanceSpec, Instance)) else str(self.instance)

    @property
    def id(self) -> str:
        base = f"{self.instance_name}-{self.model}-{self.method}"
        return safe_name(base if self.label is None else f"{base}-{self.label}")

    def build_instance(self) -> Instance:
        return self.instance if isinstance(self.instance, Instance) else self.instance.build()


def safe_name(s: str) -> str:
    out = "".join(ch if (ch.isalnum() or ch in "-_.") else "_" for ch in s)
    if not out or out.startswith("."):
        out = "_" + out
    return out


def micro_instance(seed: int, n_products: int = 12, name: str | None = None) -> Instance:
    """A tiny seeded hub-and-spoke network of a fictional carrier (test suites only).

    Hub QHX, spokes QAA, QAB, QAC; one leg each way between hub and spoke.
    Products are hub-spoke locals and spoke-hub-spoke connections in two fare
    classes; capacities are set below total demand on some legs so that
    capacity binds.
    """
    rng = np.random.default_rng(seed)
    spokes = ["QAA", "QAB", "QAC"]
    hub = "QHX"
    legs = []
    for s in spokes:
        legs.append((f"{s}{hub}", s, hub))
        legs.append((f"{hub}{s}", hub, s))
    ods = [[f"{s}{hub}"] for s in spokes] + [[f"{hub}{s}"] for s in spokes]
    ods += [[f"{a}{hub}", f"{hub}{b}"] for a in spokes for b in spokes if a != b]
    products = []
    for j in range(n_products):
        path = ods[j % len(ods)]
        fare_class = "Y" if (j // len(ods)) % 2 == 0 else "M"
        base = 80.0 * len(path) + float(rng.uniform(0, 60))
        fare = round(base * (1.6 if fare_class == "Y" else 1.0), 2)
        mean = round(float(rng.uniform(4, 30)), 2)
        std = round(mean * float(rng.uniform(0.2, 0.5)), 2)
        products.append((f"{''.join(path)}-{fare_class}{j}", path, fare, mean, std))
    leg_ids = [l[0] for l in legs]
    demand = {lid: 0.0 for lid in leg_ids}
    for p in products:
        for lid in p[1]:
            demand[lid] += p[3]
    factors = rng.uniform(0.5, 1.2, size=len(legs))
    leg_rows = [(lid, o, d, float(max(1.0, round(demand[lid] * f)))) for (lid, o, d), f in zip(legs, factors)]
    return Instance.from_lists(leg_rows, products, meta={"name": name or f"micro{seed}"})


# Largest quick-suite rung per (model, method) or method: the Pyomo-built models take much
# longer to build (the PWL's K columns per product most of all, so it stops at p1k).
_QUICK_RUNGS = ("p100", "p1k", "p10k")
_QUICK_MAX_RUNG = {("dlp", "pyomo-highs"): "p10k", "pyomo-highs": "p1k", "pyomo-ipopt": "p1k"}


def _available_pairs() -> list:
    from .. import registry

    out = []
    for model, method in registry.pairs(registry.INDEPENDENT_MODELS):   # baselines: networks without markets
        ok, reason = registry.get_method(method, model).available()
        if ok:
            out.append((model, method))
        else:
            log.info("baseline suite: skipping %s/%s: %s", model, method, reason)
    return out


def _suite_quick() -> list:
    cases = []
    pairs = _available_pairs()
    for k, rung in enumerate(_QUICK_RUNGS):
        spec = InstanceSpec(rung, "ladder", {"rung": rung})
        for model, method in pairs:
            limit = _QUICK_MAX_RUNG.get((model, method), _QUICK_MAX_RUNG.get(method))
            if limit is not None and k > _QUICK_RUNGS.index(limit):
                continue
            cases.append(Case(spec, model, method, SolverOptions()))
    return cases


def _suite_micro() -> list:
    specs = [InstanceSpec("micro1", "micro", {"seed": 1, "n_products": 12}),
             InstanceSpec("micro2", "micro", {"seed": 2, "n_products": 24})]
    return [Case(spec, model, method, SolverOptions()) for spec in specs for model, method in _available_pairs()]


#: Suite name -> (description, function returning its cases; availability checked when called).
SUITES: dict = {
    "micro": ("two tiny seeded networks (12 and 24 products) x every available (model, method)",
              _suite_micro),
    "quick": ("ladder rungs p100, p1k, p10k x every available (model, method); "
              "Pyomo-built models up to p1k (the DLP up to p10k)", _suite_quick),
}


def suite_cases(name: str) -> list:
    """The cases of a named suite, restricted to the methods available here."""
    if name not in SUITES:
        raise ConfigError(f"unknown baseline suite {name!r}; valid suites: {', '.join(sorted(SUITES))}")
    return SUITES[name][1]()


def unavailable_pairs(pairs) -> dict:
    """{(model, method): reason} for the pairs whose method is unknown or unavailable here."""
    from .. import registry

    out = {}
    for model, method in sorted(pairs):
        try:
            ok, reason = registry.get_method(method, model).available()
        except DecompError as exc:
            ok, reason = False, str(exc)
        if not ok:
            out[(model, method)] = reason
    return out
