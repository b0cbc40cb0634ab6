"""What a production batch is, and how a worker builds one task's instance.

A batch is a list of :class:`TaskSpec`, each small and picklable: the client
ships specs, never instances, and each worker reads or generates its own
instance (:meth:`TaskSpec.load`), so a worker holds only its current one.

Two shapes of batch:

* a folder of instance folders, one task per instance (one per departure date
  or network), read with :func:`decomp.io.read_instance`;
* one or more base networks (an instance folder, a folder of them, or a
  generated network ``gen:PRODUCTS[:SEED]``) times a range of departure dates.
  Each date's forecast is the base forecast times a deterministic factor
  (:class:`DateVariation`): a seasonal curve over the day of the year, a
  day-of-week profile and a per-product lognormal factor with mean one, drawn
  from a generator seeded by (seed, date). Same arguments, same instances.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools
import hashlib
import math
import pathlib
import re

import numpy as np

from ..errors import ConfigError, InstanceError

#: Default day-of-week demand profile, Monday first (a common shape for a
#: business-heavy network: strong Monday and Friday, weak Saturday; invented).
WEEKDAY_PROFILE = (1.06, 0.96, 0.92, 0.97, 1.10, 0.86, 1.03)

_KEY_OK = re.compile(r"[^A-Za-z0-9._-]+")


def safe_key(text: str) -> str:
    """A file-name-safe task key."""
    key = _KEY_OK.sub("_", str(text)).strip("._")
    if not key:
        raise ConfigError(f"cannot make a task key from {text!r}")
    return key


@dataclasses.dataclass(frozen=True)
class DateVariation:
    """Deterministic per-date demand variation applied to a base forecast.

    factor_j(date) = season(date) * weekday(date) * exp(sigma z_j - sigma^2 / 2),
    z ~ N(0, 1) drawn from ``numpy.random.default_rng(SeedSequence([seed,
    date.toordinal()]))``; season = 1 + seasonal * sin(2 pi (doy - 80) / 365.25)
    (peak in northern summer). Means and standard deviations are both scaled,
    so each product keeps its coefficient of variation; capacities are kept.
    """

    seed: int = 0
    sigma: float = 0.10
    seasonal: float = 0.15
    weekday: tuple = WEEKDAY_PROFILE

    def __post_init__(self):
        if not (self.sigma >= 0 and math.isfinite(self.sigma)):
            raise ConfigError(f"variation sigma must be >= 0, got {self.sigma!r}")
        if not (0 <= self.seasonal < 1):
            raise ConfigError(f"seasonal amplitude must be in [0, 1), got {self.seasonal!r}")
        if len(self.weekday) != 7 or min(self.weekday) <= 0:
            raise ConfigError("weekday profile needs 7 positive factors, Monday first")
        object.__setattr__(self, "weekday", tuple(float(w) for w in self.weekday))

    def factors(self, date: dt.date, n_products: int) -> np.ndarray:
        doy = date.timetuple().tm_yday
        season = 1.0 + self.seasonal * math.sin(2.0 * math.pi * (doy - 80) / 365.25)
        day = self.weekday[date.weekday()]
        rng = np.random.default_rng(np.random.SeedSequence([int(self.seed), date.toordinal()]))
        z = rng.standard_normal(n_products)
        return season * day * np.exp(self.sigma * z - 0.5 * self.sigma ** 2)

    def apply(self, instance, date: dt.date, name: str | None = None):
        f = self.factors(date, instance.n_products)
        meta = dict(instance.meta)
        meta.update(name=name or f"{instance.name}-{date.isoformat()}", departure_date=date.isoformat())
        return instance.with_forecast(mean=instance.mean * f, std=instance.std * f, meta=meta)

    def to_dict(self) -> dict:
        return {"seed": self.seed, "sigma": self.sigma, "seasonal": self.seasonal, "weekday": list(self.weekday)}


@dataclasses.dataclass(frozen=True)
class TaskSpec:
    """One task: where its instance comes from. Small and picklable.

    ``source`` is ``"folder"`` (read ``path``) or ``"generate"`` (call
    :func:`decomp.generator.generate` with ``n_products``, ``seed`` and the demand
    model ``demand``, a :mod:`decomp.demand_mix` text, None for normal demand);
    ``date`` (ISO) applies ``variation`` for that departure date, None uses the
    instance as it is. ``size`` estimates the work (products, or bytes on disk
    for an unread folder) and orders the submission largest first. ``content``
    is the sha256 of a folder's instance files (:func:`folder_digest`), so that
    the run's fingerprint changes when a file is edited in place.
    """

    key: str
    source: str
    path: str | None = None
    n_products: int | None = None
    seed: int = 0
    date: str | None = None
    variation: DateVariation | None = None
    size: float = 0.0
    content: str | None = None
    demand: str | None = None

    def to_dict(self) -> dict:
        out = {"key": self.key, "source": self.source, "path": self.path, "n_products": self.n_products,
               "seed": self.seed, "date": self.date,
               "variation": None if self.variation is None else self.variation.to_dict(),
               "content": self.content}
        if self.demand is not None:                 # fingerprints of normal-demand runs unchanged
            out["demand"] = self.demand
        return out

    def load(self):
        """Build this task's instance (on the worker)."""
        if self.source == "folder":
            from ..io import read_instance

            if self.content is not None and folder_digest(pathlib.Path(self.path)) != self.content:
                raise InstanceError("the instance files changed after the run started (their content no "
                                    "longer matches the run's fingerprint); rerun to solve what is there now",
                                    file=self.path)
            inst = read_instance(self.path)
        elif self.source == "generate":
            inst = _generated(int(self.n_products), int(self.seed), self.demand)
        else:
            raise ConfigError(f"unknown task source {self.source!r}")
        if self.date is not None:
            variation = self.variation or DateVariation()
            inst = variation.apply(inst, dt.date.fromisoformat(self.date), name=self.key)
        return inst


