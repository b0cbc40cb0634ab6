"""Solver-upgrade regression checks: record what an environment answers, check another against it.

Before Ipopt, HiGHS, Pyomo, numpy or scipy is upgraded, :func:`record` solves a
*suite* of cases (instance x model x method x options) and writes a baseline
folder; after the upgrade, :func:`check` re-solves every case with the recorded
options and compares.

Baseline folder (plain files a person can diff)::

    manifest.json            format, suite, every file below with its sha256 and size
    environment.json         Python, numpy, scipy, pyomo, highspy, cyipopt, Ipopt, HiGHS, CPU, platform
    summary.csv              one row per case: status, objective, iterations, seconds
    instances/<name>/...     the instances, as decomp.io writes them (the check re-reads these,
                             so a changed generator or random stream cannot move the inputs)
    cases/<case>/result.json objective, status, certificate, iterations, times, options,
                             allocation digest
    cases/<case>/bid_prices.csv   leg_id,bid_price (full float precision)

The allocation digest is the sha256 of the allocation rounded to
:data:`SIG_DIGITS` significant digits (entries below :data:`ZERO_SEATS` seats
taken as 0; see :func:`allocation_digest`), stored with its sum, min and max.

The whole folder is written into a temporary sibling and renamed into place,
so an interrupted record leaves no half-written baseline; every file is
checked against the manifest before a check starts, and a missing, truncated
or edited file raises :class:`BaselineError` naming the file.

DLP bid prices need not be unique (a degenerate LP has many optimal duals). A
DLP case whose objective is unchanged but whose bid prices moved is checked
for dual feasibility (pi >= 0) and for the LP dual objective
c.pi + sum_j mean_j (f_j - a_j)^+ equal to the recorded optimum; when both
hold, the case is reported as ``alternative_duals`` (legs named), not as a
regression (LP duality: a dual-feasible point whose dual objective equals the
primal optimum is an optimal dual). The PWL model, an LP too, is treated the
same way with its own dual objective (both from :mod:`decomp.certify`).
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as _dt
import hashlib
import io as _io
import json
import logging
import math
import os
import pathlib
import platform
import shutil
import tempfile
import time
from typing import Any, Callable, Mapping, Sequence

import numpy as np

from . import atomic
from .errors import ConfigError, DecompError, InstanceError, SolverUnavailableError
from .instance import Instance
from .options import SolverOptions

log = logging.getLogger(__name__)

FORMAT = "decomp-baseline"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
ENVIRONMENT = "environment.json"
SUMMARY = "summary.csv"
SIG_DIGITS = 6          # significant digits of the allocation digest
ZERO_SEATS = 1e-8       # allocation entries below this many seats count as 0 in the digest

LP_MODELS = ("dlp", "pwl")

# Verdicts of a checked case.
PASS, ALTERNATIVE_DUALS, REGRESSION = "pass", "alternative_duals", "regression"


class BaselineError(InstanceError):
    """A baseline folder is missing, incomplete, truncated or edited by hand.

    A subclass of :class:`~decomp.errors.InstanceError` (the baseline is input
    to ``decomp baseline check``), so it carries the file and the command line
    exits with code 2.
    """


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
            from . import ladder

            return ladder.load_rung(self.params["rung"])
        if self.source == "generator":
            from . import generator

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
        return _safe_name(base if self.label is None else f"{base}-{self.label}")

    def build_instance(self) -> Instance:
        return self.instance if isinstance(self.instance, Instance) else self.instance.build()


def _safe_name(s: str) -> str:
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
# longer to build (the PWL by Pyomo at p10k takes about 20 s here, the DLP 2.5 s).
_QUICK_RUNGS = ("p100", "p1k", "p10k")
_QUICK_MAX_RUNG = {("dlp", "pyomo-highs"): "p10k", "pyomo-highs": "p1k", "pyomo-ipopt": "p1k"}


def _available_pairs() -> list:
    from . import registry

    out = []
    for model, method in registry.pairs():
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


# --------------------------------------------------------------------------- environment
def _dist_version(*names) -> str | None:
    import importlib.metadata as md

    for n in names:
        try:
            return md.version(n)
        except md.PackageNotFoundError:
            continue
    return None


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.lower().startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def _source_digest() -> str:
    """sha256 over the decomp package's and the Pyomo models' Python sources (path and content),
    so that a code change without a version bump (or uncommitted) shows in the environment."""
    root = pathlib.Path(__file__).resolve().parent
    h = hashlib.sha256()
    for folder in (root, root.parent / "models"):
        if not folder.is_dir():
            continue
        for p in sorted(folder.rglob("*.py")):
            h.update(p.relative_to(root.parent).as_posix().encode() + b"\0")
            h.update(p.read_bytes() + b"\0")
    return h.hexdigest()


def _git_commit() -> str | None:
    """The checkout's commit (with '+dirty' when files differ), or None outside a git checkout."""
    import subprocess

    cwd = pathlib.Path(__file__).resolve().parent.parent
    try:
        head = subprocess.run(["git", "rev-parse", "HEAD"], cwd=cwd, capture_output=True, text=True, timeout=10)
        if head.returncode != 0:
            return None
        dirty = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no", "--", "decomp", "models"],
                               cwd=cwd, capture_output=True, text=True, timeout=10)
    except (OSError, subprocess.SubprocessError):
        return None
    return head.stdout.strip() + ("+dirty" if dirty.stdout.strip() else "")


def environment() -> dict:
    """What the answers may depend on: library and solver versions, CPU, platform."""
    env: dict = {
        "python": platform.python_version(),
        "python_implementation": platform.python_implementation(),
        "platform": platform.platform(),
        "machine": platform.machine(),
        "cpu_model": _cpu_model(),
        "cpu_count_logical": os.cpu_count(),
    }
    try:
        import psutil

        env["cpu_count_physical"] = psutil.cpu_count(logical=False)
    except ImportError:
        env["cpu_count_physical"] = None
    if hasattr(os, "sched_getaffinity"):
        env["cpu_count_usable"] = len(os.sched_getaffinity(0))
    env["decomp"] = _dist_version("decomp")
    env["decomp_source_sha256"] = _source_digest()
    env["decomp_git_commit"] = _git_commit()
    env.update(library_versions())
    return env


