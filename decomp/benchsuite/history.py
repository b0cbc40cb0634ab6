"""The benchmark history: every ``decomp bench`` run and every ``decomp baseline check`` adds its
cases, with the environment they ran in, to one SQLite file (Python's standard ``sqlite3``).

The store is where a team sees what a solver upgrade or a code change did to time and accuracy
over many runs: ``decomp bench history`` lists the runs and compares any two by the rules of
``decomp bench compare`` (:mod:`.compare`), and ``--html`` draws them (:mod:`.html`).

Where it lives: ``--history FILE`` on ``decomp bench`` and ``decomp baseline check``, else the
environment variable ``DECOMP_HISTORY``, else ``bench/results/history.sqlite`` under the current
folder (beside the default benchmark outputs). ``--no-history`` leaves a run out.

Schema, version 1 (``PRAGMA user_version`` and ``meta.schema_version``; a store written by a
newer decomp is refused rather than misread). Times are seconds, errors relative; NULL where a
run did not measure a figure. JSON columns hold what has no column of its own.

``meta(key, value)``
    ``schema_version``, ``created_utc``.
``runs`` -- one row per ``decomp bench`` run or ``decomp baseline check``
    ``run_id`` (1, 2, ... in the order added), ``kind`` (``bench`` or ``baseline-check``),
    ``started_utc`` (ISO 8601), ``suite``, ``selection`` (bench ``-k`` / check ``--case``),
    ``command``, ``source`` (the benchmark.json or baseline folder), ``exit_code``,
    ``wall_seconds``, ``n_cases``, ``n_failed`` (cases that failed an accuracy check / regressed).
``environments`` -- one row per run (``run_id``)
    ``decomp`` (version), ``git_commit`` (``+dirty`` when the package's files differ from it),
    ``python``, ``numpy``, ``scipy``, ``pyomo``, ``highs``, ``ipopt`` (library versions),
    ``host``, ``cpu``, ``logical_cpus``, ``memory_gib``, ``load_start``, ``load_end`` (1-minute
    load averages), ``platform``, ``details`` (JSON: every other fact recorded).
``cases`` -- one row per case of a run (``run_id``, ``case_name``)
    ``demand`` (the instance's demand family: ``normal``, ``poisson``, ``negbin``, ``gamma``,
    ``lowcv``, ``mix``, ...; ``normal`` when the case does not say), ``kind`` (solve, build,
    tables), ``rung``, ``model``, ``method``, ``label``, ``n_products``, ``rounds``,
    ``time_min``, ``time_median``, ``time_mean``, ``time_max``, ``time_stddev`` (of the timed
    rounds; a baseline check stores its best run in all four), ``termination``,
    ``solution_status``, ``gap`` (certified), ``objective_error``, ``bid_price_error`` (relative,
    against the benchmark's reference solve; for a baseline check against the recorded answer),
    ``max_violation_rel``, ``iterations``, ``verdict`` (bench: passed / failed; check: pass,
    alternative_duals, regression), ``failures`` (JSON list: failed accuracy checks, or the
    check's regressions other than time), ``details`` (JSON: the case's other facts).
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import json
import math
import os
import pathlib
import platform
import sqlite3

from ..errors import InstanceError
from .results import Row

SCHEMA_VERSION = 1
ENV_VAR = "DECOMP_HISTORY"
DEFAULT_PATH = pathlib.Path("bench") / "results" / "history.sqlite"
KINDS = ("bench", "baseline-check")
#: The demand family of a case that does not name one (the ladder's own instances).
DEFAULT_DEMAND = "normal"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS runs (
    run_id INTEGER PRIMARY KEY AUTOINCREMENT,
    kind TEXT NOT NULL CHECK (kind IN ('bench', 'baseline-check')),
    started_utc TEXT NOT NULL,
    suite TEXT, selection TEXT, command TEXT, source TEXT,
    exit_code INTEGER, wall_seconds REAL,
    n_cases INTEGER NOT NULL, n_failed INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS environments (
    run_id INTEGER PRIMARY KEY REFERENCES runs(run_id) ON DELETE CASCADE,
    decomp TEXT, git_commit TEXT, python TEXT, numpy TEXT, scipy TEXT, pyomo TEXT, highs TEXT, ipopt TEXT,
    host TEXT, cpu TEXT, logical_cpus INTEGER, memory_gib REAL, load_start REAL, load_end REAL,
    platform TEXT, details TEXT
);
CREATE TABLE IF NOT EXISTS cases (
    run_id INTEGER NOT NULL REFERENCES runs(run_id) ON DELETE CASCADE,
    case_name TEXT NOT NULL, demand TEXT NOT NULL,
    kind TEXT, rung TEXT, model TEXT, method TEXT, label TEXT, n_products INTEGER, rounds INTEGER,
    time_min REAL, time_median REAL, time_mean REAL, time_max REAL, time_stddev REAL,
    termination TEXT, solution_status TEXT, gap REAL, objective_error REAL, bid_price_error REAL,
    max_violation_rel REAL, iterations INTEGER, verdict TEXT, failures TEXT, details TEXT,
    PRIMARY KEY (run_id, case_name)
);
CREATE INDEX IF NOT EXISTS cases_by_name ON cases (case_name, demand);
"""

