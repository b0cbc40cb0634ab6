"""The production run on Dask: one task per instance, atomic output, resumable.

Output layout under ``out``::

    run.json                       the arguments of the latest invocation
    tasks/<key>/bid_prices.parquet leg_id, bid_price (fare units per seat, >= 0)
    tasks/<key>/result.json        the task record and the SolveResult (written last)
    tasks/<key>/error.json         the error of a failed task (removed once it succeeds)
    summary.json, summary.md       the end-of-run summary (see :mod:`.summary`)

A task is finished when its ``result.json`` exists, parses, says ``ok`` or
``not_optimal`` and carries the same fingerprint (model, method, options, task
source, warm-start folder), and its Parquet file exists. A rerun with the same
arguments skips finished tasks; the others are solved again from the same
inputs, so the results are identical (the solves are deterministic).

Warm starts: ``warm_start_from`` is an earlier run's ``out`` folder; a task
starts from the bid prices of the same task key there when present (legs
matched by id, legs missing there start at 0), and cold otherwise.

A task raising a :class:`~decomp.errors.DecompError` (bad instance, missing
solver) fails at once: retrying cannot help. Any other exception, and a worker
that dies, makes Dask retry the task (``retries``) or reschedule it; a task
that still fails is reported with its error and never hides the others.
"""

from __future__ import annotations

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
from ..errors import DecompError
from .batch import Batch, TaskSpec

log = logging.getLogger(__name__)

#: Task statuses that count as finished (a not_optimal solve is an answer with
#: its status, which a rerun would only repeat).
FINISHED = ("ok", "not_optimal")
RESULT_FILE, BID_FILE, ERROR_FILE = "result.json", "bid_prices.parquet", "error.json"


@dataclasses.dataclass(frozen=True)
class RunConfig:
    """What every task of a run shares (shipped to the workers with each task)."""

    model: str
    method: str
    options: object            # SolverOptions
    out: str
    warm_start_from: str | None = None

    def __post_init__(self):
        object.__setattr__(self, "out", str(pathlib.Path(self.out).resolve()))
        if self.warm_start_from is not None:
            object.__setattr__(self, "warm_start_from", str(pathlib.Path(self.warm_start_from).resolve()))

    def to_dict(self) -> dict:
        return {"model": self.model, "method": self.method, "options": options_dict(self.options),
                "out": self.out, "warm_start_from": self.warm_start_from}

    def __reduce__(self):
        # SolverOptions holds a mappingproxy, which does not pickle: ship its dict.
        return (_make_config, (self.model, self.method, options_dict(self.options), self.out, self.warm_start_from))

    def fingerprint(self, spec: TaskSpec) -> str:
        ident = {"model": self.model, "method": self.method, "options": options_dict(self.options),
                 "task": spec.to_dict(), "warm_start_from": self.warm_start_from}
        text = json.dumps(ident, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:20]


def options_dict(options) -> dict:
    """SolverOptions as a plain dict (not via dataclasses.asdict, which cannot copy a mappingproxy)."""
    d = {f.name: getattr(options, f.name) for f in dataclasses.fields(options)}
    d["solver_options"] = dict(d.get("solver_options") or {})
    return d


def _make_config(model, method, options, out, warm_start_from) -> RunConfig:
    from ..options import SolverOptions

    return RunConfig(model=model, method=method, options=SolverOptions(**options), out=out,
                     warm_start_from=warm_start_from)


def task_dir(out, key) -> pathlib.Path:
    return pathlib.Path(out) / "tasks" / key


# -- files ------------------------------------------------------------------------

def write_bid_prices(path, leg_ids, bid_prices) -> None:
    """Bid prices as Parquet (columns leg_id, bid_price), atomically."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    legs = [str(x) for x in leg_ids]
    values = (np.full(len(legs), np.nan) if bid_prices is None
              else np.asarray(bid_prices, dtype=np.float64))
    table = pa.table({"leg_id": pa.array(legs, pa.string()), "bid_price": pa.array(values, pa.float64())})
    with atomic.atomic_path(path) as tmp:
        pq.write_table(table, tmp)


def read_bid_prices(path) -> dict:
    """Bid prices by leg id from a task's Parquet file."""
    import pyarrow.parquet as pq

    table = pq.read_table(path, columns=["leg_id", "bid_price"])
    return dict(zip(table.column("leg_id").to_pylist(), table.column("bid_price").to_pylist()))