def library_versions() -> dict:
    """Versions of the libraries and solvers the answers depend on (no solver object is built)."""
    env: dict = {"python": platform.python_version()}
    env["numpy"] = np.__version__
    try:
        blas = np.show_config(mode="dicts")["Build Dependencies"]["blas"]
        env["numpy_blas"] = f"{blas.get('name')} {blas.get('version')}"
    except (TypeError, KeyError, AttributeError):   # numpy < 2 has no dict mode; informative only
        env["numpy_blas"] = None
    for mod, dists in (("scipy", ("scipy",)), ("pyomo", ("pyomo", "Pyomo")),
                       ("highspy", ("highspy",)), ("cyipopt", ("cyipopt", "cyipopt-wheels"))):
        env[mod] = _dist_version(*dists)
    # HiGHS library version: the compile-time constants of highspy's bundled library
    # (reading them does not construct a Highs object, which prints a banner).
    try:
        import highspy

        env["highs_library"] = "{}.{}.{}".format(highspy.HIGHS_VERSION_MAJOR, highspy.HIGHS_VERSION_MINOR,
                                                 highspy.HIGHS_VERSION_PATCH)
    except (ImportError, AttributeError):
        env["highs_library"] = None
    # Ipopt library version: cyipopt exposes the linked Ipopt's version as a tuple.
    try:
        import cyipopt

        env["ipopt_library"] = ".".join(str(v) for v in cyipopt.IPOPT_VERSION)
    except (ImportError, AttributeError):
        env["ipopt_library"] = None
    return env


#: Environment keys that change the answers (a difference is listed first in the report).
SOLVER_KEYS = ("highs_library", "ipopt_library", "highspy", "cyipopt", "pyomo", "numpy", "numpy_blas",
               "scipy", "python", "decomp", "decomp_source_sha256", "decomp_git_commit")


def environment_changes(old: Mapping, new: Mapping) -> list:
    """[(key, old, new)] for every environment entry that differs, solver-relevant keys first."""
    keys = [k for k in SOLVER_KEYS if k in old or k in new]
    keys += sorted((set(old) | set(new)) - set(keys))
    return [(k, old.get(k), new.get(k)) for k in keys if old.get(k) != new.get(k)]


# --------------------------------------------------------------------------- digests and numbers
def _sha256_bytes(b: bytes) -> str:
    return hashlib.sha256(b).hexdigest()