@functools.lru_cache(maxsize=1)
def _generated(n_products: int, seed: int, demand):
    """A generated base network, kept for the worker's next task: the dates of a run share
    it (instances are immutable; 1.5 s of each task at 1,000,000 products)."""
    from ..generator import generate

    return generate(n_products, seed=seed, demand=demand)


@dataclasses.dataclass(frozen=True)
class Batch:
    """The tasks of a run, in submission order (largest first), and how it was made."""

    tasks: tuple
    description: str

    def __post_init__(self):
        object.__setattr__(self, "tasks", tuple(self.tasks))
        keys = [t.key for t in self.tasks]
        if len(set(keys)) != len(keys):
            dup = sorted({k for k in keys if keys.count(k) > 1})
            raise ConfigError(f"duplicate task keys in batch: {', '.join(dup[:5])}")
        if not self.tasks:
            raise ConfigError(f"the batch is empty ({self.description})")

    def __len__(self):
        return len(self.tasks)

    def to_dict(self) -> dict:
        return {"description": self.description, "n_tasks": len(self.tasks)}


# -- dates ----------------------------------------------------------------------

def parse_date(text: str, what: str = "date") -> dt.date:
    try:
        return dt.date.fromisoformat(str(text).strip())
    except ValueError as exc:
        raise ConfigError(f"{what} {text!r} is not an ISO date (YYYY-MM-DD)") from exc


def date_range(dates: str | None = None, days: int | None = None, start: str | None = None) -> list:
    """Departure dates from ``--dates FIRST:LAST`` (inclusive) or ``--days N [--start DATE]``.

    ``start`` defaults to today (UTC); give it explicitly for a reproducible batch.
    """
    if dates is not None and days is not None:
        raise ConfigError("give either --dates FIRST:LAST or --days N, not both")
    if dates is not None:
        first, sep, last = str(dates).partition(":")
        if not sep:
            raise ConfigError(f"--dates {dates!r}: expected FIRST:LAST, e.g. 2027-01-01:2027-12-31")
        d0, d1 = parse_date(first, "--dates first"), parse_date(last, "--dates last")
        if d1 < d0:
            raise ConfigError(f"--dates {dates!r}: the last date is before the first")
        n = (d1 - d0).days + 1
    elif days is not None:
        if int(days) != days or days < 1:
            raise ConfigError(f"--days must be a positive integer, got {days!r}")
        d0 = parse_date(start, "--start") if start else dt.datetime.now(dt.timezone.utc).date()
        n = int(days)
    else:
        return []
    return [d0 + dt.timedelta(days=i) for i in range(n)]


