"""``record``: solve every case of a suite and write a baseline folder (built aside, renamed into place)."""

from __future__ import annotations

import csv
import dataclasses
import io as _io
import logging
import math
import os
import pathlib
import shutil
import tempfile
import time
from typing import Callable, Mapping, Sequence

from .. import atomic
from ..errors import ConfigError, SolverUnavailableError
from ..instance import Instance
from ..options import SolverOptions
from .cases import Case, _safe_name, _unavailable_pairs, suite_cases
from .digests import allocation_digest, instance_fingerprint
from .environment import environment
from .folder import BID_PRICES, ENVIRONMENT, SUMMARY, _bid_prices_csv, _write_manifest, case_view
from .replay import check_replayable

log = logging.getLogger(__name__)

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
    from .. import registry

    return registry.solve


def options_dict(options: SolverOptions) -> dict:
    """The options as a plain dict (:meth:`SolverOptions.to_dict`: solver_options copied to a dict)."""
    return options.to_dict()


def _result_record(case: Case, result, wall: float, fingerprint: str, options: SolverOptions,
                   instance_dir: str) -> dict:
    """A case's result.json: the result in the one output schema, the case's own facts under ``context``
    (``solver_options``: the options a check replays; see :func:`.folder.case_view`)."""
    return result.to_json_dict(include_history=False, context={
        "case": case.id,
        "instance": case.instance_name,
        "instance_fingerprint": fingerprint,
        "instance_dir": instance_dir,
        "wall_seconds": float(wall),
        "allocation_digest": allocation_digest(result.allocation),
        "bid_prices_file": BID_PRICES,
        "solver_options": options_dict(options),
    })


def _write_instance(inst: Instance, folder: pathlib.Path) -> Instance:
    """Write with decomp.io and read back (the baseline's cases solve what was written)."""
    from .. import io as dio

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
    cases: tuple           # case records (:func:`.folder.case_view` of each result.json written)
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
    for case in cases:      # what the check replays: refuse now what it would refuse then
        check_replayable(options_dict(case.options))
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
            data = _result_record(case, result, wall, fp, case.options, f"instances/{name}")
            cdir = tmp / "cases" / case.id
            atomic.write_json(cdir / "result.json", data)
            atomic.write_text(cdir / BID_PRICES, _bid_prices_csv(result.leg_ids, result.bid_price_array))
            rec = case_view(data)
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