def _sha256_file(path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def round_significant(x, digits: int = SIG_DIGITS):
    """(mantissa, exponent) int64 arrays with x ~= mantissa * 10**(exponent - digits + 1).

    ``|mantissa|`` has exactly ``digits`` digits (0 for zero, with exponent 0);
    entries below :data:`ZERO_SEATS` in magnitude are taken as 0.
    """
    x = np.asarray(x, dtype=np.float64)
    if not np.all(np.isfinite(x)):
        raise ValueError("allocation has non-finite entries")
    ax = np.abs(x)
    nz = ax >= ZERO_SEATS
    e = np.zeros(x.shape, dtype=np.int64)
    e[nz] = np.floor(np.log10(ax[nz])).astype(np.int64)
    m = np.where(nz, np.rint(x / np.power(10.0, (e - (digits - 1)).astype(np.float64))), 0.0)
    over = np.abs(m) >= 10.0 ** digits           # 9.9999996 rounds up to 10.00000
    m[over] = np.rint(m[over] / 10.0)
    e[over] += 1
    under = nz & (np.abs(m) < 10.0 ** (digits - 1))  # log10 just below an integer
    m[under] = np.rint(x[under] / np.power(10.0, (e[under] - digits).astype(np.float64)))
    e[under] -= 1
    return m.astype(np.int64), e


def allocation_digest(x, digits: int = SIG_DIGITS) -> dict:
    """sha256 of the allocation rounded to ``digits`` significant digits, with its sum/min/max.

    The hash covers the text header ``decomp-allocation;sig=<digits>;n=<n>;``
    followed by the little-endian int64 mantissas, then the int64 exponents, of
    :func:`round_significant`.
    """
    if x is None:
        return {"sha256": None, "significant_digits": digits, "n": 0, "sum": None, "min": None, "max": None}
    x = np.asarray(x, dtype=np.float64)
    m, e = round_significant(x, digits)
    h = hashlib.sha256(f"decomp-allocation;sig={digits};n={len(x)};".encode())
    h.update(m.astype("<i8").tobytes())
    h.update(e.astype("<i8").tobytes())
    return {"sha256": h.hexdigest(), "significant_digits": digits, "zero_below": ZERO_SEATS, "n": int(len(x)),
            "sum": float(x.sum()) if len(x) else 0.0,
            "min": float(x.min()) if len(x) else None, "max": float(x.max()) if len(x) else None}


def instance_fingerprint(inst: Instance) -> str:
    """sha256 over the instance's ids, network and forecasts (what the solvers see)."""
    h = hashlib.sha256(b"decomp-instance;")
    for ids in (inst.leg_ids, inst.product_ids):
        h.update(("\x1f".join(str(v) for v in ids.tolist()) + "\x1e").encode())
    for arr in (inst.capacity, inst.fare, inst.mean, inst.std):
        h.update(np.ascontiguousarray(arr, dtype="<f8").tobytes())
    for arr in (inst.leg_ptr, inst.leg_index):
        h.update(np.ascontiguousarray(arr, dtype="<i8").tobytes())
    h.update(("\x1f".join(str(v) for v in inst.distributions().tolist())).encode())
    return h.hexdigest()


def _num(v):
    """A JSON-safe float (non-finite values as the strings 'inf', '-inf', 'nan')."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else str(v)


def _unnum(v):
    if v is None:
        return None
    return float(v)


def lp_dual_objective(inst: Instance, model: str, pi, segments: int = 16) -> float:
    """LP dual objective of the DLP or PWL model at bid prices ``pi`` (from :mod:`decomp.certify`).

    DLP: max f.x s.t. A x <= c, 0 <= x <= mean has the dual min c.pi + mean.s
    s.t. A^T pi + s >= f, pi, s >= 0, whose best s at given pi is (f - A^T pi)^+,
    so the dual objective is c.pi + sum_j mean_j (f_j - a_j)^+; the PWL model's
    is c.pi + sum_j sum_k w_jk (f_j s_jk - a_j)^+ over its segments.
    """
    from . import certify

    pi = np.asarray(pi, dtype=np.float64)
    cert = certify.certify(inst, model, np.zeros(inst.n_products), pi, segments=segments)
    return float(cert.dual_value)


# --------------------------------------------------------------------------- bid-price CSV
def _bid_prices_csv(leg_ids, pi) -> str:
    buf = _io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["leg_id", "bid_price"])
    if pi is not None:
        for lid, v in zip(leg_ids, np.asarray(pi, dtype=np.float64).tolist()):
            w.writerow([lid, repr(float(v))])
    return buf.getvalue()


def read_bid_prices_csv(path) -> tuple:
    """(leg ids, bid prices) from a baseline's bid_prices.csv, with errors naming row and column."""
    path = pathlib.Path(path)
    try:
        text = path.read_text()
    except FileNotFoundError as exc:
        raise BaselineError("baseline file is missing", file=path) from exc
    rows = list(csv.reader(_io.StringIO(text)))
    if not rows or rows[0] != ["leg_id", "bid_price"]:
        raise BaselineError("expected the header 'leg_id,bid_price'", file=path, row=0)
    legs, vals = [], []
    for k, row in enumerate(rows[1:], start=1):
        if len(row) != 2:
            raise BaselineError(f"expected 2 fields, found {len(row)}", file=path, row=k)
        try:
            vals.append(float(row[1]))
        except ValueError as exc:
            raise BaselineError("bid price is not a number", file=path, row=k, column="bid_price",
                                value=row[1]) from exc
        legs.append(row[0])
    return legs, np.array(vals, dtype=np.float64)


# --------------------------------------------------------------------------- record
def _timed_solve(solve_fn, clock, instance, case_model, case_method, options, repeat, warm=None):
    """(result, best wall seconds of ``repeat`` runs). ``warm``: a set of (model, method) pairs
    already solved in this process; a pair not in it is first solved once untimed, so that
    library imports and first-call set-up are not counted (the pair is then added)."""
    if warm is not None and (case_model, case_method) not in warm:
        solve_fn(instance, model=case_model, method=case_method, options=options)
        warm.add((case_model, case_method))
    best, result = math.inf, None
    for _ in range(max(1, int(repeat))):
        t0 = clock()
        result = solve_fn(instance, model=case_model, method=case_method, options=options)
        best = min(best, clock() - t0)
    return result, best


def _default_solve():
    from . import registry

    return registry.solve


def options_dict(options: SolverOptions) -> dict:
    """The options as a plain dict (:meth:`SolverOptions.to_dict`: solver_options copied to a dict)."""
    return options.to_dict()


def _result_record(case: Case, result, wall: float, fingerprint: str, options: SolverOptions) -> dict:
    cert = result.certificate
    return {
        "case": case.id,
        "instance": case.instance_name,
        "instance_fingerprint": fingerprint,
        "model": case.model,
        "method": case.method,
        "options": options_dict(options),
        "termination": result.termination.value,
        "solution_status": result.solution_status.value,
        "objective": _num(result.objective),
        "bound": _num(result.bound),
        "gap": _num(result.gap),
        "certificate": None if cert is None else {k: _num(v) for k, v in cert.to_dict().items()},
        "iterations": result.iterations,
        "wall_seconds": float(wall),
        "seconds": {k: float(v) for k, v in result.seconds.items()},
        "solver": result.solver,
        "solver_version": result.solver_version,
        "raw_status": result.raw_status,
        "message": result.message,
        "allocation": allocation_digest(result.allocation),
        "n_legs": int(len(result.leg_ids)),
        "n_products": int(len(result.product_ids)),
        "bid_prices_file": "bid_prices.csv",
    }


def _write_instance(inst: Instance, folder: pathlib.Path) -> Instance:
    """Write with decomp.io and read back (the baseline's cases solve what was written)."""
    from . import io as dio

    dio.write_instance(inst, folder, format="csv")
    back = dio.read_instance(folder)
    if instance_fingerprint(back) != instance_fingerprint(inst):
        log.warning("instance %s changed in a write/read round trip; recording the read-back instance",
                    inst.name)
    return back


@dataclasses.dataclass(frozen=True)
class RecordSummary:
    path: pathlib.Path
    suite: str | None
    cases: tuple           # case records (dicts as written to result.json)
    environment: Mapping


def record(out, suite: str | None = None, *, cases: Sequence[Case] | None = None,
           solve_fn: Callable | None = None, clock: Callable[[], float] = time.perf_counter,
           repeat: int = 1, warmup: bool = True, overwrite: bool = False,
           progress: Callable | None = None) -> RecordSummary:
    """Solve every case of ``suite`` (or the given ``cases``) and write a baseline folder at ``out``.

    ``solve_fn(instance, model=, method=, options=)`` defaults to
    :func:`decomp.registry.solve`; ``clock`` times each solve (the best of
    ``repeat`` runs; with ``warmup`` the first case of each (model, method)
    is solved once untimed before it is timed). The folder is built in a temporary sibling and renamed
    into place; an existing ``out`` is replaced only with ``overwrite``.
    ``progress(case_id, record_dict)`` is called after each case (commands print from it).
    """
    out = pathlib.Path(out)
    if cases is None:
        if suite is None:
            raise ConfigError("record needs a suite name or a list of cases")
        cases = suite_cases(suite)
    cases = list(cases)
    if not cases:
        raise ConfigError(f"suite {suite!r} has no case whose method is available here")
    ids = [c.id for c in cases]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise ConfigError(f"duplicate case ids {dup}; give the cases distinct labels")
    if out.exists() and not overwrite:
        raise ConfigError(f"{out} already exists; choose another folder or pass --force to replace it")
    if solve_fn is None:
        missing = _unavailable_pairs({(c.model, c.method) for c in cases})
        if missing:
            raise SolverUnavailableError("cannot record: " + "; ".join(
                f"{model}/{method}: {reason}" for (model, method), reason in missing.items()))
    solve_fn = solve_fn or _default_solve()
    env = environment()
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = pathlib.Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".tmp", dir=out.parent))
    try:
        records = []
        written: dict = {}
        warm: set = set()
        for case in cases:
            name = _safe_name(case.instance_name)
            if name not in written:
                built = case.build_instance()
                written[name] = (_write_instance(built, tmp / "instances" / name), built)
            inst = written[name][0]
            fp = instance_fingerprint(inst)
            result, wall = _timed_solve(solve_fn, clock, inst, case.model, case.method, case.options, repeat,
                                        warm if warmup else None)
            rec = _result_record(case, result, wall, fp, case.options)
            rec["instance_dir"] = f"instances/{name}"
            cdir = tmp / "cases" / case.id
            atomic.write_json(cdir / "result.json", rec)
            atomic.write_text(cdir / "bid_prices.csv", _bid_prices_csv(result.leg_ids, result.bid_price_array))
            records.append(rec)
            if progress is not None:
                progress(case.id, rec)
        atomic.write_json(tmp / ENVIRONMENT, env)
        atomic.write_text(tmp / SUMMARY, _summary_csv(records))
        _write_manifest(tmp, suite, [r["case"] for r in records])
        if out.exists():
            old = out.with_name(f".{out.name}.old-{os.getpid()}")
            os.replace(out, old)
            os.replace(tmp, out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return RecordSummary(out, suite, tuple(records), env)


def _summary_csv(records) -> str:
    buf = _io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["case", "instance", "model", "method", "tol", "termination", "solution_status", "objective",
                "gap", "iterations", "wall_seconds"])
    for r in records:
        w.writerow([r["case"], r["instance"], r["model"], r["method"], r["options"]["tol"], r["termination"],
                    r["solution_status"], r["objective"], (r["certificate"] or {}).get("gap"), r["iterations"],
                    f"{r['wall_seconds']:.4f}"])
    return buf.getvalue()


