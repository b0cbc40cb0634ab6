"""The production run on Dask: one task per instance, atomic output, verified resume.

Output layout under ``out``::

    .lock                          held by the run writing here (:mod:`.lock`)
    run.json                       the arguments of the latest invocation
    tasks/<key>/...                bid_prices.parquet (leg, bid_price), result.json (the one result
                                   schema, the task record under ``context``), error.json (:mod:`.outputs`)
    summary.json, summary.md       the end-of-run summary (see :mod:`.summary`)

A rerun with the same arguments skips a task only once :func:`.outputs.read_finished`
has verified it (same fingerprint -- model, method, options, task source and the
content of its instance files, warm-start folder --, task status ``ok``, the bid-price
file matching the checksum in ``result.json``, one finite bid price >= 0 per leg);
every other task is solved again from the same inputs, so the results are identical
(the solves are deterministic). A task that ended non-optimal is solved again too.

Fallback: a task whose method ends non-optimal is solved again by a robust method
(:mod:`.fallback`); the record says which method produced the published bid prices.
The fallback setting is not part of the fingerprint: an ``ok`` task is ok whichever
method produced it.

Warm starts: ``warm_start_from`` is an earlier run's ``out`` folder; a task
starts from the bid prices of the same task key there when present (legs
matched by id, legs missing there start at 0, values clamped to [0, largest fare
on the leg] by ``decomp.solve``, their count recorded), and cold otherwise.

A task raising a :class:`~decomp.errors.DecompError` (bad instance, missing
solver) fails at once: retrying cannot help. So does a task that cannot write
its output because the folder is full, read-only or not permitted
(:data:`.outputs.OUTPUT_ERRNOS`): the run then stops submitting, says so once,
keeps every finished task and writes what summary it can. Any other exception,
and a worker that dies, makes Dask retry the task (``retries``) or reschedule
it; a task that still fails is reported with its error and never hides the
others.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import json
import logging
import os
import pathlib
import socket
import time
import traceback
import uuid

import numpy as np

from .. import atomic
from ..warmstart import bounded_warm_start
from ..errors import DecompError
from . import fallback as fallback_mod
from . import signals
from .batch import Batch, TaskSpec
from .lock import OutputLock
from .outputs import (BID_FILE, ERROR_FILE, RESULT_FILE, is_output_error, read_bid_prices, read_finished,  # noqa: F401
                      task_dir, write_bid_prices)

log = logging.getLogger(__name__)

#: Task statuses (``task_status`` of a record) that count as finished (a not_optimal task is
#: solved again on a rerun).
FINISHED = ("ok",)


class OutputFolderError(DecompError):
    """The output folder cannot be written (full, read-only, no permission)."""


@dataclasses.dataclass(frozen=True)
class RunConfig:
    """What every task of a run shares (shipped to the workers with each task)."""

    model: str
    method: str
    options: object            # SolverOptions
    out: str
    warm_start_from: str | None = None
    fallback: str | None = fallback_mod.AUTO     # auto, none, METHOD or lagrangian:DUAL (see .fallback)

    def __post_init__(self):
        fallback_mod.parse(self.fallback)          # a bad name fails here, before anything starts
        object.__setattr__(self, "out", str(pathlib.Path(self.out).resolve()))
        if self.warm_start_from is not None:
            object.__setattr__(self, "warm_start_from", str(pathlib.Path(self.warm_start_from).resolve()))

    def to_dict(self) -> dict:
        return {"model": self.model, "method": self.method, "options": self.options.to_dict(),
                "out": self.out, "warm_start_from": self.warm_start_from, "fallback": self.fallback}

    def __reduce__(self):
        # SolverOptions holds a mappingproxy, which does not pickle: ship its dict.
        return (_make_config, (self.model, self.method, self.options.to_dict(), self.out, self.warm_start_from,
                               self.fallback))

    def fingerprint(self, spec: TaskSpec) -> str:
        ident = {"model": self.model, "method": self.method, "options": self.options.to_dict(),
                 "task": spec.to_dict(), "warm_start_from": self.warm_start_from}
        text = json.dumps(ident, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:20]


def _make_config(model, method, options, out, warm_start_from, fallback=fallback_mod.AUTO) -> RunConfig:
    from ..options import SolverOptions

    return RunConfig(model=model, method=method, options=SolverOptions(**options), out=out,
                     warm_start_from=warm_start_from, fallback=fallback)


def _warm_start(cfg: RunConfig, key: str, inst):
    """(array aligned with leg_ids or None, info dict) from the earlier run's output."""
    if cfg.warm_start_from is None:
        return None, {"from": None}
    path = task_dir(cfg.warm_start_from, key) / BID_FILE
    if not path.is_file():
        return None, {"from": None, "reason": f"no {BID_FILE} for task {key} in {cfg.warm_start_from}"}
    prices = read_bid_prices(path)
    values = np.array([prices.get(str(leg), np.nan) for leg in inst.leg_ids], dtype=np.float64)
    matched = int(np.count_nonzero(np.isfinite(values)))
    if matched == 0:
        return None, {"from": str(path), "legs_matched": 0, "reason": "no leg ids in common"}
    values = np.where(np.isfinite(values), values, 0.0)
    info = {"from": str(path), "legs_matched": matched}
    _, clamped = bounded_warm_start(inst, values)   # counted for the record; decomp.solve applies it
    if clamped:
        info["clamped"] = clamped       # values outside [0, largest fare on the leg]
    return values, info


