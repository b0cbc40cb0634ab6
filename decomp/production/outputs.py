"""A task's files in the output folder, and the check that a finished task really is finished.

Per task, under ``out/tasks/<key>/``::

    bid_prices.parquet   leg, bid_price (fare units per seat, >= 0), one row per leg
                         (runs before the one result schema wrote ``leg_id``; still read)
    result.json          the SolveResult in the one output schema (``decomp.result``), the
                         fingerprint, task and task record under ``context`` (written last)
    error.json           the error of a failed task (removed once it succeeds)

A rerun skips a task only after :func:`read_finished` has verified it: its
``result.json`` parses, its record's ``task_status`` is ``ok``, carries the same fingerprint (model,
method, options, task source and the *content* of its instance files,
warm-start folder), and its Parquet file has the sha256 recorded in
``result.json``, reads, and holds one finite, non-negative bid price per leg
with unique leg ids. Anything else -- a truncated, zero-byte or edited file, a
task that ended non-optimal -- is solved again, and the reason is kept.
"""

from __future__ import annotations

import json
import pathlib

import numpy as np

from .. import atomic
from ..atomic import file_sha256
from ..paths import REFUSED_ERRNOS, is_refused
from ..result import read_bid_price_table
from ..tables import BID_PRICE_COLUMNS

RESULT_FILE, BID_FILE, ERROR_FILE = "result.json", "bid_prices.parquet", "error.json"

#: Errors of the output folder itself (full, read-only, no permission, quota): retrying a task
#: cannot help, and every other task would meet the same (:data:`decomp.paths.REFUSED_ERRNOS`).
OUTPUT_ERRNOS = REFUSED_ERRNOS
is_output_error = is_refused


def task_dir(out, key) -> pathlib.Path:
    return pathlib.Path(out) / "tasks" / key


def write_bid_prices(path, leg_ids, bid_prices) -> str:
    """Bid prices as Parquet (columns leg, bid_price), atomically; returns the file's sha256."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    legs = [str(x) for x in leg_ids]
    values = (np.full(len(legs), np.nan) if bid_prices is None
              else np.asarray(bid_prices, dtype=np.float64))
    leg_col, price_col = BID_PRICE_COLUMNS
    table = pa.table({leg_col: pa.array(legs, pa.string()), price_col: pa.array(values, pa.float64())})
    with atomic.atomic_path(path) as tmp:
        pq.write_table(table, tmp)
        digest = file_sha256(tmp)
    return digest


def read_bid_prices(path) -> dict:
    """Bid prices by leg id from a task's Parquet file (columns leg, bid_price; or leg_id, bid_price)."""
    return read_bid_price_table(path)


def task_record(data) -> dict | None:
    """The task record of a parsed result.json: under ``context`` (the one schema), or at the top
    level (runs written before it); None when there is none."""
    if not isinstance(data, dict):
        return None
    context = data.get("context")
    rec = context.get("record") if isinstance(context, dict) else None
    if rec is None:
        rec = data.get("record")
    return rec if isinstance(rec, dict) else None


def task_fingerprint(data: dict):
    """The fingerprint of a parsed result.json, wherever its layout keeps it."""
    context = data.get("context")
    if isinstance(context, dict) and "fingerprint" in context:
        return context["fingerprint"]
    return data.get("fingerprint")


def task_status(rec: dict):
    """``ok``, ``not_optimal`` or ``failed``: a record's ``task_status`` (``status`` in earlier runs)."""
    return rec.get("task_status", rec.get("status"))


def _bid_file_problem(path: pathlib.Path, sha256, n_legs) -> str | None:
    """Why the bid-price file of a finished task cannot be trusted, or None."""
    if not path.is_file():
        return f"{BID_FILE} is missing"
    if not isinstance(sha256, str):
        return f"result.json records no checksum of {BID_FILE} (written by an older decomp)"
    if file_sha256(path) != sha256:
        return f"{BID_FILE} differs from the checksum in result.json (truncated or edited)"
    try:
        prices = read_bid_prices(path)
    except Exception as exc:  # noqa: BLE001 - any reading failure means: solve again
        return f"{BID_FILE} cannot be read ({type(exc).__name__})"
    values = np.array(list(prices.values()), dtype=np.float64)
    if len(prices) != n_legs:
        return f"{BID_FILE} holds {len(prices)} distinct legs, the task has {n_legs}"
    if not (np.all(np.isfinite(values)) and np.all(values >= 0)):
        return f"{BID_FILE} holds a bid price that is not a finite number >= 0"
    return None


def read_finished(out, spec, fingerprint: str, reasons: dict | None = None) -> dict | None:
    """The stored record of a verified finished task with this fingerprint, else None.

    ``reasons`` (optional) receives ``{key: why}`` for a task that has output but must be redone.
    """
    d = task_dir(out, spec.key)

    def redo(why):
        if reasons is not None:
            reasons[spec.key] = why
        return None

    if not (d / RESULT_FILE).exists():
        return None
    try:
        with open(d / RESULT_FILE, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError, RecursionError):
        return redo(f"{RESULT_FILE} cannot be read")
    rec = task_record(data)
    if rec is None:
        return redo(f"{RESULT_FILE} holds no task record")
    if task_fingerprint(data) != fingerprint:
        return redo("solved with other arguments or from other instance content")
    if task_status(rec) != "ok":
        return redo(f"ended {task_status(rec)} ({rec.get('termination')}): solved again")
    n_legs = rec.get("n_legs")
    if not isinstance(n_legs, int):
        return redo(f"{RESULT_FILE} records no leg count")
    why = _bid_file_problem(d / BID_FILE, rec.get("bid_prices_sha256"), n_legs)
    if why is not None:
        return redo(why)
    return rec