#: Environment columns, in the order the listing and the report show them.
ENV_COLUMNS = ("decomp", "git_commit", "python", "numpy", "scipy", "pyomo", "highs", "ipopt", "host", "cpu",
               "logical_cpus", "memory_gib", "load_start", "load_end", "platform")
#: The versions whose change a report marks on its axis (what the answers may depend on).
VERSION_COLUMNS = ("decomp", "git_commit", "python", "numpy", "scipy", "pyomo", "highs", "ipopt")
_CASE_NUMBERS = ("time_min", "time_median", "time_mean", "time_max", "time_stddev", "gap", "objective_error",
                 "bid_price_error", "max_violation_rel")


class HistoryError(InstanceError):
    """The history file cannot be used (not a history store, or written by a newer decomp)."""


def default_path() -> pathlib.Path:
    """``$DECOMP_HISTORY``, else ``bench/results/history.sqlite`` under the current folder."""
    return pathlib.Path(os.environ.get(ENV_VAR) or DEFAULT_PATH)


@dataclasses.dataclass(frozen=True)
class RunInfo:
    """One run of the store, with its environment (``env``: the environment columns)."""

    run_id: int
    kind: str
    started_utc: str
    suite: str | None
    selection: str | None
    command: str | None
    source: str | None
    exit_code: int | None
    wall_seconds: float | None
    n_cases: int
    n_failed: int
    env: dict

    def versions(self) -> dict:
        return {k: self.env.get(k) for k in VERSION_COLUMNS}


@dataclasses.dataclass(frozen=True)
class CasePoint:
    """One case of one run: a :class:`~.results.Row` (what the compare rules read) and its family."""

    run_id: int
    demand: str
    row: Row


