"""Run the benchmark suite in a pytest subprocess and write its outputs.

:func:`run_suite` starts ``python -m pytest bench/ --suite S --benchmark-json
...`` with the progress plugin, shows a tqdm bar over the cases, then writes
into the output folder (each file atomically): ``benchmark.json`` (the raw
pytest-benchmark JSON with machine info), ``pytest.log``, ``report.md`` and
the PNG plots. A failed accuracy check fails its case in pytest, is listed in
the report, and makes the run's exit code 1.
"""

from __future__ import annotations

import dataclasses
import json
import logging
import os
import pathlib
import shutil
import subprocess
import sys
import tempfile
import time

from .. import atomic
from .progress import ENV as PROGRESS_ENV

log = logging.getLogger(__name__)

BENCH_JSON = "benchmark.json"
REPORT = "report.md"
LOG = "pytest.log"


def bench_dir() -> pathlib.Path:
    """The ``bench/`` folder of this checkout."""
    return pathlib.Path(__file__).resolve().parents[2] / "bench"


@dataclasses.dataclass(frozen=True)
class RunOutcome:
    returncode: int        # pytest's exit code (0 all passed, 1 some case failed, other: did not run)
    out: pathlib.Path
    json_path: pathlib.Path | None
    files: tuple
    wall_seconds: float
    n_cases: int
    n_failed: int


def _quiet_env(**extra) -> dict:
    """The environment of a pytest subprocess that writes nothing beside its outputs: no bytecode
    (conftest.py and the case module would get a __pycache__ in bench/). Variables of a pytest-xdist
    worker that started decomp are left out: pytest-benchmark turns itself off when it sees them."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("PYTEST_XDIST_")}
    return dict(env, PYTHONDONTWRITEBYTECODE="1", **extra)


def _pytest_command(suite, json_path, k, extra, python, revenue_paths: int = 0, storage=None) -> list:
    # pytest-benchmark makes its storage folder (./.benchmarks) at start-up unless it exists: point it
    # at a folder that does (the run's temporary folder), so nothing appears in the project folder
    cmd = [python, "-m", "pytest", str(bench_dir()), "--suite", suite,
           "-p", "decomp.benchsuite.progress", "-p", "no:cacheprovider",
           f"--benchmark-json={json_path}", "--benchmark-sort=name",
           f"--benchmark-storage=file://{storage or json_path.parent}",
           "-o", "addopts=", "-rfE", "-q", "--rootdir", str(bench_dir().parent)]
    if k:
        cmd += ["-k", k]
    if revenue_paths:
        cmd += ["--revenue-paths", str(int(revenue_paths))]
    return cmd + list(extra)


def list_cases(suite: str, k: str | None = None, python: str | None = None) -> list:
    """The case names of ``suite`` (selected by ``k``, a pytest -k expression), as pytest collects
    them; nothing is run and nothing is written (no cache, no bytecode, no benchmark storage)."""
    cmd = [python or sys.executable, "-m", "pytest", str(bench_dir()), "--suite", suite, "--collect-only", "-q",
           "-p", "no:cacheprovider", f"--benchmark-storage=file://{bench_dir()}",   # exists: nothing made
           "-o", "addopts=", "--rootdir", str(bench_dir().parent)]
    if k:
        cmd += ["-k", k]
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=str(bench_dir().parent), env=_quiet_env())
    ids = [line.split("::", 1)[1] for line in proc.stdout.splitlines() if "::" in line]
    if proc.returncode not in (0, 5):      # 5: nothing collected
        raise RuntimeError(f"pytest could not collect the suite (exit code {proc.returncode}): "
                           f"{(proc.stdout + proc.stderr)[-2000:]}")
    return [case_name(i) for i in ids]


def case_name(test_id: str) -> str:
    """The case name (``tiny-dlp-highs``) in a pytest test id (``test_solve[tiny-dlp-highs]``)."""
    return test_id.split("[", 1)[1].rstrip("]") if "[" in test_id else test_id


def _read_progress(path, pos):
    """New complete JSON lines of the progress file from byte ``pos``."""
    try:
        with open(path) as fh:
            fh.seek(pos)
            chunk = fh.read()
    except FileNotFoundError:
        return [], pos
    lines = chunk.split("\n")
    tail = lines.pop()            # incomplete last line (or "")
    events = []
    for line in lines:
        if line.strip():
            try:
                events.append(json.loads(line))
            except json.JSONDecodeError:
                log.warning("progress line not understood: %r", line)
    return events, pos + len(chunk) - len(tail)


def _follow(proc, prog, suite: str, progress: bool) -> tuple:
    """Follow the pytest subprocess's progress file until it ends: (failed case ids, cases done),
    with a bar unless ``progress`` is off. An interruption terminates the subprocess."""
    from tqdm import tqdm

    done, failed, bar, pos = 0, [], None, 0
    try:
        while True:
            finished = proc.poll() is not None
            events, pos = _read_progress(prog, pos)
            for ev in events:
                if ev.get("event") == "collected" and bar is None:
                    bar = tqdm(total=int(ev["n"]), desc=f"bench {suite}", unit="case",
                               disable=not progress, file=sys.stderr, dynamic_ncols=True)
                elif ev.get("event") == "done":
                    done += 1
                    if ev.get("outcome") == "failed":
                        failed.append(ev["nodeid"])
                    if bar is not None:
                        bar.set_postfix_str(case_name(ev["nodeid"])[:40]
                                            + (f" failed={len(failed)}" if failed else ""))
                        bar.update(1)
            if finished:
                return failed, done
            time.sleep(0.2)
    except BaseException:
        proc.terminate()
        proc.wait(timeout=30)
        raise
    finally:
        if bar is not None:
            bar.close()


def _write_report(json_path, out, plots: bool) -> list:
    """The plots (unless ``plots`` is off) and report.md of a run's benchmark.json; their paths."""
    from . import plots as bplots
    from . import report as breport
    from .results import load_run

    run = load_run(json_path)
    made = bplots.make_plots(run, out) if plots else []
    report_path = out / REPORT
    atomic.write_text(report_path, breport.render(run, plots=[p.name for p in made]))
    return [*made, report_path]