def _manifest_self_hash(manifest: Mapping) -> str:
    body = {k: v for k, v in manifest.items() if k != "manifest_sha256"}
    return _sha256_bytes(json.dumps(body, sort_keys=True, separators=(",", ":")).encode())


def _write_manifest(folder: pathlib.Path, suite, case_ids) -> None:
    files = []
    for p in sorted(folder.rglob("*")):
        if p.is_file() and p.name != MANIFEST and not p.name.startswith("."):
            rel = p.relative_to(folder).as_posix()
            files.append({"path": rel, "sha256": _sha256_file(p), "bytes": p.stat().st_size})
    manifest = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "suite": suite,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "cases": list(case_ids),
        "files": files,
    }
    manifest["manifest_sha256"] = _manifest_self_hash(manifest)
    atomic.write_json(folder / MANIFEST, manifest)


# --------------------------------------------------------------------------- load and verify
def _read_json(path: pathlib.Path):
    try:
        return json.loads(path.read_text())
    except FileNotFoundError as exc:
        raise BaselineError("baseline file is missing", file=path) from exc
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise BaselineError(f"not valid JSON ({exc}); the file was truncated or edited", file=path) from exc


@dataclasses.dataclass(frozen=True)
class Baseline:
    path: pathlib.Path
    manifest: Mapping
    environment: Mapping
    cases: tuple      # result.json dicts, in recorded order, each with 'bid_prices' (legs, array)


def load(path) -> Baseline:
    """Read a baseline folder after checking every file against the manifest.

    Raises :class:`BaselineError` naming the file when the folder is not a
    baseline, when a listed file is missing, or when its size or sha256 differs
    from the manifest (truncated or edited after recording).
    """
    path = pathlib.Path(path)
    if not path.is_dir():
        raise BaselineError("baseline folder not found; record one with 'decomp baseline record'", file=path)
    mpath = path / MANIFEST
    if not mpath.exists():
        raise BaselineError("no manifest.json: not a baseline folder (record one with 'decomp baseline record')",
                            file=mpath)
    manifest = _read_json(mpath)
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        raise BaselineError(f"not a {FORMAT} manifest", file=mpath, column="format")
    if manifest.get("format_version") != FORMAT_VERSION:
        raise BaselineError(f"format_version {manifest.get('format_version')!r} is not supported "
                            f"(this decomp reads {FORMAT_VERSION}); re-record the baseline", file=mpath,
                            column="format_version")
    if manifest.get("manifest_sha256") != _manifest_self_hash(manifest):
        raise BaselineError("manifest.json was edited after recording (its manifest_sha256 does not match "
                            "its content); re-record the baseline", file=mpath, column="manifest_sha256")
    for k, entry in enumerate(manifest.get("files", []), start=1):
        fpath = path / entry["path"]
        if not fpath.is_file():
            raise BaselineError("baseline file listed in manifest.json is missing", file=fpath)
        size = fpath.stat().st_size
        if size != entry["bytes"]:
            raise BaselineError(f"baseline file has {size} bytes, manifest.json recorded {entry['bytes']}: "
                                f"truncated or edited after recording; re-record the baseline", file=fpath)
        digest = _sha256_file(fpath)
        if digest != entry["sha256"]:
            raise BaselineError(f"baseline file's sha256 {digest[:12]}... differs from manifest.json's "
                                f"{entry['sha256'][:12]}...: edited after recording; re-record the baseline",
                                file=fpath)
    env = _read_json(path / ENVIRONMENT)
    cases = []
    listed = {e["path"] for e in manifest.get("files", [])}
    for cid in manifest.get("cases", []):
        rel = f"cases/{cid}/result.json"
        if rel not in listed:
            raise BaselineError(f"case {cid!r} has no result.json listed in manifest.json", file=path / rel)
        rec = _read_json(path / rel)
        legs, pi = read_bid_prices_csv(path / "cases" / cid / rec.get("bid_prices_file", "bid_prices.csv"))
        rec["bid_prices"] = (legs, pi)
        cases.append(rec)
    return Baseline(path, manifest, env, tuple(cases))


