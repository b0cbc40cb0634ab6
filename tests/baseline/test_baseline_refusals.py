"""A baseline check never passes what it cannot compare (a case cut to its header, relabelled or
deleted), judges time on CPU time with the load beside it, and ``record --force`` replaces only a
baseline.

External fact used: CPython's limit of 4,300 digits on integer-string conversion
(tests/support/tiny.HUGE_INT).
"""

from __future__ import annotations

import json
import pathlib
import time

import numpy as np
import pytest

from decomp.cli import main
from decomp.instance import Instance

from support.cli import run_cli
from support.tiny import HUGE_INT, tiny_instance


def test_baseline_record_force_replaces_only_a_baseline(tmp_path, capsys):
    own = tmp_path / "own"
    own.mkdir()
    (own / "thesis.tex").write_text("mine")
    f = tmp_path / "file"
    f.write_text("mine")
    for target in (own, f, pathlib.Path("/dev/null")):
        rc, _, err = run_cli(["baseline", "record", "--suite", "micro", "--force", "--out", target], capsys)
        assert rc == 2 and str(target) in err and "Traceback" not in err
    assert (own / "thesis.tex").read_text() == "mine" and f.read_text() == "mine"
    assert pathlib.Path("/dev/null").is_char_device()


def _rehash(base):
    """Recompute the manifest's hashes after an edit (what anyone who can edit the folder can do)."""
    import hashlib

    m = json.loads((base / "manifest.json").read_text())
    for f in m["files"]:
        p = base / f["path"]
        if p.exists():
            f["sha256"], f["bytes"] = hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_size
    m["files"] = [f for f in m["files"] if (base / f["path"]).exists()]
    body = {k: v for k, v in m.items() if k != "manifest_sha256"}
    m["manifest_sha256"] = hashlib.sha256(json.dumps(body, sort_keys=True, separators=(",", ":")).encode()).hexdigest()
    (base / "manifest.json").write_text(json.dumps(m))


@pytest.fixture(scope="module")
def micro_baseline(tmp_path_factory):
    base = tmp_path_factory.mktemp("bl") / "base"
    assert main(["baseline", "record", "--suite", "micro", "--out", str(base)]) == 0
    return base


def _copy(base, tmp_path):
    import shutil

    out = tmp_path / "copy"
    shutil.copytree(base, out)
    return out


@pytest.mark.solver
def test_check_refuses_an_optimal_case_cut_to_its_header(micro_baseline, tmp_path, capsys):
    base = _copy(micro_baseline, tmp_path)
    case = sorted((base / "cases").iterdir())[0]
    (case / "bid_prices.csv").write_text("leg,bid_price\n")
    _rehash(base)
    rc, _, err = run_cli(["baseline", "check", base], capsys)
    assert rc == 2 and "no bid prices" in err and "bid_prices.csv" in err


@pytest.mark.solver
def test_check_does_not_pass_a_case_relabelled_with_nothing_to_compare(micro_baseline, tmp_path, capsys):
    base = _copy(micro_baseline, tmp_path)
    case = sorted((base / "cases").iterdir())[0]
    data = json.loads((case / "result.json").read_text())
    data.update(termination="iteration_limit", solution_status="no_solution", objective=None, bound=None, gap=None,
                certificate=None)
    (case / "result.json").write_text(json.dumps(data))
    (case / "bid_prices.csv").write_text("leg,bid_price\n")
    _rehash(base)
    rc, out, _ = run_cli(["baseline", "check", base, "--case", case.name], capsys)
    assert rc == 1 and "not_compared" in out


@pytest.mark.solver
def test_check_does_not_pass_with_a_case_deleted(micro_baseline, tmp_path, capsys):
    import shutil

    base = _copy(micro_baseline, tmp_path)
    gone = sorted((base / "cases").iterdir())[-1]
    shutil.rmtree(gone)
    m = json.loads((base / "manifest.json").read_text())
    m["cases"] = [c for c in m["cases"] if c != gone.name]
    (base / "manifest.json").write_text(json.dumps(m))
    _rehash(base)
    rc, out, _ = run_cli(["baseline", "check", base], capsys)
    assert rc == 1 and "missing" in out and gone.name in out


