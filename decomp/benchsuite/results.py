"""Reading a ``decomp bench`` output (its folder or its pytest-benchmark JSON) into rows.

A missing, unreadable or malformed file raises :class:`BenchmarkFileError`
(an :class:`~decomp.errors.InstanceError`, so the command line exits 2) that
names the file and, where it can, the benchmark entry and field.
"""

from __future__ import annotations

import dataclasses
import json
import math
import pathlib

from ..errors import InstanceError

BENCH_JSON = "benchmark.json"


class BenchmarkFileError(InstanceError):
    """A benchmark result file is missing or not a pytest-benchmark JSON of this suite."""


@dataclasses.dataclass(frozen=True)
class Row:
    """One benchmark case: its name, timing statistics (seconds) and ``extra_info``."""

    name: str
    case: str
    min: float
    median: float
    mean: float
    max: float
    stddev: float
    rounds: int
    info: dict

    def get(self, key, default=None):
        return self.info.get(key, default)

    def time(self, stat: str = "min") -> float:
        return getattr(self, stat)


@dataclasses.dataclass(frozen=True)
class Run:
    path: pathlib.Path
    rows: tuple
    machine_info: dict
    commit_info: dict
    datetime: str | None
    decomp: dict

    def by_case(self) -> dict:
        return {r.case: r for r in self.rows}


def resolve_path(path) -> pathlib.Path:
    """The JSON file of a ``decomp bench`` folder, or ``path`` itself when it is a file."""
    p = pathlib.Path(path)
    if p.is_dir():
        p = p / BENCH_JSON
        if not p.exists():
            raise BenchmarkFileError(f"no {BENCH_JSON} in this folder (is it a 'decomp bench' output?)",
                                     file=p.parent)
    elif not p.exists():
        raise BenchmarkFileError("benchmark file or folder not found", file=p)
    return p


def _float(v, p, i, field):
    try:
        f = float(v)
    except (TypeError, ValueError) as exc:
        raise BenchmarkFileError("not a number", file=p, row=i, column=field, value=v) from exc
    if not math.isfinite(f) or f < 0:
        raise BenchmarkFileError("not a finite, non-negative time", file=p, row=i, column=field, value=v)
    return f


def load_run(path) -> Run:
    """Read a benchmark run; ``row`` numbers in errors are 1-based positions in 'benchmarks'."""
    p = resolve_path(path)
    try:
        text = p.read_text()
    except OSError as exc:
        raise BenchmarkFileError(f"cannot read ({exc.strerror})", file=p) from exc
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise BenchmarkFileError(f"not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno})",
                                 file=p) from exc
    if not isinstance(data, dict) or not isinstance(data.get("benchmarks"), list):
        raise BenchmarkFileError("not a pytest-benchmark JSON: no 'benchmarks' list", file=p, column="benchmarks")
    rows = []
    seen = set()
    for i, b in enumerate(data["benchmarks"], start=1):
        if not isinstance(b, dict):
            raise BenchmarkFileError("benchmark entry is not an object", file=p, row=i)
        stats = b.get("stats")
        if not isinstance(stats, dict):
            raise BenchmarkFileError("benchmark entry has no 'stats' object", file=p, row=i, column="stats")
        info = b.get("extra_info")
        if not isinstance(info, dict) or "case" not in info:
            raise BenchmarkFileError("benchmark entry has no 'extra_info.case' (not a decomp bench case)",
                                     file=p, row=i, column="extra_info.case")
        case = str(info["case"])
        if case in seen:
            raise BenchmarkFileError("case appears twice", file=p, row=i, column="extra_info.case", value=case)
        seen.add(case)
        vals = {k: _float(stats.get(k), p, i, f"stats.{k}") for k in ("min", "median", "mean", "max")}
        sd = stats.get("stddev", 0.0)
        vals["stddev"] = 0.0 if sd is None else _float(sd, p, i, "stats.stddev")
        try:
            rounds = int(stats.get("rounds", 1))
        except (TypeError, ValueError) as exc:
            raise BenchmarkFileError("not an integer", file=p, row=i, column="stats.rounds",
                                     value=stats.get("rounds")) from exc
        rows.append(Row(name=str(b.get("name", case)), case=case, rounds=rounds, info=info, **vals))
    return Run(path=p, rows=tuple(rows), machine_info=data.get("machine_info") or {},
               commit_info=data.get("commit_info") or {}, datetime=data.get("datetime"),
               decomp=data.get("decomp") or {})