class Store:
    """A history file; open it with :func:`open_store` (a context manager closes it)."""

    def __init__(self, path: pathlib.Path, con: sqlite3.Connection):
        self.path = path
        self._con = con

    def close(self) -> None:
        self._con.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- adding runs ---------------------------------------------------------------------------

    def add_bench_run(self, run, *, exit_code: int | None = None, environment: dict | None = None) -> int:
        """Add a ``decomp bench`` run (a :class:`~.results.Run`) and its cases; returns its run id.

        ``environment``: what :func:`decomp.baseline.environment` says in the process that ran
        the suite (its versions and commit); without it, only what the benchmark file records.
        """
        mi, d = run.machine_info or {}, run.decomp or {}
        facts = d.get("run") or {}
        versions = (mi.get("decomp") or {}).get("versions") or {}
        env = dict(environment or {})
        load_start = _first((mi.get("decomp") or {}).get("load_average_at_start"))
        commit = run.commit_info or {}
        git = env.get("decomp_git_commit") or (
            (commit.get("id") or "") + ("+dirty" if commit.get("dirty") else "") if commit.get("id") else None)
        env_row = {
            "decomp": env.get("decomp"), "git_commit": git,
            "python": env.get("python") or versions.get("python") or mi.get("python_version"),
            "numpy": env.get("numpy") or versions.get("numpy"), "scipy": env.get("scipy") or versions.get("scipy"),
            "pyomo": env.get("pyomo") or versions.get("pyomo"),
            "highs": env.get("highs_library") or versions.get("highspy"),
            "ipopt": env.get("ipopt_library") or versions.get("cyipopt-wheels") or versions.get("cyipopt"),
            "host": mi.get("node"), "cpu": env.get("cpu_model") or (mi.get("cpu") or {}).get("brand_raw"),
            "logical_cpus": (mi.get("decomp") or {}).get("logical_cpus") or env.get("cpu_count_logical"),
            "memory_gib": (mi.get("decomp") or {}).get("memory_total_gib"),
            "load_start": load_start, "load_end": _first(d.get("load_average_at_end")),
            "platform": env.get("platform") or " ".join(str(mi.get(k) or "") for k in ("system", "release")).strip(),
            "details": {"versions": versions, "environment": env, "commit_info": commit},
        }
        cases = []
        for r in run.rows:
            failures = list(r.get("accuracy_failures") or [])
            cases.append({
                "case_name": r.case, "demand": str(r.get("demand") or DEFAULT_DEMAND), "kind": r.get("kind"),
                "rung": r.get("rung"), "model": r.get("model"), "method": r.get("method"), "label": r.get("label"),
                "n_products": r.get("n_products"), "rounds": r.rounds,
                "time_min": r.min, "time_median": r.median, "time_mean": r.mean, "time_max": r.max,
                "time_stddev": r.stddev, "termination": r.get("termination"),
                "solution_status": r.get("solution_status"), "gap": r.get("gap"),
                "objective_error": r.get("objective_error"), "bid_price_error": r.get("bid_price_error"),
                "max_violation_rel": r.get("max_violation_rel"), "iterations": r.get("iterations"),
                "verdict": "failed" if failures else "passed", "failures": failures,
                "details": {k: v for k, v in r.info.items() if k not in ("history", "reference", "thresholds")},
            })
        started = _iso(run.datetime) if run.datetime else _now()
        return self._add({
            "kind": "bench", "started_utc": started, "suite": facts.get("suite") or d.get("suite"),
            "selection": facts.get("k"), "command": facts.get("command"), "source": str(run.path),
            "exit_code": exit_code if exit_code is not None else facts.get("pytest_exit_code"),
            "wall_seconds": facts.get("wall_seconds") or d.get("session_seconds"),
            "n_cases": len(cases), "n_failed": sum(1 for c in cases if c["failures"])}, env_row, cases)

    def add_check(self, report, *, command: str | None = None, selection=None, load_start=None,
                  load_end=None, wall_seconds: float | None = None) -> int:
        """Add a ``decomp baseline check`` (its :class:`~decomp.baseline.report.CheckReport`); returns its run id."""
        env = dict(report.environment_new or {})
        env_row = {
            "decomp": env.get("decomp"), "git_commit": env.get("decomp_git_commit"), "python": env.get("python"),
            "numpy": env.get("numpy"), "scipy": env.get("scipy"), "pyomo": env.get("pyomo"),
            "highs": env.get("highs_library") or env.get("highspy"),
            "ipopt": env.get("ipopt_library") or env.get("cyipopt"),
            "host": env.get("hostname") or platform.node(), "cpu": env.get("cpu_model"),
            "logical_cpus": env.get("cpu_count_logical"), "memory_gib": env.get("memory_gib") or _memory_gib(),
            "load_start": load_start, "load_end": load_end,
            "platform": env.get("platform"),
            "details": {"environment": env, "environment_changes": [list(c) for c in report.environment_changes],
                        "baseline": report.baseline, "options_override": report.options_override},
        }
        cases = []
        for c in report.cases:
            m = c.metrics
            t = m.get("time_new")
            status = str(m.get("status_new") or "/").split("/")
            failures = [f["message"] for f in c.findings if f["severity"] == "regression" and f["kind"] != "time"]
            cases.append({
                "case_name": c.case, "demand": str(m.get("demand") or DEFAULT_DEMAND), "kind": "solve",
                "rung": None, "model": c.model, "method": c.method, "label": c.method,
                "n_products": None, "rounds": m.get("time_runs"),
                "time_min": t, "time_median": t, "time_mean": t, "time_max": t, "time_stddev": None,
                "termination": status[0] or None, "solution_status": status[1] if len(status) > 1 else None,
                "gap": m.get("gap_new"), "objective_error": m.get("objective_rel_change"),
                "bid_price_error": m.get("bid_max_rel_change"), "max_violation_rel": m.get("violation_new"),
                "iterations": m.get("iterations_new"), "verdict": c.verdict, "failures": failures,
                "details": {"findings": c.findings, "metrics": m},
            })
        return self._add({
            "kind": "baseline-check", "started_utc": _iso(report.checked_utc), "suite": report.suite,
            "selection": None if not selection else " ".join(selection), "command": command,
            "source": report.baseline, "exit_code": 1 if report.regression else 0, "wall_seconds": wall_seconds,
            "n_cases": len(cases), "n_failed": sum(1 for c in report.cases if c.verdict == "regression")},
            env_row, cases)

    def _add(self, run: dict, env: dict, cases: list) -> int:
        with self._con:                       # one transaction: a run is added whole or not at all
            cur = self._con.execute(
                "INSERT INTO runs (kind, started_utc, suite, selection, command, source, exit_code, wall_seconds, "
                "n_cases, n_failed) VALUES (:kind, :started_utc, :suite, :selection, :command, :source, :exit_code, "
                ":wall_seconds, :n_cases, :n_failed)", run)
            run_id = int(cur.lastrowid)
            self._con.execute(
                f"INSERT INTO environments (run_id, {', '.join(ENV_COLUMNS)}, details) VALUES "
                f"(?, {', '.join('?' for _ in ENV_COLUMNS)}, ?)",
                [run_id, *(_plain(env.get(k)) for k in ENV_COLUMNS), _json(env.get("details"))])
            cols = ("case_name", "demand", "kind", "rung", "model", "method", "label", "n_products", "rounds",
                    *_CASE_NUMBERS[:5], "termination", "solution_status", *_CASE_NUMBERS[5:], "iterations",
                    "verdict", "failures", "details")
            self._con.executemany(
                f"INSERT INTO cases (run_id, {', '.join(cols)}) VALUES (?, {', '.join('?' for _ in cols)})",
                [[run_id, *(_json(c[k]) if k in ("failures", "details") else _number(k, c[k]) for k in cols)]
                 for c in cases])
        return run_id

    # -- reading -------------------------------------------------------------------------------

    def runs(self) -> list:
        """Every run, oldest first, with its environment."""
        cur = self._con.execute(
            f"SELECT r.run_id, r.kind, r.started_utc, r.suite, r.selection, r.command, r.source, r.exit_code, "
            f"r.wall_seconds, r.n_cases, r.n_failed, {', '.join('e.' + c for c in ENV_COLUMNS)} "
            f"FROM runs r LEFT JOIN environments e USING (run_id) ORDER BY r.run_id")
        out = []
        for row in cur.fetchall():
            env = dict(zip(ENV_COLUMNS, row[11:]))
            out.append(RunInfo(*row[:11], env=env))
        return out

    def run(self, ref) -> RunInfo:
        """A run by id (``3``), or counted from the newest (``-1`` the newest, ``-2`` the one before)."""
        runs = self.runs()
        try:
            k = int(ref)
        except (TypeError, ValueError):
            raise HistoryError(f"a run is named by its id or by -1 (newest), -2, ...; got {ref!r}",
                               file=self.path) from None
        if k < 0 and -k <= len(runs):
            return runs[k]
        for r in runs:
            if r.run_id == k:
                return r
        raise HistoryError(f"no run {ref} (the store holds {len(runs)} run(s)"
                           + (f", ids {runs[0].run_id} to {runs[-1].run_id})" if runs else ")"), file=self.path)

    def cases(self, run_id: int) -> dict:
        """The cases of a run as :class:`CasePoint` by case name."""
        return {p.row.case: p for p in self._points("WHERE run_id = ?", (int(run_id),))}

    def points(self) -> list:
        """Every case of every run, oldest run first."""
        return self._points("", ())

    def _points(self, where: str, params) -> list:
        cols = ("run_id", "case_name", "demand", "kind", "rung", "model", "method", "label", "n_products",
                "rounds", *_CASE_NUMBERS, "termination", "solution_status", "iterations", "verdict", "failures",
                "details")
        cur = self._con.execute(f"SELECT {', '.join(cols)} FROM cases {where} ORDER BY run_id, case_name", params)
        out = []
        for values in cur.fetchall():
            d = dict(zip(cols, values))
            info = {k: d[k] for k in ("kind", "rung", "model", "method", "label", "n_products", "termination",
                                      "solution_status", "gap", "objective_error", "bid_price_error",
                                      "max_violation_rel", "iterations", "verdict", "demand")}
            info["accuracy_failures"] = json.loads(d["failures"] or "[]")
            info["case"] = d["case_name"]
            row = Row(name=d["case_name"], case=d["case_name"],
                      min=_time(d["time_min"]), median=_time(d["time_median"]), mean=_time(d["time_mean"]),
                      max=_time(d["time_max"]), stddev=d["time_stddev"] or 0.0, rounds=d["rounds"] or 1, info=info)
            out.append(CasePoint(run_id=d["run_id"], demand=d["demand"], row=row))
        return out


