"""The end-of-run summary: per task status, time, gap, iterations; totals against the window.

``summary.json`` is the machine-readable record (``decomp size --run-summary``
reads the per-task overhead from it); ``summary.md`` is the same for people.
Both are written atomically.

``measurements`` holds what sizing needs (overhead per task, cluster start,
tasks measured) and where it was measured: this run, or, when a rerun found
every task finished and solved none, the earlier summary it replaces (so a
finished pilot run again keeps its measurements). Skipped tasks keep the solve
times recorded when they ran.
"""

from __future__ import annotations

import datetime as dt
import pathlib

from .. import atomic
from .durations import format_duration
from .outputs import task_status


def _f(v):
    return float(v) if isinstance(v, (int, float)) else None


#: Longest error text kept per task (a 10 MB bad input line must not become a 10 MB summary).
ERROR_CHARS = 500


def short(text, limit: int = ERROR_CHARS):
    if text is None:
        return None
    text = str(text)
    return text if len(text) <= limit else text[:limit] + f"... ({len(text)} characters in all)"


def build_summary(batch, cfg, records: dict, *, wall_seconds: float, cluster_seconds: float = 0.0,
                  workers=None, window=None, interrupted=None, stopped=None, signal_after_last_task=None,
                  earlier: dict | None = None) -> dict:
    """The summary dict. ``records`` maps task key to its record (missing: not run).

    ``interrupted``: why the run was cut short by the operator (KeyboardInterrupt, SIGTERM);
    ``stopped``: why it stopped by itself (the output folder cannot be written);
    ``signal_after_last_task``: a SIGINT or SIGTERM that arrived once every task had finished
    (nothing was cut short; the run is complete);
    ``earlier``: the summary this one replaces (:func:`read_summary`), whose measurements are kept
    when this run solved nothing."""
    tasks = []
    for spec in batch.tasks:
        rec = records.get(spec.key)
        if rec is None:
            tasks.append({"key": spec.key, "task_status": "not_run", "skipped": False})
            continue
        sec = rec.get("seconds") or {}
        tasks.append({
            "key": spec.key, "task_status": task_status(rec), "skipped": bool(rec.get("skipped")),
            "termination": rec.get("termination"), "gap": rec.get("gap"),
            "iterations": rec.get("iterations"), "objective": rec.get("objective"),
            "n_products": rec.get("n_products"),
            "warm_started": bool((rec.get("warm_start") or {}).get("from")),
            "seconds_total": _f(sec.get("total")), "seconds_solve": _f(sec.get("solve")),
            "seconds_load": _f(sec.get("load")), "error": short(rec.get("error")),
            "method": rec.get("method"), "fallback_used": bool(rec.get("fallback_used")),
            "redone": rec.get("redone"), "worker": rec.get("pid"),
            "worker_peak_rss_mib": _f(rec.get("worker_peak_rss_mib")),
        })
    count = lambda st: sum(1 for t in tasks if t["task_status"] == st)  # noqa: E731
    ran = [t for t in tasks if not t["skipped"] and t["task_status"] in ("ok", "not_optimal", "failed")]
    solve_sum = sum(t["seconds_solve"] or 0.0 for t in ran)
    task_sum = sum(t["seconds_total"] or 0.0 for t in ran)
    totals = {
        "n_tasks": len(tasks), "ok": count("ok"), "not_optimal": count("not_optimal"),
        "failed": count("failed"), "not_run": count("not_run"),
        "skipped": sum(1 for t in tasks if t["skipped"]), "run": len(ran),
        "fallback_used": sum(1 for t in tasks if t.get("fallback_used")),
        "redone": sum(1 for t in tasks if t.get("redone")),
        "wall_seconds": wall_seconds, "cluster_start_seconds": cluster_seconds,
        "workers": workers, "task_seconds_sum": task_sum, "solve_seconds_sum": solve_sum,
        "max_gap": max((t["gap"] for t in tasks if isinstance(t.get("gap"), (int, float))), default=None),
        "worker_peak_rss_mib": _worker_peaks(ran),
    }
    # Everything a task costs beyond its solve (instance build, warm-start read,
    # writing, scheduling, idle at the end), per task, on these workers.
    if ran and workers:
        busy = max(wall_seconds - cluster_seconds, 0.0) * workers
        totals["overhead_per_task_seconds"] = max(busy - solve_sum, 0.0) / len(ran)
        totals["throughput_tasks_per_minute"] = 60.0 * len(ran) / max(wall_seconds - cluster_seconds, 1e-9)
    else:
        totals["overhead_per_task_seconds"] = None
        totals["throughput_tasks_per_minute"] = None
    if window:
        totals["window_seconds"] = window
        totals["fits_window"] = wall_seconds <= window
        totals["margin_seconds"] = window - wall_seconds
    written = dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")
    measurements = {"measured_in": written, "tasks_run": len(ran), "workers": workers,
                    "overhead_per_task_seconds": totals["overhead_per_task_seconds"],
                    "cluster_start_seconds": cluster_seconds}
    if not ran and _same_run(earlier, cfg) and (earlier.get("measurements") or {}).get("tasks_run"):
        measurements = dict(earlier["measurements"])
    return {
        "written": written, "measurements": measurements,
        "batch": batch.description, "model": cfg.model, "method": cfg.method,
        "tol": cfg.options.tol, "out": cfg.out, "warm_start_from": cfg.warm_start_from,
        "fallback": getattr(cfg, "fallback", None),
        "interrupted": interrupted, "stopped": short(stopped), "signal_after_last_task": signal_after_last_task,
        "totals": totals, "tasks": tasks,
    }


