"""The Pyomo model builders that the build cases time, found in ``models/``.

``resolve(model)`` returns ``build(instance, options) -> pyomo model``; the
build is timed exactly as the Pyomo methods run it (see ``describe``).
"""

from __future__ import annotations

import importlib

#: Function names tried in models.<model>, first found wins.
_CANDIDATES = ("build_model", "build", "make_model")


def _find(model: str):
    try:
        mod = importlib.import_module(f"models.{model}")
    except ImportError:
        return None, None
    for name in (*_CANDIDATES, f"build_{model}", f"{model}_model"):
        fn = getattr(mod, name, None)
        if callable(fn):
            return mod, fn
    return mod, None


def available(model: str) -> tuple:
    mod, fn = _find(model)
    if mod is None:
        return False, f"models.{model} is not importable"
    if fn is None:
        return False, f"models.{model} has no builder function ({', '.join(_CANDIDATES)})"
    return True, ""


def describe(model: str) -> str:
    mod, fn = _find(model)
    return "-" if fn is None else f"{mod.__name__}.{fn.__name__}"


def resolve(model: str):
    mod, fn = _find(model)
    if fn is None:
        raise RuntimeError(available(model)[1])

    def build(instance, options):
        if model == "pwl":
            return fn(instance, int(options.segments))
        return fn(instance)

    return build


def size(pyomo_model) -> dict:
    """Variables and constraints of a built Pyomo model (None when not countable)."""
    try:
        return {"n_variables": int(pyomo_model.nvariables()), "n_constraints": int(pyomo_model.nconstraints())}
    except AttributeError:
        return {"n_variables": None, "n_constraints": None}