# -- building batches -------------------------------------------------------------

_GEN = re.compile(r"^gen:(\d+)(?::(\d+))?$")


def _is_instance_folder(path: pathlib.Path) -> bool:
    """An instance folder holds files; a batch folder holds only instance folders."""
    return any(p.is_file() and not p.name.startswith(".") for p in path.iterdir())


def _folder_bytes(path: pathlib.Path) -> int:
    return sum(p.stat().st_size for p in path.iterdir() if p.is_file())


def folder_digest(path: pathlib.Path) -> str:
    """sha256 over the names and bytes of the instance files in ``path`` (what read_instance reads)."""
    from ..io import INSTANCE_FILES

    h = hashlib.sha256(b"decomp-instance-files;")
    for p in sorted(path.iterdir()):
        if p.name in INSTANCE_FILES and p.is_file():
            h.update(p.name.encode() + b"\0")
            with open(p, "rb") as fh:
                for chunk in iter(lambda: fh.read(1 << 20), b""):
                    h.update(chunk)
            h.update(b"\0")
    return h.hexdigest()


def base_sources(batch: str, demand: str | None = None) -> list:
    """The base networks named by a BATCH argument: a list of (name, TaskSpec template).
    ``demand``: the demand model of a generated network (a :mod:`decomp.demand_mix` text)."""
    m = _GEN.match(str(batch).strip())
    if m:
        n, seed = int(m.group(1)), int(m.group(2) or 0)
        if n < 1:
            raise ConfigError(f"{batch!r}: a generated network needs at least one product")
        if demand is not None:
            from ..demand_mix import DemandMix

            mix = DemandMix.parse(demand)
            demand = None if mix.is_plain_normal else mix.text()
        return [(f"gen{n}", TaskSpec(key=f"gen{n}", source="generate", n_products=n, seed=seed, size=n,
                                     demand=demand))]
    if demand is not None:
        raise ConfigError("a demand model (--demand) applies to a generated network (gen:PRODUCTS[:SEED]) only")
    path = pathlib.Path(batch)
    if not path.exists():
        raise InstanceError("batch folder not found (give a folder of instances, an instance folder, "
                            "or gen:PRODUCTS[:SEED])", file=path)
    if not path.is_dir():
        raise InstanceError("a batch is a folder (of instance folders, or one instance folder)", file=path)
    if _is_instance_folder(path):
        folders = [path]
    else:
        folders = sorted(p for p in path.iterdir() if p.is_dir() and not p.name.startswith("."))
        if not folders:
            raise InstanceError("the batch folder holds no instance folders", file=path)
    return [(p.name, TaskSpec(key=safe_key(p.name), source="folder", path=str(p.resolve()),
                              size=float(_folder_bytes(p)), content=folder_digest(p))) for p in folders]


def build_batch(batch: str, dates: list | None = None, variation: DateVariation | None = None,
                demand: str | None = None) -> Batch:
    """The batch for ``decomp run BATCH``.

    Without ``dates``, one task per instance folder (or the one generated
    network). With ``dates``, every base network times every date; task keys
    are the ISO date, prefixed by the network's name when there are several.
    Tasks are ordered largest first (longest processing time first).
    """
    bases = base_sources(batch, demand)
    if not dates:
        tasks = [spec for _, spec in bases]
        desc = f"{len(tasks)} instance(s) from {batch}"
    else:
        variation = variation or DateVariation()
        tasks = []
        for name, spec in bases:
            for d in dates:
                key = d.isoformat() if len(bases) == 1 else f"{safe_key(name)}_{d.isoformat()}"
                tasks.append(dataclasses.replace(spec, key=key, date=d.isoformat(), variation=variation))
        desc = (f"{len(bases)} network(s) from {batch} x {len(dates)} date(s) "
                f"{dates[0].isoformat()}..{dates[-1].isoformat()}")
    order = sorted(range(len(tasks)), key=lambda i: (-tasks[i].size, i))
    return Batch(tasks=[tasks[i] for i in order], description=desc)