def _read_instance(base: Baseline, rec: Mapping) -> Instance:
    from . import io as dio

    folder = base.path / rec["instance_dir"]
    return dio.read_instance(folder)


# --------------------------------------------------------------------------- thresholds
@dataclasses.dataclass(frozen=True)
class Thresholds:
    """What counts as a regression; None picks a default that fits the case's method and tolerance.

    objective_rtol: |obj_new - obj_old| / max(1, |obj_old|); default max(10 tol, 1e-9).
    bid_rtol, bid_atol: a leg's bid price regresses when |pi_new - pi_old| > bid_atol + bid_rtol |pi_old|;
        defaults: LP models (dlp, pwl) rtol 1e-7; PNLP rtol max(1e-6, 1e3 tol);
        bid_atol defaults to bid_rtol * max(1, max_i |pi_old_i|) (the case's bid-price scale).
    allocation_rtol: relative change of the allocation's sum, min or max (scale max(1, |old max|));
        default max(1e-5, 1e3 tol) for the PNLP; LP allocations may be non-unique and are only noted.
    gap_floor, violation_floor, kkt_floor, certificate_factor: a certificate measure regresses
        when new > max(certificate_factor * old, floor); gap_floor defaults to the recorded tol (the
        certified gap the case was asked for: an answer now less accurate than requested regresses).
    time_ratio, time_floor: wall time regresses when max(new, floor) / max(old, floor) > time_ratio
        (the floor keeps millisecond solves from tripping on timer noise).
    """

    objective_rtol: float | None = None
    bid_rtol: float | None = None
    bid_atol: float | None = None
    allocation_rtol: float | None = None
    gap_floor: float | None = None
    violation_floor: float = 1e-6
    kkt_floor: float = 1e-6
    certificate_factor: float = 10.0
    time_ratio: float = 2.0
    time_floor: float = 0.5

    def __post_init__(self):
        for f in dataclasses.fields(self):
            v = getattr(self, f.name)
            if v is not None and not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ConfigError(f"threshold {f.name} must be a non-negative number, got {v!r}")
        if self.time_ratio < 1:
            raise ConfigError(f"time_ratio must be >= 1, got {self.time_ratio!r}")

    def for_case(self, model: str, tol: float) -> dict:
        lp = model in LP_MODELS
        obj = self.objective_rtol if self.objective_rtol is not None else max(10 * tol, 1e-9)
        bid = self.bid_rtol if self.bid_rtol is not None else (1e-7 if lp else max(1e-6, 1e3 * tol))
        alloc = self.allocation_rtol if self.allocation_rtol is not None else (None if lp else max(1e-5, 1e3 * tol))
        gap = self.gap_floor if self.gap_floor is not None else tol
        return {"objective_rtol": obj, "bid_rtol": bid, "bid_atol": self.bid_atol, "allocation_rtol": alloc,
                "gap_floor": gap, "violation_floor": self.violation_floor, "kkt_floor": self.kkt_floor,
                "certificate_factor": self.certificate_factor, "time_ratio": self.time_ratio,
                "time_floor": self.time_floor}


# --------------------------------------------------------------------------- check
@dataclasses.dataclass
class CaseReport:
    case: str
    model: str
    method: str
    verdict: str = PASS
    findings: list = dataclasses.field(default_factory=list)   # {severity, kind, message}
    metrics: dict = dataclasses.field(default_factory=dict)
    thresholds: dict = dataclasses.field(default_factory=dict)

    def add(self, severity: str, kind: str, message: str) -> None:
        self.findings.append({"severity": severity, "kind": kind, "message": message})
        if severity == "regression":
            self.verdict = REGRESSION

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