# -- the task (runs on a worker) -----------------------------------------------------

def _num(v):
    if v is None:
        return None
    v = float(v)
    return v if np.isfinite(v) else str(v)


#: glibc mallopt parameters (malloc.h) and the values set on workers.
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
_MMAP_THRESHOLD = 32 * 2 ** 20      # glibc's largest dynamic threshold on 64-bit
_TRIM_THRESHOLD = 64 * 2 ** 20


def tune_allocator() -> bool:
    """Let glibc keep freed numpy buffers for reuse on this worker process.

    Dask's nanny starts workers with MALLOC_TRIM_THRESHOLD_=65536, which also
    switches off glibc's dynamic mmap threshold: every array above 128 KiB is
    then mapped and unmapped afresh, paying its page faults each time, and the
    Lagrangian loop allocates tens of such temporaries per iteration. This call
    restores thresholds large enough to keep them. Returns whether mallopt took
    both values (False where there is no glibc)."""
    if "MALLOC_TRIM_THRESHOLD_" not in os.environ:
        return True                  # glibc's own adaptive thresholds are in force
    try:
        import ctypes

        libc = ctypes.CDLL("libc.so.6")
        return bool(libc.mallopt(_M_MMAP_THRESHOLD, _MMAP_THRESHOLD)) and \
            bool(libc.mallopt(_M_TRIM_THRESHOLD, _TRIM_THRESHOLD))
    except (OSError, AttributeError):
        return False


def prepare_worker(model: str, method: str) -> bool:
    """Import what the tasks need (numpy, scipy, pyarrow, the method) once per worker,
    before timing starts, and tune its allocator (:func:`tune_allocator`)."""
    tune_allocator()
    import pyarrow.parquet  # noqa: F401

    from .. import generator, io  # noqa: F401
    from ..registry import get_method

    get_method(method, model).available()
    return True