def read_finished(out, spec: TaskSpec, fingerprint: str) -> dict | None:
    """The stored record of a finished task with this fingerprint, else None."""
    d = task_dir(out, spec.key)
    try:
        with open(d / RESULT_FILE) as fh:
            data = json.load(fh)
    except (OSError, ValueError):
        return None
    rec = data.get("record") if isinstance(data, dict) else None
    if not isinstance(rec, dict) or rec.get("status") not in FINISHED:
        return None
    if data.get("fingerprint") != fingerprint or not (d / BID_FILE).is_file():
        return None
    return rec


def _warm_start(cfg: RunConfig, key: str, leg_ids):
    """(array aligned with leg_ids or None, info dict) from the earlier run's output."""
    if cfg.warm_start_from is None:
        return None, {"from": None}
    path = task_dir(cfg.warm_start_from, key) / BID_FILE
    if not path.is_file():
        return None, {"from": None, "reason": f"no {BID_FILE} for task {key} in {cfg.warm_start_from}"}
    prices = read_bid_prices(path)
    values = np.array([prices.get(str(leg), np.nan) for leg in leg_ids], dtype=np.float64)
    matched = int(np.count_nonzero(np.isfinite(values)))
    if matched == 0:
        return None, {"from": str(path), "legs_matched": 0, "reason": "no leg ids in common"}
    values = np.where(np.isfinite(values), np.maximum(values, 0.0), 0.0)
    return values, {"from": str(path), "legs_matched": matched}


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
    then mapped and unmapped afresh, paying its page faults each time. The
    Lagrangian loop allocates tens of such temporaries per iteration; measured
    on 12 date instances of 100,000 products: 4.40 s with that setting, 2.58 s
    after this call, 2.61 s without the setting. Returns whether mallopt took
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
    """Build, solve and write one task; return its (small) record.

    Only the record travels back to the client; the instance and the result
    are dropped when this returns.
    """
    from ..registry import solve

    t0 = time.perf_counter()
    base = {"key": spec.key, "host": socket.gethostname(), "pid": os.getpid(), "fingerprint": fingerprint}
    try:
        inst = spec.load()
    except DecompError as exc:      # bad input: a retry cannot help
        return {**base, "status": "failed", "error": f"{type(exc).__name__}: {exc}",
                "seconds": {"total": time.perf_counter() - t0}}
    t1 = time.perf_counter()
    try:
        warm, warm_info = _warm_start(cfg, spec.key, inst.leg_ids)
    except Exception as exc:        # an unreadable earlier output only costs the warm start
        warm, warm_info = None, {"from": None, "reason": f"unreadable: {type(exc).__name__}: {exc}"}
    try:
        result = solve(inst, model=cfg.model, method=cfg.method, options=cfg.options, warm_start=warm)
    except DecompError as exc:
        return {**base, "status": "failed", "error": f"{type(exc).__name__}: {exc}",
                "seconds": {"load": t1 - t0, "total": time.perf_counter() - t0}}
    t2 = time.perf_counter()
    d = task_dir(cfg.out, spec.key)
    write_bid_prices(d / BID_FILE, result.leg_ids, result.bid_price_array)
    record = {
        **base,
        "status": "ok" if result.ok else "not_optimal",
        "termination": result.termination.value,
        "solution_status": result.solution_status.value,
        "objective": _num(result.objective),
        "bound": _num(result.bound),
        "gap": _num(result.gap),
        "iterations": result.iterations,
        "n_products": int(inst.n_products),
        "n_legs": int(inst.n_legs),
        "warm_start": warm_info,
        "error": None if result.ok else (result.message or result.termination.value),
        "seconds": {"load": t1 - t0, "solve": t2 - t1,
                    "solver": {k: float(v) for k, v in result.seconds.items()}},
    }
    del inst
    payload = {"fingerprint": fingerprint, "task": spec.to_dict(), "record": record,
               "result": result.to_json_dict(include_history=True)}
    record["seconds"]["write"] = time.perf_counter() - t2
    record["seconds"]["total"] = time.perf_counter() - t0
    atomic.write_json(d / RESULT_FILE, json.loads(json.dumps(payload, default=str)))
    try:
        os.unlink(d / ERROR_FILE)
    except FileNotFoundError:
        pass
    return record


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
    return {"key": spec.key, "status": "failed", "fingerprint": fingerprint, "error": text,
            "traceback": tail, "seconds": {}}