@dataclasses.dataclass
class CheckReport:
    baseline: str
    suite: str | None
    checked_utc: str
    environment_old: dict
    environment_new: dict
    environment_changes: list
    cases: list
    options_override: dict

    @property
    def regression(self) -> bool:
        return any(c.verdict == REGRESSION for c in self.cases)

    def counts(self) -> dict:
        out = {PASS: 0, ALTERNATIVE_DUALS: 0, REGRESSION: 0}
        for c in self.cases:
            out[c.verdict] = out.get(c.verdict, 0) + 1
        return out

    def to_dict(self) -> dict:
        return {
            "format": "decomp-baseline-check", "baseline": self.baseline, "suite": self.suite,
            "checked_utc": self.checked_utc, "regression": self.regression, "counts": self.counts(),
            "options_override": self.options_override,
            "environment_changes": [{"key": k, "old": o, "new": n} for k, o, n in self.environment_changes],
            "environment_old": self.environment_old, "environment_new": self.environment_new,
            "cases": [c.to_dict() for c in self.cases],
        }

    def to_markdown(self) -> str:
        lines = [f"# Baseline check: {self.baseline}", "",
                 f"Checked {self.checked_utc}; suite {self.suite or '(custom)'}; "
                 f"verdict: **{'REGRESSION' if self.regression else 'no regression'}** "
                 f"({', '.join(f'{v} {k}' for k, v in self.counts().items())}).", ""]
        if self.options_override:
            lines += [f"Options overridden for every case: `{json.dumps(self.options_override)}`", ""]
        lines += ["## Environment changes", ""]
        if self.environment_changes:
            lines += ["| key | recorded | now |", "|---|---|---|"]
            lines += [f"| {k} | {o} | {n} |" for k, o, n in self.environment_changes]
        else:
            lines.append("None.")
        lines += ["", "## Cases", "",
                  "| case | verdict | status | objective rel. change | largest bid-price change (leg) | "
                  "gap old -> new | seconds old -> new (ratio) |", "|---|---|---|---|---|---|---|"]
        for c in self.cases:
            m = c.metrics
            st = m.get("status_old", "?")
            if m.get("status_new") != m.get("status_old"):
                st = f"{m.get('status_old')} -> {m.get('status_new')}"
            bp = m.get("bid_max_abs_change")
            bp_s = "-" if bp is None else f"{bp:.3g} ({m.get('bid_max_abs_leg')}; rel {m.get('bid_max_rel_change'):.3g})"
            lines.append(f"| {c.case} | {c.verdict} | {st} | {_fmt(m.get('objective_rel_change'))} | {bp_s} | "
                         f"{_fmt(m.get('gap_old'))} -> {_fmt(m.get('gap_new'))} | {_fmt(m.get('time_old'))} -> "
                         f"{_fmt(m.get('time_new'))} ({_fmt(m.get('time_ratio'), '.2f')}) |")
        detailed = [c for c in self.cases if c.findings]
        if detailed:
            lines += ["", "## Findings", ""]
            for c in detailed:
                lines.append(f"### {c.case} ({c.verdict})")
                lines.append("")
                lines += [f"- **{f['severity']}** {f['kind']}: {f['message']}" for f in c.findings]
                lines.append("")
        return "\n".join(lines).rstrip() + "\n"


def _fmt(v, spec=".3g") -> str:
    if v is None:
        return "-"
    if isinstance(v, str):
        return v
    return format(v, spec)


def _rel(new, old) -> float | None:
    if new is None or old is None:
        return None
    new, old = float(new), float(old)
    if not (math.isfinite(new) and math.isfinite(old)):
        return math.inf if new != old else 0.0
    return abs(new - old) / max(1.0, abs(old))


def _legs_text(legs, limit=8) -> str:
    shown = ", ".join(str(l) for l in legs[:limit])
    return shown + (f" and {len(legs) - limit} more" if len(legs) > limit else "")


def _options_for(rec: Mapping, override: Mapping | None) -> SolverOptions:
    d = dict(rec["options"])
    known = {f.name for f in dataclasses.fields(SolverOptions)}
    unknown = sorted(set(d) - known)
    if unknown:
        raise ConfigError(f"recorded options {unknown} are unknown to this decomp's SolverOptions")
    if override:
        bad = sorted(set(override) - known)
        if bad:
            raise ConfigError(f"options_override names unknown options {bad}; valid: {', '.join(sorted(known))}")
        d.update(override)
    return SolverOptions(**d)


def check(path, *, thresholds: Thresholds | None = None, options_override: Mapping | None = None,
          solve_fn: Callable | None = None, clock: Callable[[], float] = time.perf_counter, repeat: int = 1,
          warmup: bool = True, confirm_runs: int = 2, only: Sequence[str] | None = None,
          progress: Callable | None = None) -> CheckReport:
    """Re-solve every case of the baseline at ``path`` and compare with what was recorded.

    Test hooks: ``options_override`` (e.g. ``{"tol": 1e-3}``) changes the
    options of every case; ``solve_fn`` replaces :func:`decomp.registry.solve`
    (same keywords); ``clock`` replaces the timer; ``repeat`` and ``warmup`` as
    in :func:`record`; a case over the time ratio is timed ``confirm_runs``
    more times and judged on the best run. ``only`` restricts the check
    to the named case ids. ``progress(case_report)`` is called after each case.
    """
    base = load(path)
    thresholds = thresholds or Thresholds()
    solve_fn_given = solve_fn is not None
    solve_fn = solve_fn or _default_solve()
    override = dict(options_override or {})
    known = {f.name for f in dataclasses.fields(SolverOptions)}
    bad = sorted(set(override) - known)
    if bad:
        raise ConfigError(f"options_override names unknown options {bad}; valid: {', '.join(sorted(known))}")
    env_new = environment()
    reports = []
    wanted = None if only is None else set(only)
    if wanted is not None:
        missing = sorted(wanted - {r["case"] for r in base.cases})
        if missing:
            raise ConfigError(f"no case {missing} in baseline {base.path}")
    instances: dict = {}
    warm: set = set()
    todo = [rec for rec in base.cases if wanted is None or rec["case"] in wanted]
    # Availability first (as record's suites do): a missing solver is reported by name, and the
    # libraries are imported before any timed solve, as they were when the baseline was recorded.
    unavailable = {} if solve_fn_given else _unavailable_pairs({(r["model"], r["method"]) for r in todo})
    for rec in todo:
        rep = CaseReport(rec["case"], rec["model"], rec["method"])
        rep.thresholds = thresholds.for_case(rec["model"], float(rec["options"]["tol"]))
        if (rec["model"], rec["method"]) in unavailable:
            rep.add("regression", "unavailable", f"method {rec['method']!r} for model {rec['model']!r} is not "
                                                 f"available here: {unavailable[(rec['model'], rec['method'])]}")
            reports.append(rep)
            if progress is not None:
                progress(rep)
            continue
        try:
            _check_case(base, rec, rep, instances, override, solve_fn, clock, repeat, warm if warmup else None,
                        confirm_runs)
        except Exception as exc:  # noqa: BLE001 - a failing case is reported, the others still run
            log.debug("case %s failed", rec["case"], exc_info=True)
            rep.add("regression", "error", f"the check could not re-solve this case: {type(exc).__name__}: {exc}")
        reports.append(rep)
        if progress is not None:
            progress(rep)
    return CheckReport(
        baseline=str(base.path), suite=base.manifest.get("suite"),
        checked_utc=_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        environment_old=dict(base.environment), environment_new=env_new,
        environment_changes=environment_changes(base.environment, env_new), cases=reports,
        options_override=override)