def run_task(spec: TaskSpec, cfg: RunConfig, fingerprint: str) -> dict:
    """Build, solve (falling back when the method ends non-optimal) and write one task; return its
    (small) record.

    Only the record travels back to the client; the instance and the result
    are dropped when this returns. A full, read-only or forbidden output folder
    gives a failed record with ``output_error`` set (not an exception: a retry
    would meet the same folder).
    """
    from ..registry import solve

    t0 = time.perf_counter()
    base = {"key": spec.key, "host": socket.gethostname(), "pid": os.getpid(), "fingerprint": fingerprint}
    try:
        inst = spec.load()
    except DecompError as exc:      # bad input: a retry cannot help
        return {**base, "task_status": "failed", "error": f"{type(exc).__name__}: {exc}",
                "seconds": {"total": time.perf_counter() - t0}}
    t1 = time.perf_counter()
    try:
        warm, warm_info = _warm_start(cfg, spec.key, inst)
    except Exception as exc:        # an unreadable earlier output only costs the warm start
        warm, warm_info = None, {"from": None, "reason": f"unreadable: {type(exc).__name__}: {exc}"}
    try:
        result, published_by, attempts = fallback_mod.solve_with_fallback(
            inst, cfg.model, cfg.method, cfg.options, warm, fallback_mod.parse(cfg.fallback), solve)
    except DecompError as exc:
        return {**base, "task_status": "failed", "error": f"{type(exc).__name__}: {exc}",
                "seconds": {"load": t1 - t0, "total": time.perf_counter() - t0}}
    t2 = time.perf_counter()
    record = {
        **base,
        "task_status": "ok" if result.ok else "not_optimal",
        "method": published_by,
        "fallback_used": published_by != attempts[0]["method"],
        "attempts": attempts,
        "termination": result.termination.value,
        "solution_status": result.solution_status.value,
        "objective": _num(result.objective),
        "bound": _num(result.bound),
        "gap": _num(result.gap),
        "iterations": result.iterations,
        "n_products": int(inst.n_products),
        "n_legs": int(inst.n_legs),
        "closed_legs": int(np.count_nonzero(inst.capacity == 0)),   # bid price not unique there (README, Closed legs)
        "warm_start": warm_info,
        "error": None if result.ok else (result.message or result.termination.value),
        "seconds": {"load": t1 - t0, "solve": t2 - t1,
                    "solver": {k: float(v) for k, v in result.seconds.items()}},
        "worker_peak_rss_mib": worker_peak_rss_mib(),
    }
    del inst
    try:
        _write_task(cfg.out, spec, fingerprint, record, result, t0, t2)
    except OSError as exc:
        if not is_output_error(exc):
            raise                   # anything else: Dask retries the task
        return {**base, "task_status": "failed", "output_error": True,
                "error": f"cannot write the task's output in {cfg.out}: {exc.strerror or exc} "
                         f"[Errno {exc.errno}]",
                "seconds": {"load": t1 - t0, "solve": t2 - t1, "total": time.perf_counter() - t0}}
    return record


def worker_peak_rss_mib() -> float | None:
    """The peak resident set of this process since it started, in MiB (getrusage's
    ru_maxrss, KiB on Linux): in a worker, what it needed for its largest task so far."""
    try:
        import resource
    except ImportError:                       # not on every platform
        return None
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _write_task(out, spec, fingerprint, record, result, t0, t2) -> None:
    """bid_prices.parquet, then result.json (last: its presence and checksum mark the task finished).

    result.json is the result in the one output schema; the fingerprint, the task and its record
    (with the checksum of bid_prices.parquet) go under ``context``."""
    d = task_dir(out, spec.key)
    record["bid_prices_sha256"] = write_bid_prices(d / BID_FILE, result.leg_ids, result.bid_price_array)
    payload = result.to_json_dict(include_history=True, context={
        "fingerprint": fingerprint, "task": spec.to_dict(), "record": record})
    record["seconds"]["write"] = time.perf_counter() - t2
    record["seconds"]["total"] = time.perf_counter() - t0
    atomic.write_json(d / RESULT_FILE, json.loads(json.dumps(payload, default=str)))
    try:
        os.unlink(d / ERROR_FILE)
    except FileNotFoundError:
        pass


# -- the client side ----------------------------------------------------------------

@dataclasses.dataclass
class Progress:
    """What the client knows while the run goes; passed to ``on_event``."""

    total: int            # tasks in the batch
    skipped: int          # finished earlier, not rerun
    todo: int             # submitted in this invocation
    done: int = 0         # of todo, finished (ok or not optimal)
    failed: int = 0       # of todo, failed
    started: float = 0.0  # perf_counter when the first task was submitted

    @property
    def completed(self) -> int:
        return self.done + self.failed

    def elapsed(self) -> float:
        return time.perf_counter() - self.started

    def projected_seconds(self) -> float | None:
        """Projected wall time of this invocation from the rate so far."""
        if self.completed == 0:
            return None
        return self.elapsed() / self.completed * self.todo