@contextlib.contextmanager
def open_store(path=None, create: bool = True):
    """The history store at ``path`` (default :func:`default_path`), created with its folder when
    missing and ``create``; a file that is not a store, or one of a newer schema, is a HistoryError."""
    path = pathlib.Path(path) if path is not None else default_path()
    if not path.exists():
        if not create:
            raise HistoryError("no history store here (runs of decomp bench and baseline check make one)",
                               file=path)
        if path.parent != pathlib.Path(""):
            path.parent.mkdir(parents=True, exist_ok=True)
    elif not path.is_file():
        raise HistoryError("exists and is not a file; not a history store", file=path)
    try:
        con = sqlite3.connect(path, timeout=30)
        con.execute("PRAGMA foreign_keys = ON")
        version = con.execute("PRAGMA user_version").fetchone()[0]
        if version > SCHEMA_VERSION:
            con.close()
            raise HistoryError(f"history schema version {version} is newer than this decomp's "
                               f"({SCHEMA_VERSION}); use a newer decomp", file=path)
        if version == 0:
            tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            if tables:
                con.close()
                raise HistoryError(f"an SQLite file with other tables ({', '.join(sorted(tables))}); "
                                   "not a decomp history store", file=path)
            with con:
                con.executescript(_SCHEMA)
                con.execute("INSERT OR REPLACE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
                con.execute("INSERT OR REPLACE INTO meta VALUES ('created_utc', ?)", (_now(),))
                con.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
    except sqlite3.DatabaseError as exc:
        raise HistoryError(f"not a history store ({exc})", file=path) from exc
    store = Store(path, con)
    try:
        yield store
    finally:
        store.close()


def _memory_gib() -> float | None:
    try:
        import psutil
    except ImportError:
        return None
    return round(psutil.virtual_memory().total / 2**30, 2)


def load_average() -> float | None:
    """The 1-minute load average, or None where the system has none."""
    try:
        return float(os.getloadavg()[0])
    except (OSError, AttributeError):
        return None


def _first(v):
    if isinstance(v, (list, tuple)):
        return float(v[0]) if v and isinstance(v[0], (int, float)) else None
    return float(v) if isinstance(v, (int, float)) else None


def _now() -> str:
    return dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")


def _iso(text) -> str:
    """An ISO 8601 UTC time from the forms decomp writes ('2026-12-04T21:03:56Z', with an offset)."""
    try:
        t = dt.datetime.fromisoformat(str(text).replace("Z", "+00:00"))
    except ValueError:
        return _now()
    return (t if t.tzinfo else t.replace(tzinfo=dt.timezone.utc)).astimezone(dt.timezone.utc).isoformat(
        timespec="seconds")


def _plain(v):
    if v is None or isinstance(v, (int, float, str)):
        return v
    return str(v)


def _json(v) -> str | None:
    return None if v is None else json.dumps(v, default=str, sort_keys=True)


def _number(key, v):
    """A figure for a column: numbers as they are (non-finite ones as NULL), text as text."""
    if key in _CASE_NUMBERS or key in ("n_products", "rounds", "iterations"):
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            try:
                v = float(v) if isinstance(v, str) else None
            except ValueError:
                v = None
        if v is not None and not math.isfinite(v):
            return None
        return v
    return _plain(v)


def _time(v) -> float:
    return float(v) if v is not None else math.nan