def _unavailable_pairs(pairs) -> dict:
    """{(model, method): reason} for the pairs whose method is unknown or unavailable here."""
    from . import registry

    out = {}
    for model, method in sorted(pairs):
        try:
            ok, reason = registry.get_method(method, model).available()
        except DecompError as exc:
            ok, reason = False, str(exc)
        if not ok:
            out[(model, method)] = reason
    return out


def _check_case(base, rec, rep: CaseReport, instances, override, solve_fn, clock, repeat, warm,
                confirm_runs) -> None:
    th = rep.thresholds
    m = rep.metrics
    key = rec["instance_dir"]
    if key not in instances:
        instances[key] = _read_instance(base, rec)
    inst = instances[key]
    if instance_fingerprint(inst) != rec["instance_fingerprint"]:
        rep.add("regression", "instance",
                f"the instance in {key} reads back differently now (fingerprint changed): decomp.io or the "
                f"instance files changed, so the answers cannot be compared")
        return
    options = _options_for(rec, override)
    if options_dict(options) != rec["options"]:
        changed = {k: (rec["options"].get(k), v) for k, v in options_dict(options).items()
                   if rec["options"].get(k) != v}
        rep.add("note", "options", "solved with changed options: " +
                ", ".join(f"{k} {o!r} -> {n!r}" for k, (o, n) in changed.items()))
    result, wall = _timed_solve(solve_fn, clock, inst, rec["model"], rec["method"], options, repeat, warm)

    # status
    old_st = f"{rec['termination']}/{rec['solution_status']}"
    new_st = f"{result.termination.value}/{result.solution_status.value}"
    m["status_old"], m["status_new"] = old_st, new_st
    was_ok = rec["termination"] == "optimal" and rec["solution_status"] == "optimal"
    if new_st != old_st:
        if was_ok:
            rep.add("regression", "status", f"status {old_st} -> {new_st} ({result.message or result.raw_status})")
        else:
            rep.add("note", "status", f"status {old_st} -> {new_st}")

    # objective
    obj_old, obj_new = _unnum(rec["objective"]), _unnum(result.objective)
    m["objective_old"], m["objective_new"] = obj_old, obj_new
    m["objective_rel_change"] = rel = _rel(obj_new, obj_old)
    objective_same = rel is not None and rel <= th["objective_rtol"]
    if obj_old is not None and obj_new is None:
        rep.add("regression", "objective", "no objective returned now")
    elif rel is not None and not objective_same:
        rep.add("regression", "objective", f"objective {obj_old!r} -> {obj_new!r}: relative change {rel:.3g} "
                                           f"> {th['objective_rtol']:.3g}")

    # bid prices
    legs_old, pi_old = rec["bid_prices"]
    legs_now = [str(x) for x in np.asarray(result.leg_ids).tolist()]
    pi_new = None if result.bid_price_array is None else np.asarray(result.bid_price_array, dtype=np.float64)
    if legs_old and legs_now != legs_old:
        rep.add("regression", "bid_prices", "the legs of the bid-price vector changed (ids or order)")
    elif len(legs_old) and pi_new is None:
        rep.add("regression", "bid_prices", "no bid prices returned now")
    elif len(legs_old):
        diff = np.abs(pi_new - pi_old)
        diff = np.where(np.isfinite(diff), diff, np.inf)   # a NaN bid price has moved
        scale = max(1.0, float(np.max(np.abs(pi_old))) if len(pi_old) else 1.0)
        atol = th["bid_atol"] if th["bid_atol"] is not None else th["bid_rtol"] * scale
        limit = atol + th["bid_rtol"] * np.abs(pi_old)
        relc = diff / np.maximum(np.abs(pi_old), 1.0)     # relative to max(1 fare unit, |old|)
        i_abs = int(np.argmax(diff))
        i_rel = int(np.argmax(relc))
        m.update(bid_max_abs_change=float(diff[i_abs]), bid_max_abs_leg=legs_old[i_abs],
                 bid_max_rel_change=float(relc[i_rel]), bid_max_rel_leg=legs_old[i_rel], bid_atol_used=atol)
        moved = np.flatnonzero(diff > limit)
        order = moved[np.argsort(-diff[moved])]
        moved_legs = [legs_old[i] for i in order]
        m["bid_moved_legs"] = moved_legs
        if moved_legs:
            detail = (f"{len(moved_legs)} leg(s) beyond {th['bid_rtol']:.3g} rel + {atol:.3g} abs: "
                      f"{_legs_text(moved_legs)}; largest {legs_old[i_abs]} {float(pi_old[i_abs])!r} -> "
                      f"{float(pi_new[i_abs])!r}")
            if rec["model"] in LP_MODELS and objective_same:
                _alternative_duals(rep, inst, rec["model"], options.segments, pi_new, obj_old, th, moved_legs,
                                   detail)
            else:
                rep.add("regression", "bid_prices", "bid prices moved: " + detail)

    # certificate
    cert_old = rec.get("certificate") or {}
    cert_new = result.certificate.to_dict() if result.certificate is not None else {}
    for name, floor in (("gap", th["gap_floor"]), ("max_violation_rel", th["violation_floor"]),
                        ("kkt_residual", th["kkt_floor"])):
        o, n = _unnum(cert_old.get(name)), _unnum(cert_new.get(name))
        short = {"max_violation_rel": "violation", "kkt_residual": "kkt"}.get(name, name)
        m[f"{short}_old"], m[f"{short}_new"] = o, n
        if o is None and n is None:
            continue
        if n is None:
            rep.add("regression", "certificate", f"certificate {name} missing now (was {o:.3g})")
            continue
        o_abs = abs(o) if o is not None else 0.0
        if abs(n) > max(th["certificate_factor"] * o_abs, floor):
            rep.add("regression", "certificate", f"certificate {name} {_fmt(o)} -> {n:.3g} "
                                                 f"(limit max({th['certificate_factor']:g} x old, {floor:.3g}))")

    # allocation
    dig_old = rec.get("allocation") or {}
    dig_new = allocation_digest(result.allocation)
    m["allocation_digest_same"] = dig_old.get("sha256") == dig_new["sha256"]
    if not m["allocation_digest_same"] and dig_old.get("sha256") is not None:
        scale = max(1.0, abs(dig_old.get("max") or 0.0))
        changes = {k: (abs((dig_new[k] or 0.0) - (dig_old[k] or 0.0)) / (max(1.0, abs(dig_old[k] or 0.0))
                       if k == "sum" else scale)) for k in ("sum", "min", "max")}
        m["allocation_changes"] = changes
        worst = max(changes.values())
        text = (f"allocation digest changed (at {SIG_DIGITS} significant digits); relative change of "
                f"sum {changes['sum']:.3g}, min {changes['min']:.3g}, max {changes['max']:.3g}")
        if th["allocation_rtol"] is not None and worst > th["allocation_rtol"]:
            rep.add("regression", "allocation", text + f" > {th['allocation_rtol']:.3g}")
        else:
            rep.add("note", "allocation", text + (" (LP allocations may be non-unique)"
                                                  if th["allocation_rtol"] is None else " (within tolerance)"))

    # iterations and time
    m["iterations_old"], m["iterations_new"] = rec.get("iterations"), result.iterations
    if rec.get("iterations") != result.iterations:
        rep.add("note", "iterations", f"iterations {rec.get('iterations')} -> {result.iterations}")
    t_old, t_new = float(rec["wall_seconds"]), float(wall)
    floor = th["time_floor"]

    def ratio_of(t):
        return max(t, floor) / max(t_old, floor) if max(t_old, t, floor) > 0 else 1.0

    ratio = ratio_of(t_new)
    runs = max(1, int(repeat))
    if ratio > th["time_ratio"] and confirm_runs > 0:
        # A slow solve is timed again (best of all runs) before it counts: one slow run on a shared
        # machine is noise more often than not.
        _, again = _timed_solve(solve_fn, clock, inst, rec["model"], rec["method"], options, confirm_runs)
        t_new, runs = min(t_new, again), runs + confirm_runs
        ratio = ratio_of(t_new)
    m.update(time_old=t_old, time_new=t_new, time_ratio=ratio, time_runs=runs)
    if ratio > th["time_ratio"]:
        rep.add("regression", "time", f"wall time {t_old:.3g} s -> {t_new:.3g} s (best of {runs} runs): ratio "
                                      f"{ratio:.2f} > {th['time_ratio']:g} (times below {floor:g} s count as "
                                      f"{floor:g} s)")