def _remove_stale_temporaries(d: pathlib.Path) -> None:
    """Temporary files a killed worker left behind (atomic writes never finished); none are in use now."""
    if d.is_dir():
        for tmp in d.glob(".*.tmp"):
            try:
                tmp.unlink()
            except FileNotFoundError:
                pass


def _failure_record(spec, fingerprint, exc, tb) -> dict:
    text = "".join(traceback.format_exception_only(type(exc), exc)).strip()
    tail = "".join(traceback.format_tb(tb)[-3:]) if tb is not None else ""
    return {"key": spec.key, "task_status": "failed", "fingerprint": fingerprint, "error": text,
            "traceback": tail, "seconds": {}}


#: HTTP routes of the embedded cluster without a dashboard: a health check only (Dask always starts
#: an HTTP server; its default routes serve scheduler and worker details and metrics).
_HEALTH_ONLY = ["distributed.http.health"]


def start_cluster(workers: int | None = None, dashboard: int | None = None):
    """An embedded LocalCluster: one single-threaded worker process per core, on the loopback address,
    speaking TLS with credentials made for this run only.

    The scheduler and workers listen on 127.0.0.1 only, and every connection needs the run's
    certificate: :meth:`distributed.security.Security.temporary` makes a key and a self-signed
    certificate in memory (never written to disk), handed to the workers by the cluster, so no
    other local user can connect and run code on the workers (a plain ``tcp://`` client is refused).
    Dask's HTTP servers (the dashboard, which serves scheduler and worker details to anyone who
    can reach it) serve only ``/health`` unless ``dashboard`` gives a port (0: any free port);
    then the dashboard is served, on 127.0.0.1 only. The workers ignore SIGINT: a Ctrl-C at the
    terminal reaches the whole process group, and only the client decides what it means
    (:mod:`.signals`); the cluster is closed by the client.
    """
    import dask
    from distributed import Client, LocalCluster
    from distributed.security import Security

    n = int(workers or os.cpu_count() or 1)
    if n < 1:
        raise ValueError(f"workers must be at least 1, got {workers!r}")
    routes = {} if dashboard is not None else {"distributed.scheduler.http.routes": _HEALTH_ONLY,
                                                "distributed.worker.http.routes": _HEALTH_ONLY}
    with dask.config.set(routes), workers_ignore_sigint():
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                               dashboard_address=f"127.0.0.1:{int(dashboard or 0)}",
                               scheduler_kwargs={"dashboard": dashboard is not None},
                               security=Security.temporary(), silence_logs=logging.ERROR)
    from .workerplugin import IgnoreSigint

    client = Client(cluster)
    client.register_plugin(IgnoreSigint(), name="decomp-ignore-sigint")    # workers restarted later too
    return cluster, client


