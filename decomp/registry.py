"""Method registry: (model, name) -> class, filled by the :func:`register` decorator.

A method class has ``name``, the ``models`` it solves, ``available()``
returning (bool, reason) checked lazily, and ``solve(instance, model,
options, warm_start)`` returning a :class:`~decomp.result.SolveResult`.
One name may serve several models through different classes (``highs``
solves the DLP and PWL in :mod:`decomp.methods.highs` and the choice-based
``sblp`` in :mod:`decomp.choice.methods`); a (model, name) pair has one class.
"""

from __future__ import annotations

import importlib

from .errors import SolverUnavailableError, UnknownMethodError

#: Models of independent demand (every network) and the choice-based sales LP (networks with markets).
INDEPENDENT_MODELS = ("dlp", "pnlp", "pwl")
MODELS = INDEPENDENT_MODELS + ("sblp",)

#: The method a model is solved with when none is named, in the library and in every command
#: (the fastest that certifies its answer on the instance ladder; see the README's benchmark).
DEFAULT_METHOD = {"pnlp": "lagrangian", "dlp": "highs", "pwl": "highs", "sblp": "lagrangian"}

_METHODS: dict = {}          # (model, name) -> class

# The module whose import registers each built-in method (imported on first use:
# one solve imports only its own method's solver libraries).
_BUILTIN_MODULES = {
    "highs": "decomp.methods.highs",
    "pyomo-highs": "decomp.methods.pyomo_highs",
    "ipopt": "decomp.methods.ipopt",
    "pyomo-ipopt": "decomp.methods.pyomo_ipopt",
    "lagrangian": "decomp.methods.lagrangian",
}
# The module registering every method of a model that has its own (imported when the model is asked for).
_MODEL_MODULES = {"sblp": "decomp.choice.methods"}


def register(cls):
    """Class decorator: add a method class to the registry under (model, ``cls.name``) for its models."""
    for model in cls.models:
        old = _METHODS.get((model, cls.name))
        if old is not None and old is not cls:
            raise ValueError(f"method name {cls.name!r} registered twice for model {model!r}")
        _METHODS[(model, cls.name)] = cls
    return cls


def _load_builtins(name: str | None = None, model: str | None = None):
    """Import the module registering built-in method ``name`` (every one if None or unknown)."""
    if model in _MODEL_MODULES:
        importlib.import_module(_MODEL_MODULES[model])
    if name in _BUILTIN_MODULES:
        importlib.import_module(_BUILTIN_MODULES[name])
        return
    for mod in (*_BUILTIN_MODULES.values(), *_MODEL_MODULES.values()):
        importlib.import_module(mod)


def method_names() -> list:
    _load_builtins()
    return sorted({name for _, name in _METHODS})


def pairs(models=None) -> list:
    """Every valid (model, method) pair (of the given ``models`` only, when given)."""
    _load_builtins()
    return sorted(p for p in _METHODS if models is None or p[0] in models)


def get_method(name: str, model: str):
    """The method class for ``name``, checked against ``model``."""
    if model not in MODELS:
        raise UnknownMethodError(f"unknown model {model!r}; valid models: {', '.join(MODELS)}")
    _load_builtins(name, model)
    if (model, name) not in _METHODS:
        _load_builtins()
    if (model, name) not in _METHODS:
        names = sorted({n for _, n in _METHODS})
        if name not in names:
            raise UnknownMethodError(f"unknown method {name!r}; valid methods: {', '.join(names)}")
        solves = sorted(m for m, n in _METHODS if n == name)
        ok = sorted(n for m, n in _METHODS if m == model)
        raise UnknownMethodError(
            f"method {name!r} does not solve model {model!r} (it solves {', '.join(solves)}); "
            f"methods for {model!r}: {', '.join(ok)}")
    return _METHODS[(model, name)]


def solve(instance, model: str = "pnlp", method: str | None = None, options=None, warm_start=None,
          **option_values):
    """Solve ``instance`` with the named model and method; see :class:`SolveResult`.

    ``method``: None solves with the model's default method (:data:`DEFAULT_METHOD`).

    ``instance``: an :class:`~decomp.instance.Instance`, or the path of an
    instance folder (read and checked by :func:`decomp.read_instance`).
    ``options``: a :class:`~decomp.options.SolverOptions`, a dict of its fields,
    or None; keyword arguments (``tol=1e-6``, ``time_limit=60``, ...) override
    them. An unknown option name is a :class:`~decomp.errors.ConfigError` listing
    the valid ones. ``warm_start``: bid prices to start from: an earlier
    :class:`~decomp.result.SolveResult`, the path of anything decomp writes bid
    prices to (a result file, a run task, a baseline case, a leg,bid_price
    table), a dict by leg id or an array aligned with ``instance.leg_ids``
    (used by methods that can; others ignore it). Its values are brought into [0, the largest
    fare on the leg] here, for every method (:func:`decomp.warmstart.bounded_warm_start`).
    """
    import os

    from .instance import Instance
    from .options import as_options

    if isinstance(instance, (str, os.PathLike)):
        from .io import read_instance

        instance = read_instance(instance)
    elif not isinstance(instance, Instance):
        from .errors import ConfigError

        raise ConfigError(f"solve needs an Instance or the path of an instance folder, got "
                          f"{type(instance).__name__}")
    options = as_options(options, **option_values)
    warm_start = warm_start_prices(warm_start)
    if warm_start is not None:
        from .warmstart import bounded_warm_start

        warm_start, _ = bounded_warm_start(instance, warm_start)
    if method is None:
        if model not in DEFAULT_METHOD:
            raise UnknownMethodError(f"unknown model {model!r}; valid models: {', '.join(MODELS)}")
        method = DEFAULT_METHOD[model]
    cls = get_method(method, model)
    ok, reason = cls.available()
    if not ok:
        raise SolverUnavailableError(f"method {method!r} is not available: {reason}")
    return cls().solve(instance, model, options, warm_start=warm_start)


def warm_start_prices(warm_start):
    """Bid prices to start from, as a dict by leg id or an array, from what a caller may hand over.

    A :class:`~decomp.result.SolveResult` gives its bid prices by leg id; a path is read with
    :func:`decomp.result.read_bid_prices` (a missing or bad file is an InstanceError naming it);
    a dict or an array is returned as it is.
    """
    import os

    import numpy as np

    from .errors import ConfigError
    from .result import SolveResult, read_bid_prices

    if warm_start is None or isinstance(warm_start, (dict, np.ndarray, list, tuple)):
        return warm_start
    if isinstance(warm_start, SolveResult):
        if warm_start.bid_price_array is None:
            raise ConfigError(f"warm_start: the result ({warm_start.termination.value}) holds no bid prices")
        return warm_start.bid_prices
    if isinstance(warm_start, (str, os.PathLike)):
        return read_bid_prices(warm_start)
    if hasattr(warm_start, "keys"):
        return dict(warm_start)
    raise ConfigError(f"warm_start must be a SolveResult, the path of a result or bid-price file, a dict by "
                      f"leg id or an array of bid prices, got {type(warm_start).__name__}")