def start_cluster(workers: int | None = None):
    """An embedded LocalCluster: one single-threaded worker process per core."""
    from distributed import Client, LocalCluster

    n = int(workers or os.cpu_count() or 1)
    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                           dashboard_address=":0", silence_logs=logging.ERROR)
    return cluster, Client(cluster)


def run_batch(batch: Batch, cfg: RunConfig, *, client=None, scheduler: str | None = None,
              workers: int | None = None, retries: int = 2, window: float | None = None,
              on_event=None) -> dict:
    """Run every unfinished task of ``batch``; write and return the summary dict.

    ``client``: a connected :class:`distributed.Client` to use; else
    ``scheduler`` (an address) is connected to; else an embedded LocalCluster
    with ``workers`` processes (default: one per core) is started and closed.
    ``on_event(kind, record, progress)`` is called with kind ``"start"``
    (record None), ``"done"`` or ``"failed"`` as tasks complete. A
    KeyboardInterrupt (or any exception from ``on_event``) cancels what is not
    finished, writes the summary of what is, and is raised again.
    """
    from ..registry import get_method
    from . import summary as summary_mod

    get_method(cfg.method, cfg.model)           # unknown names fail before anything starts
    out = pathlib.Path(cfg.out)
    out.mkdir(parents=True, exist_ok=True)
    atomic.write_json(out / "run.json", {"config": cfg.to_dict(), "batch": batch.to_dict(),
                                         "retries": retries, "window_seconds": window})
    fps = {spec.key: cfg.fingerprint(spec) for spec in batch.tasks}
    records, todo = {}, []
    for spec in batch.tasks:
        rec = read_finished(out, spec, fps[spec.key])
        if rec is None:
            todo.append(spec)
            _remove_stale_temporaries(task_dir(out, spec.key))
        else:
            records[spec.key] = {**rec, "skipped": True}
    progress = Progress(total=len(batch), skipped=len(records), todo=len(todo))
    t_start = time.perf_counter()
    own_cluster = own_client = None
    cluster_seconds = 0.0
    interrupted = None
    n_workers = None
    try:
        if todo:
            if client is None:
                if scheduler is not None:
                    from distributed import Client

                    client = own_client = Client(scheduler)
                else:
                    own_cluster, client = start_cluster(workers)
                    own_client = client
            client.run(prepare_worker, cfg.model, cfg.method)
            cluster_seconds = time.perf_counter() - t_start
            n_workers = len(client.scheduler_info().get("workers", {})) or None
            progress.started = time.perf_counter()
            if on_event is not None:
                on_event("start", None, progress)
            by_key = {}
            futures = []
            # Dask keys are unique per invocation, so a rerun on the same cluster never meets
            # the cancelled futures of an interrupted one; the results do not depend on them.
            nonce = uuid.uuid4().hex[:8]
            for rank, spec in enumerate(todo):
                fut = client.submit(run_task, spec, cfg, fps[spec.key], key=f"decomp-task-{spec.key}-{nonce}",
                                    retries=retries, pure=False, priority=len(todo) - rank)
                by_key[fut.key] = spec
                futures.append(fut)
            _collect(futures, by_key, fps, records, progress, out, on_event)
    except BaseException as exc:
        interrupted = exc
    finally:
        wall = time.perf_counter() - t_start
        if own_client is not None:
            own_client.close()
        if own_cluster is not None:
            own_cluster.close()
    summ = summary_mod.build_summary(batch, cfg, records, wall_seconds=wall, cluster_seconds=cluster_seconds,
                                     workers=n_workers or workers, window=window,
                                     interrupted=None if interrupted is None else type(interrupted).__name__)
    summary_mod.write_summary(out, summ)
    if interrupted is not None:
        raise interrupted
    return summ


def _collect(futures, by_key, fps, records, progress, out, on_event):
    from distributed import as_completed

    pending = {f.key: f for f in futures}
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
            if rec["status"] == "failed":
                progress.failed += 1
                atomic.write_json(task_dir(out, spec.key) / ERROR_FILE, rec)
                log.warning("task %s failed: %s", spec.key, rec.get("error"))
            else:
                progress.done += 1
            if on_event is not None:
                on_event("failed" if rec["status"] == "failed" else "done", rec, progress)
    finally:
        for fut in pending.values():
            fut.cancel()