@contextlib.contextmanager
def workers_ignore_sigint():
    """SIGINT ignored while the worker processes are started (they inherit it, and Python keeps an
    ignored SIGINT ignored), so a Ctrl-C that reaches the whole process group stops the client only."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def _prepare_output(out: pathlib.Path, cfg: RunConfig, batch: Batch, retries, window) -> None:
    """Create the folder and write run.json; an unwritable folder is an OutputFolderError (said once)."""
    try:
        out.mkdir(parents=True, exist_ok=True)
        atomic.write_json(out / "run.json", {"config": cfg.to_dict(), "batch": batch.to_dict(),
                                             "retries": retries, "window_seconds": window})
    except OSError as exc:
        raise OutputFolderError(f"cannot write to the output folder {out}: {exc.strerror or exc} "
                                f"[Errno {exc.errno}]; nothing was run") from exc


def run_batch(batch: Batch, cfg: RunConfig, *, client=None, scheduler: str | None = None,
              workers: int | None = None, retries: int = 2, window: float | None = None,
              on_event=None, dashboard: int | None = None) -> dict:
    """Run every unfinished task of ``batch``; write and return the summary dict.

    ``client``: a connected :class:`distributed.Client` to use; else
    ``scheduler`` (an address) is connected to; else an embedded LocalCluster
    with ``workers`` processes (default: one per core; ``dashboard`` as in
    :func:`start_cluster`) is started and closed.
    ``on_event(kind, record, progress)`` is called with kind ``"start"``
    (record None), ``"done"`` or ``"failed"`` as tasks complete. A
    KeyboardInterrupt (SIGTERM too, see :mod:`.signals`), or any exception from
    ``on_event``, cancels what is not finished, writes the summary of what is,
    and is raised again. The output folder is locked for the whole call
    (:class:`.lock.RunLockedError` when another run holds it). When the folder
    fills up or turns read-only, the run stops, keeps what is finished, and the
    summary (if it can still be written; else ``summary_error`` in the returned
    dict) says why in ``stopped``.
    """
    from ..registry import get_method

    get_method(cfg.method, cfg.model)           # unknown names fail before anything starts
    fb = fallback_mod.parse(cfg.fallback)
    if isinstance(fb, fallback_mod.Fallback):
        get_method(fb.method, cfg.model)
    out = pathlib.Path(cfg.out)
    try:
        out.mkdir(parents=True, exist_ok=True)
        lock = OutputLock(out)
        lock.__enter__()
    except OSError as exc:
        raise OutputFolderError(f"cannot write to the output folder {out}: {exc.strerror or exc} "
                                f"[Errno {exc.errno}]; nothing was run") from exc
    try:
        return _run_locked(batch, cfg, out, client, scheduler, workers, retries, window, on_event, dashboard)
    finally:
        lock.__exit__(None, None, None)


def _run_locked(batch, cfg, out, client, scheduler, workers, retries, window, on_event, dashboard) -> dict:
    """The run, the output folder locked: resume what is verified finished, solve the rest on the
    cluster, then (signals held) close what was started here and write the summary."""
    from . import summary as summary_mod

    _prepare_output(out, cfg, batch, retries, window)
    fps = {spec.key: cfg.fingerprint(spec) for spec in batch.tasks}
    records, todo, redo = _resume(batch, out, fps)
    progress = Progress(total=len(batch), skipped=len(records), todo=len(todo))
    t_start = time.perf_counter()
    own_cluster = own_client = None
    cluster_seconds = 0.0
    interrupted = None
    stopped = None
    n_workers = None
    try:
        if todo:
            if client is None:
                own_cluster, client = _connect(scheduler, workers, dashboard)
                own_client = client
            client.run(prepare_worker, cfg.model, cfg.method)
            cluster_seconds = time.perf_counter() - t_start
            n_workers = len(client.scheduler_info().get("workers", {})) or None
            progress.started = time.perf_counter()
            if on_event is not None:
                on_event("start", None, progress)
            futures, by_key = _submit(client, todo, cfg, fps, retries)
            stopped = _collect(futures, by_key, fps, records, progress, out, on_event)
    except BaseException as exc:
        interrupted = exc
    # From here on a SIGINT or SIGTERM is held, not raised: closing the cluster and writing the
    # summary finish whatever arrives.
    with signals.deferred() as late:
        wall = time.perf_counter() - t_start
        if own_client is not None:
            own_client.close()
        if own_cluster is not None:
            own_cluster.close()
        if stopped is not None or interrupted is not None:   # tasks that ended meanwhile count as what they are
            for spec in todo:
                if spec.key not in records:
                    rec = read_finished(out, spec, fps[spec.key])
                    if rec is not None:
                        records[spec.key] = {**rec, "skipped": False}
        for key, why in redo.items():
            if key in records:
                records[key]["redone"] = why
        reason, after_last, interrupted = _how_it_ended(interrupted, late, records, batch)
        summ = summary_mod.build_summary(batch, cfg, records, wall_seconds=wall, cluster_seconds=cluster_seconds,
                                         workers=n_workers or workers, window=window, interrupted=reason,
                                         stopped=stopped, signal_after_last_task=after_last,
                                         earlier=summary_mod.read_summary(out))
        failed = summary_mod.write_summary(out, summ)
        if late and interrupted is None and summ["signal_after_last_task"] is None:   # one came while writing
            summ["signal_after_last_task"] = late.first
            failed = summary_mod.write_summary(out, summ)
        if failed:
            summ["summary_error"] = f"not written to {out}: " + "; ".join(
                f"{name} ({exc.strerror or exc} [Errno {exc.errno}])" for name, exc in failed)
            log.error(summ["summary_error"])
    if interrupted is not None:
        raise interrupted
    return summ


def _resume(batch, out, fps) -> tuple:
    """(records of the tasks verified finished, the tasks to solve, {key: why a finished-looking
    task is solved again}); the temporaries of the tasks to solve are removed."""
    records, todo, redo = {}, [], {}
    for spec in batch.tasks:
        rec = read_finished(out, spec, fps[spec.key], redo)
        if rec is None:
            todo.append(spec)
            _remove_stale_temporaries(task_dir(out, spec.key))
        else:
            records[spec.key] = {**rec, "skipped": True}
    for key, why in redo.items():
        log.info("task %s is solved again: %s", key, why)
    return records, todo, redo


def _connect(scheduler, workers, dashboard) -> tuple:
    """(cluster started here or None, client): a running scheduler's, or the embedded cluster's."""
    if scheduler is not None:
        from distributed import Client

        return None, Client(scheduler)
    return start_cluster(workers, dashboard)


def _submit(client, todo, cfg, fps, retries) -> tuple:
    """(futures, {future key: task}) of the tasks, the first ones first. Dask keys are unique per
    invocation, so a rerun on the same cluster never meets the cancelled futures of an interrupted
    one; the results do not depend on them."""
    by_key, futures = {}, []
    nonce = uuid.uuid4().hex[:8]
    for rank, spec in enumerate(todo):
        fut = client.submit(run_task, spec, cfg, fps[spec.key], key=f"decomp-task-{spec.key}-{nonce}",
                            retries=retries, pure=False, priority=len(todo) - rank)
        by_key[fut.key] = spec
        futures.append(fut)
    return futures, by_key


def _how_it_ended(interrupted, late, records, batch) -> tuple:
    """(the interruption to report or None, the signal that came after the last task or None, the
    exception still to raise or None). A Ctrl-C once every task had finished cut nothing short: it
    is reported as arriving after the last task, and the run ends normally."""
    reason = None
    if interrupted is not None:
        reason = "SIGTERM" if type(interrupted).__name__ == "Terminated" else type(interrupted).__name__
    after_last = None
    if isinstance(interrupted, KeyboardInterrupt) and all(spec.key in records for spec in batch.tasks):
        after_last, reason, interrupted = ("SIGINT" if reason == "KeyboardInterrupt" else reason), None, None
    if late and interrupted is None:
        after_last = after_last or late.first
    return reason, after_last, interrupted


def _collect(futures, by_key, fps, records, progress, out, on_event):
    """Gather the tasks as they finish; returns why the run stopped early (output folder), or None."""
    from distributed import as_completed

    pending = {f.key: f for f in futures}
    stopped = None
    try:
        for fut in as_completed(futures):
            spec = by_key[fut.key]
            if fut.status == "finished":
                rec = fut.result()
            else:
                try:
                    exc, tb = fut.exception(), fut.traceback()
                except Exception as err:   # cancelled or lost
                    exc, tb = err, None
                rec = _failure_record(spec, fps[spec.key], exc, tb)
            pending.pop(fut.key, None)
            fut.release()
            rec["skipped"] = False
            records[spec.key] = rec
            if rec["task_status"] == "failed":
                progress.failed += 1
                if rec.get("output_error"):
                    # the folder is full or read-only: every other task would fail the same way, so stop
                    # (the finally below cancels what is pending; those tasks are reported as not run)
                    stopped = rec["error"]
                    log.error("stopping the run: %s", stopped)
                    if on_event is not None:
                        on_event("failed", rec, progress)
                    break
                else:
                    _write_error(out, spec.key, rec)
                    log.warning("task %s failed: %s", spec.key, rec.get("error"))
            else:
                progress.done += 1
            if on_event is not None:
                on_event("failed" if rec["task_status"] == "failed" else "done", rec, progress)
    finally:
        for fut in pending.values():
            fut.cancel()
    return stopped


def _write_error(out, key, rec) -> None:
    try:
        atomic.write_json(task_dir(out, key) / ERROR_FILE, rec)
    except OSError as exc:          # the summary still carries the error
        log.warning("could not write %s for task %s: %s", ERROR_FILE, key, exc)