def test_time_regressions_are_judged_on_cpu_time_with_the_load_beside_them(tmp_path):
    from decomp import baseline as bl
    from decomp.result import SolutionStatus, SolveResult, Termination

    inst = Instance.from_lists([("QAAQHX", "QAA", "QHX", 10.0)], [("p", ["QAAQHX"], 100.0, 20.0, 4.0)],
                               meta={"name": "one"})

    def canned(instance, **kw):
        return SolveResult(model="dlp", method="highs", termination=Termination.OPTIMAL,
                           solution_status=SolutionStatus.OPTIMAL, objective=1000.0, bound=1000.0, gap=0.0,
                           leg_ids=instance.leg_ids, bid_price_array=np.array([100.0]),
                           product_ids=instance.product_ids, allocation=np.array([10.0]), iterations=1,
                           seconds={}, solver="canned", solver_version="0", raw_status="optimal", message=None,
                           certificate=None, history=(), options={})

    def busy_wait_solve(seconds):
        def solve(instance, **kw):
            # spends `seconds` of CPU time (and at least as much wall time), however busy the machine
            t0 = time.process_time()
            while time.process_time() - t0 < seconds:
                pass
            return canned(instance)
        return solve

    base = tmp_path / "b"
    bl.record(base, cases=[bl.Case(inst, "dlp", "highs")], solve_fn=busy_wait_solve(0.3), warmup=False)
    rec = json.loads((base / "cases/one-dlp-highs/result.json").read_text())["context"]
    assert rec["cpu_seconds"] is not None and rec["cpu_seconds"] > 0.1     # CPU time recorded beside wall time

    def sleeping_solve(instance, **kw):
        time.sleep(1.5)                     # wall time 5x, CPU time unchanged: a busy machine, not a regression
        return busy_wait_solve(0.3)(instance)
    rep = bl.check(base, solve_fn=sleeping_solve, warmup=False, thresholds=bl.Thresholds(time_floor=0.05))
    assert not rep.regression, rep.cases[0].findings
    slow = bl.check(base, solve_fn=busy_wait_solve(1.5), warmup=False, thresholds=bl.Thresholds(time_floor=0.05))
    finding = [f for f in slow.cases[0].findings if f["kind"] == "time"][0]
    assert slow.regression and "CPU time" in finding["message"] and "machine load" in finding["message"]
    assert slow.cases[0].metrics["time_runs"] == 3                         # measured again before flagged


def test_json_integers_of_5000_digits_in_a_baseline_are_refused(tmp_path, capsys):
    from decomp import baseline as bl

    base = tmp_path / "b"
    bl.record(base, cases=[bl.Case(tiny_instance().with_forecast(meta={"name": "t"}), "dlp", "highs")],
              solve_fn=lambda instance, **kw: _canned(instance))
    for rel in ("manifest.json", "cases/t-dlp-highs/result.json"):
        p = base / rel
        saved = p.read_text()
        p.write_text(saved.replace("{", '{"x": ' + HUGE_INT + ", ", 1))
        rc, _, err = run_cli(["baseline", "check", base], capsys)
        assert rc == 2 and rel.split("/")[-1] in err and "Traceback" not in err
        p.write_text(saved)


def _canned(instance):
    from decomp.result import SolutionStatus, SolveResult, Termination

    L, P = instance.n_legs, instance.n_products
    return SolveResult(model="dlp", method="highs", termination=Termination.OPTIMAL,
                       solution_status=SolutionStatus.OPTIMAL, objective=1.0, bound=1.0, gap=0.0,
                       leg_ids=instance.leg_ids, bid_price_array=np.zeros(L), product_ids=instance.product_ids,
                       allocation=np.zeros(P), iterations=1, seconds={}, solver="canned", solver_version="0",
                       raw_status="optimal", message=None, certificate=None, history=(), options={})
