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
from ..errors import ConfigError, OutputPathError, SolverUnavailableError
from ..instance import Instance
from ..options import SolverOptions
from ..paths import output_folder, refusing, write_marker
from .cases import Case, _safe_name, _unavailable_pairs, suite_cases
from .digests import allocation_digest, instance_fingerprint
from .environment import environment
from .folder import BID_PRICES, ENVIRONMENT, FORMAT, MANIFEST, SUMMARY, _bid_prices_csv, _write_manifest, case_view
from .replay import check_replayable

log = logging.getLogger(__name__)

# --------------------------------------------------------------------------- record
def _timed_solve(solve_fn, clock, instance, case_model, case_method, options, repeat, warm=None):
    """(result, best wall seconds, best ``clock`` seconds) of ``repeat`` runs.

    ``clock`` is the timer time regressions are judged on: CPU time of this process
    (:func:`time.process_time`, every thread) by default, which a busy machine disturbs far less
    than wall time. ``warm``: a set of (model, method) pairs already solved in this process; a pair
    not in it is first solved once untimed, so that library imports and first-call set-up are not
    counted (the pair is then added)."""
    if warm is not None and (case_model, case_method) not in warm:
        solve_fn(instance, model=case_model, method=case_method, options=options)
        warm.add((case_model, case_method))
    best_wall, best, result = math.inf, math.inf, None
    for _ in range(max(1, int(repeat))):
        w0, t0 = time.perf_counter(), clock()
        result = solve_fn(instance, model=case_model, method=case_method, options=options)
        best, best_wall = min(best, clock() - t0), min(best_wall, time.perf_counter() - w0)
    return result, best_wall, best


def _default_solve():
    from .. import registry

    return registry.solve


def options_dict(options: SolverOptions) -> dict:
    """The options as a plain dict (:meth:`SolverOptions.to_dict`: solver_options copied to a dict)."""
    return options.to_dict()


def _result_record(case: Case, result, wall: float, fingerprint: str, options: SolverOptions,
                   instance_dir: str, cpu: float | None = None) -> dict:
    """A case's result.json: the result in the one output schema, the case's own facts under ``context``
    (``solver_options``: the options a check replays; see :func:`.folder.case_view`)."""
    return result.to_json_dict(include_history=False, context={
        "case": case.id,
        "instance": case.instance_name,
        "instance_fingerprint": fingerprint,
        "instance_dir": instance_dir,
        "wall_seconds": float(wall),
        "cpu_seconds": None if cpu is None else float(cpu),
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
           solve_fn: Callable | None = None, clock: Callable[[], float] = time.process_time,
           repeat: int = 1, warmup: bool = True, overwrite: bool = False,
           progress: Callable | None = None) -> RecordSummary:
    """Solve every case of ``suite`` (or the given ``cases``) and write a baseline folder at ``out``.

    ``solve_fn(instance, model=, method=, options=)`` defaults to
    :func:`decomp.registry.solve`; ``clock`` times each solve for the regression check (CPU time by
    default; wall time is recorded beside it; the best of ``repeat`` runs; with ``warmup`` the first
    case of each (model, method) is solved once untimed before it is timed). The folder is built in
    a temporary sibling and renamed into place, with decomp's marker (:mod:`decomp.paths`); an
    existing ``out`` is replaced only with ``overwrite``, and only when it is a baseline decomp wrote
    (its marker, or the manifest of a baseline recorded before markers): anything else, a file or a
    device above all, is an :class:`~decomp.errors.OutputPathError` naming it.
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
    check_out(out, overwrite)
    if int(repeat) < 1:
        raise ConfigError(f"repeat must be at least 1, got {repeat!r}")
    if solve_fn is None:
        missing = _unavailable_pairs({(c.model, c.method) for c in cases})
        if missing:
            raise SolverUnavailableError("cannot record: " + "; ".join(
                f"{model}/{method}: {reason}" for (model, method), reason in missing.items()))
    solve_fn = solve_fn or _default_solve()
    env = environment()
    with refusing(out):
        out.parent.mkdir(parents=True, exist_ok=True)
        tmp = pathlib.Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".tmp", dir=out.parent))
    try:
        with refusing(out, outermost=True):        # a refused write names --out, not the folder being built
            records = _record_cases(tmp, cases, solve_fn, clock, repeat, warmup, progress)
            atomic.write_json(tmp / ENVIRONMENT, env)
            atomic.write_text(tmp / SUMMARY, _summary_csv(records))
            _write_manifest(tmp, suite, [r["case"] for r in records])
            write_marker(tmp, "baseline")
            if out.exists():
                check_out(out, overwrite)          # again: the folder may have changed while we solved
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


def _record_cases(tmp, cases, solve_fn, clock, repeat, warmup, progress) -> list:
    """Solve and write every case into the folder ``tmp``; returns the case records."""
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
        result, wall, cpu = _timed_solve(solve_fn, clock, inst, case.model, case.method, case.options, repeat,
                                         warm if warmup else None)
        data = _result_record(case, result, wall, fp, case.options, f"instances/{name}", cpu)
        cdir = tmp / "cases" / case.id
        atomic.write_json(cdir / "result.json", data)
        atomic.write_text(cdir / BID_PRICES, _bid_prices_csv(result.leg_ids, result.bid_price_array))
        rec = case_view(data)
        records.append(rec)
        if progress is not None:
            progress(case.id, rec)
    return records


def check_out(out, overwrite: bool) -> pathlib.Path:
    """``out`` as a baseline folder to create: new, or (with ``overwrite``) a baseline decomp wrote."""
    if not overwrite:
        out = output_folder(out, "--out")          # a file, a device, a path under a file: refused as such
        if out.exists():
            raise OutputPathError("already exists; choose another folder, or pass --force to replace a "
                                  "baseline decomp recorded there", path=out, option="--out")
        return out
    return output_folder(out, "--out", replace="baseline", legacy=_legacy_baseline)


def _legacy_baseline(path: pathlib.Path) -> bool:
    """A baseline recorded before markers: a folder whose manifest.json names the baseline format."""
    import json

    m = path / MANIFEST
    try:
        return (not m.is_symlink() and m.is_file() and m.stat().st_size < 50_000_000
                and json.loads(m.read_text(encoding="utf-8")).get("format") == FORMAT)
    except (OSError, ValueError, AttributeError):
        return False


def _summary_csv(records) -> str:
    buf = _io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["case", "instance", "model", "method", "tol", "termination", "solution_status", "objective",
                "gap", "iterations", "wall_seconds", "cpu_seconds"])
    for r in records:
        w.writerow([r["case"], r["instance"], r["model"], r["method"], r["options"]["tol"], r["termination"],
                    r["solution_status"], r["objective"], (r["certificate"] or {}).get("gap"), r["iterations"],
                    f"{r['wall_seconds']:.4f}", "" if r.get("cpu_seconds") is None else f"{r['cpu_seconds']:.4f}"])
    return buf.getvalue()