def run_suite(suite: str, out, k: str | None = None, extra_args=(), progress: bool = True,
              python: str | None = None, plots: bool = True, command: str | None = None,
              revenue_paths: int = 0) -> RunOutcome:
    """Run ``suite`` and write benchmark.json, pytest.log, report.md and plots into ``out``.

    ``revenue_paths`` > 0: each solve case's bid prices are also priced on that many
    booking sample paths, after timing (``revenue_*`` fields of its ``extra_info``).
    """
    if int(revenue_paths) < 0:
        raise ValueError(f"revenue_paths must be 0 (off) or positive, got {revenue_paths}")
    # absolute: pytest runs in the project folder, the caller may be anywhere
    out = pathlib.Path(out).absolute()
    out.mkdir(parents=True, exist_ok=True)
    python = python or sys.executable
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix=".bench-run-", dir=out) as tmp:
        tmp = pathlib.Path(tmp)
        json_tmp, prog, log_tmp = tmp / BENCH_JSON, tmp / "progress.jsonl", tmp / LOG
        env = _quiet_env(**{PROGRESS_ENV: str(prog), "MPLBACKEND": "Agg"})
        cmd = _pytest_command(suite, json_tmp, k, extra_args, python, revenue_paths)
        log.info("running %s", " ".join(cmd))
        with open(log_tmp, "w") as logfh:
            proc = subprocess.Popen(cmd, stdout=logfh, stderr=subprocess.STDOUT, env=env,
                                    cwd=str(bench_dir().parent))
            failed, n_done = _follow(proc, prog, suite, progress)
        rc = proc.returncode
        n_failed = len(failed)
        wall = time.perf_counter() - t0
        files = []
        final_log = out / LOG
        with atomic.atomic_path(final_log) as p:
            shutil.copyfile(log_tmp, p)
        files.append(final_log)
        json_path = None
        if json_tmp.exists():
            json_path = out / BENCH_JSON
            data = json.loads(json_tmp.read_text())
            data.setdefault("decomp", {})["run"] = {
                "suite": suite, "k": k, "revenue_paths": int(revenue_paths), "wall_seconds": wall, "pytest_exit_code": rc,
                "cases_run": n_done, "failed_cases": failed,
                "command": command or " ".join(cmd),
            }
            atomic.write_json(json_path, data)
            files.append(json_path)
    if json_path is not None:
        files += _write_report(json_path, out, plots)
    return RunOutcome(returncode=rc, out=out, json_path=json_path, files=tuple(files),
                      wall_seconds=wall, n_cases=n_done, n_failed=n_failed)