def _alternative_duals(rep, inst, model, segments, pi_new, obj_old, th, moved_legs, detail) -> None:
    """An LP (DLP, PWL) with the same objective and moved bid prices: optimal duals again, or a regression."""
    m = rep.metrics
    scale = max(1.0, abs(obj_old))
    min_pi = float(pi_new.min()) if len(pi_new) else 0.0
    dual_obj = lp_dual_objective(inst, model, np.maximum(pi_new, 0.0), segments)
    dual_gap = (dual_obj - obj_old) / scale
    m.update(alt_dual_objective=dual_obj, alt_dual_rel_gap=dual_gap, alt_min_bid_price=min_pi)
    feasible = min_pi >= -th["bid_rtol"] * max(1.0, float(np.max(np.abs(pi_new))))
    optimal = abs(dual_gap) <= th["objective_rtol"]
    if feasible and optimal:
        rep.add("note", "alternative_duals",
                f"objective unchanged, bid prices moved but remain optimal duals (pi >= 0; LP dual objective "
                f"{dual_obj!r} equals the recorded optimum {obj_old!r} within {th['objective_rtol']:.3g}, "
                f"relative difference {dual_gap:.3g}): {detail}")
        if rep.verdict == PASS:
            rep.verdict = ALTERNATIVE_DUALS
    else:
        why = []
        if not feasible:
            why.append(f"a bid price is negative ({min_pi:.3g})")
        if not optimal:
            why.append(f"LP dual objective {dual_obj!r} differs from the recorded optimum {obj_old!r} "
                       f"(relative {dual_gap:.3g} > {th['objective_rtol']:.3g})")
        rep.add("regression", "bid_prices", "bid prices moved and are not optimal duals (" + "; ".join(why)
                + "): " + detail)


def write_report(report: CheckReport, out) -> tuple:
    """Write ``check.json`` and ``check.md`` into folder ``out`` atomically; returns their paths."""
    out = pathlib.Path(out)
    jpath, mpath = out / "check.json", out / "check.md"
    atomic.write_text(jpath, json.dumps(_clean(report.to_dict()), indent=2, default=_json_default,
                                        allow_nan=False) + "\n")
    atomic.write_text(mpath, report.to_markdown())
    return jpath, mpath


def _clean(v):
    """Non-finite floats as strings, so the JSON report is strict JSON."""
    if isinstance(v, float):
        return v if math.isfinite(v) else str(v)
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    return v


def _json_default(v):
    if isinstance(v, (np.floating, np.integer)):
        return v.item()
    if isinstance(v, np.ndarray):
        return v.tolist()
    raise TypeError(f"not JSON serializable: {type(v).__name__}")
