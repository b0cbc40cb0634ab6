"""The instance ladder: named instances of growing size, defined by a manifest.

``instances/ladder.json`` lists each rung's product count, seed, generator
parameters and whether it is committed. Committed rungs (about 100, 1,000 and
10,000 products) live as CSV in ``instances/<name>/``; the large ones (100,000
and 1,000,000 products) are regenerated on demand into
``instances/generated/<name>/`` as Parquet (not in git). A test checks that the
committed rungs are exactly what the generator makes from the manifest.

The folder holding ``ladder.json`` is ``instances/`` beside the package, or
the folder named by the environment variable ``DECOMP_INSTANCES``.
"""

from __future__ import annotations

import dataclasses
import json
import logging
import os
import pathlib
from types import MappingProxyType
from typing import Mapping

from .errors import ConfigError, InstanceError
from .instance import Instance

log = logging.getLogger(__name__)

MANIFEST = "ladder.json"
GENERATED = "generated"


def instances_dir() -> pathlib.Path:
    """The folder holding the manifest and the committed rungs."""
    env = os.environ.get("DECOMP_INSTANCES")
    return pathlib.Path(env) if env else pathlib.Path(__file__).resolve().parents[1] / "instances"


@dataclasses.dataclass(frozen=True)
class Rung:
    """One rung: ``generate(products, seed, **params)``, stored as ``format``."""

    name: str
    products: int
    seed: int
    params: Mapping = dataclasses.field(default_factory=dict)
    committed: bool = False
    format: str = "csv"

    def __post_init__(self):
        object.__setattr__(self, "params", MappingProxyType(dict(self.params)))


def _load_manifest(root: pathlib.Path | None = None) -> dict[str, Rung]:
    path = (root or instances_dir()) / MANIFEST
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError as exc:
        raise InstanceError("the ladder manifest is missing", file=path) from exc
    except json.JSONDecodeError as exc:
        raise InstanceError(f"the ladder manifest is not valid JSON: {exc}", file=path) from exc
    rungs = {}
    for k, r in enumerate(doc.get("rungs", [])):
        try:
            rung = Rung(name=r["name"], products=int(r["products"]), seed=int(r["seed"]),
                        params=r.get("params", {}), committed=bool(r.get("committed", False)),
                        format=r.get("format", "csv" if r.get("committed") else "parquet"))
        except (KeyError, TypeError, ValueError) as exc:
            raise InstanceError(f"bad rung entry: {exc}", file=path, row=k + 1) from exc
        rungs[rung.name] = rung
    return rungs


def rungs() -> dict[str, Rung]:
    """The manifest's rungs by name, smallest first."""
    return _load_manifest()


#: Rung names of the manifest, smallest first (a test checks they agree).
RUNGS: tuple[str, ...] = ("p100", "p1k", "p10k", "p100k", "p1m")


def get_rung(name: str) -> Rung:
    all_ = rungs()
    if name not in all_:
        raise ConfigError(f"unknown ladder rung {name!r}; valid: {', '.join(all_)}")
    return all_[name]


def rung_path(name: str) -> pathlib.Path:
    """Where rung ``name`` lives: ``instances/<name>`` or ``instances/generated/<name>``."""
    rung = get_rung(name)
    root = instances_dir()
    return root / name if rung.committed else root / GENERATED / name


def _matches(rung: Rung, meta: Mapping) -> bool:
    from .generator import GENERATOR_NAME
    if meta.get("generator") != GENERATOR_NAME or meta.get("seed") != rung.seed:
        return False
    if meta.get("n_products") != rung.products:
        return False
    params = meta.get("params") or {}
    return all(_same(params.get(k), v) for k, v in rung.params.items())


def _same(a, b) -> bool:
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    return a == b


def rung_state(name: str) -> str:
    """``"ok"`` when rung ``name``'s folder holds a meta.json that matches the manifest,
    ``"stale"`` when it holds another (or an unreadable) one, ``"missing"`` otherwise."""
    path = rung_path(name)
    if not (path.is_dir() and (path / "meta.json").is_file()):
        return "missing"
    try:
        meta = json.loads((path / "meta.json").read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return "stale"
    return "ok" if isinstance(meta, dict) and _matches(get_rung(name), meta) else "stale"


def build_rung(name: str) -> Instance:
    """Generate rung ``name`` from the manifest (does not write it)."""
    from .generator import generate
    rung = get_rung(name)
    inst = generate(rung.products, seed=rung.seed, **dict(rung.params))
    meta = dict(inst.meta)
    meta["name"] = name
    meta["rung"] = name
    return inst.with_forecast(meta=meta)


def write_rung(name: str) -> pathlib.Path:
    """Generate rung ``name`` and write it (atomically) to :func:`rung_path`."""
    from .io import write_instance
    rung = get_rung(name)
    return write_instance(build_rung(name), rung_path(name), format=rung.format, replace_unmarked=True)


def load_rung(name: str) -> Instance:
    """Rung ``name`` as an Instance.

    A generated rung is (re)generated if its folder is missing or its
    meta.json does not match the manifest's seed, size and parameters. A
    committed rung that does not match raises InstanceError (regenerate it with
    ``decomp ladder --build``).
    """
    from .io import read_instance, write_instance
    rung = get_rung(name)
    path = rung_path(name)
    state = rung_state(name)
    if state != "missing":
        if state == "ok":
            return read_instance(path)
        if rung.committed:
            raise InstanceError(f"the committed rung {name} does not match the manifest "
                                "(seed, size or parameters); rebuild it with `decomp ladder --build`",
                                file=path / "meta.json")
        log.info("rung %s at %s is stale; regenerating", name, path)
    elif rung.committed:
        raise InstanceError(f"the committed rung {name} is missing; rebuild it with "
                            "`decomp ladder --build`", file=path)
    log.info("generating rung %s (%d products, seed %d) into %s", name, rung.products, rung.seed, path)
    inst = build_rung(name)
    write_instance(inst, path, format=rung.format, replace_unmarked=True)
    return inst                  # the same arrays a later read gives (tests check the round trip)