def _worker_peaks(ran) -> dict:
    """Per worker process (its pid) that ran tasks here: its peak resident set in MiB, the
    largest its tasks recorded (each records the peak of its process so far)."""
    peaks = {}
    for t in ran:
        pid, peak = t.get("worker"), t.get("worker_peak_rss_mib")
        if pid is not None and peak is not None:
            peaks[str(pid)] = max(peaks.get(str(pid), 0.0), peak)
    return peaks


def _same_run(earlier, cfg) -> bool:
    """``earlier`` is a summary of this output folder's model, method and tolerance."""
    return (isinstance(earlier, dict) and earlier.get("model") == cfg.model and earlier.get("method") == cfg.method
            and earlier.get("tol") == cfg.options.tol and isinstance(earlier.get("measurements"), dict))


def read_summary(out) -> dict | None:
    """The summary.json in ``out``, or None when there is none or it cannot be read."""
    import json

    try:
        data = json.loads((pathlib.Path(out) / "summary.json").read_text())
    except (OSError, ValueError, RecursionError):
        return None
    return data if isinstance(data, dict) else None


def _cell(v, fmt="{}"):
    if v is None:
        return "-"
    if isinstance(v, float):
        return fmt.format(v)
    return str(v).replace("|", "\\|").replace("\n", " ")


def to_markdown(s: dict) -> str:
    t = s["totals"]
    lines = [f"# decomp run: {s['model']} by {s['method']} (tol {s['tol']:g})", "",
             f"- batch: {s['batch']}", f"- output: `{s['out']}`",
             f"- warm start from: {s['warm_start_from'] or '-'}",
             f"- tasks: {t['n_tasks']} ({t['ok']} ok, {t['not_optimal']} not optimal, {t['failed']} failed, "
             f"{t['not_run']} not run; {t['skipped']} skipped as finished earlier)",
             f"- wall time: {format_duration(t['wall_seconds'])} on {t['workers'] or '-'} worker(s) "
             f"(cluster start {format_duration(t['cluster_start_seconds'])})"]
    if t.get("window_seconds"):
        verdict = "fits" if t["fits_window"] else "DOES NOT FIT"
        lines.append(f"- window: {format_duration(t['window_seconds'])}: {verdict} "
                     f"(margin {format_duration(abs(t['margin_seconds']))}"
                     f"{'' if t['fits_window'] else ' over'})")
    if t.get("overhead_per_task_seconds") is not None:
        lines.append(f"- overhead per task beyond the solve: {t['overhead_per_task_seconds']:.3f} s; "
                     f"throughput {t['throughput_tasks_per_minute']:.1f} tasks/min")
    if t.get("worker_peak_rss_mib"):
        peaks = ", ".join(f"{v:.0f}" for v in sorted(t["worker_peak_rss_mib"].values(), reverse=True))
        lines.append(f"- peak memory per worker (resident set, MiB): {peaks}")
    m = s.get("measurements") or {}
    if not t.get("run") and m.get("tasks_run"):
        lines.append(f"- nothing solved in this run; the measurements for sizing (overhead per task "
                     f"{m['overhead_per_task_seconds']:.3f} s, {m['tasks_run']} tasks) are kept from the run "
                     f"written {m['measured_in']}")
    lines.append(f"- fallback: {s.get('fallback') or 'none'}; used by {t.get('fallback_used', 0)} task(s); "
                 f"{t.get('redone', 0)} task(s) with earlier output solved again (why: `redone` in summary.json)")
    if s.get("interrupted"):
        lines.append(f"- INTERRUPTED ({s['interrupted']}): rerun with the same arguments to finish")
    if s.get("signal_after_last_task"):
        lines.append(f"- {s['signal_after_last_task']} arrived after the last task had finished: nothing was "
                     f"interrupted")
    if s.get("stopped"):
        lines.append(f"- STOPPED: {s['stopped']}; finished tasks are kept, rerun with the same arguments "
                     f"once the folder can be written")
    lines += ["", "| task | status | method | skipped | gap | iterations | solve s | task s | warm | error |",
              "|---|---|---|---|---|---|---|---|---|---|"]
    for r in s["tasks"]:
        lines.append("| " + " | ".join([
            _cell(r["key"]), _cell(r["task_status"]),
            _cell(r.get("method")) + (" (fallback)" if r.get("fallback_used") and r.get("task_status") == "ok"
                                      else ""),
            "yes" if r.get("skipped") else "",
            _cell(r.get("gap"), "{:.1e}"), _cell(r.get("iterations")),
            _cell(r.get("seconds_solve"), "{:.3f}"), _cell(r.get("seconds_total"), "{:.3f}"),
            "yes" if r.get("warm_started") else "", _cell(r.get("error"))]) + " |")
    return "\n".join(lines) + "\n"


def write_summary(out, s: dict) -> list:
    """Write summary.json and summary.md (each atomically); returns the ones that could not be
    written as ``[(name, OSError)]`` (a full disk may take one and leave room for the other)."""
    out = pathlib.Path(out)
    failed = []
    for name, write in (("summary.json", lambda p: atomic.write_json(p, s)),
                        ("summary.md", lambda p: atomic.write_text(p, to_markdown(s)))):
        try:
            write(out / name)
        except OSError as exc:
            failed.append((name, exc))
    return failed
