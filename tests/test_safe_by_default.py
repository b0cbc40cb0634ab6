"""Safe by default (issue 24): no silent wrong decision, no write nobody asked for, no code run by
another local user, every bad input or option refused clearly. One test (or a few) per numbered item
of the issue; each failed on the code before the fix (run against that tree with PYTHONPATH).

External facts used: Ipopt's documented option ``option_file_name`` (an options file named there,
by default ``ipopt.opt`` in the working folder, is read at each solve; Ipopt 3.14 documentation,
"Options Reference"); Dask's TLS security (``distributed.security.Security``: a connection without
the cluster's certificate is refused, Dask documentation "TLS/SSL"); CPython's limit of 4,300 digits
on integer-string conversion (``sys.get_int_max_str_digits``, Python 3.11 documentation).
"""

from __future__ import annotations

import errno
import json
import math
import os
import pathlib
import signal
import subprocess
import sys
import time

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from decomp import ladder
from decomp.cli import main
from decomp.errors import InstanceError
from decomp.instance import Instance
from decomp.io import read_instance

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from tiny import write_benchmark  # noqa: E402

ROOT = pathlib.Path(__file__).resolve().parents[1]
HUGE_INT = "1" * 5000          # more digits than CPython converts (4,300): json.loads raises ValueError


def _run(args, capsys):
    rc = main([str(a) for a in args])
    cap = capsys.readouterr()
    return rc, cap.out, cap.err


@pytest.fixture(scope="module")
def p100(p100_dir):
    return p100_dir


@pytest.fixture(scope="module")
def dlp_result(p100, tmp_path_factory):
    out = tmp_path_factory.mktemp("res") / "dlp.json"
    assert main(["solve", str(p100), "--model", "dlp", "--method", "highs", "--out", str(out)]) == 0
    return out


def _tiny(tmp_path, name="t", legs=None, products=None):
    d = tmp_path / name
    d.mkdir(parents=True)
    (d / "legs.csv").write_text(legs or "leg,origin,destination,capacity\nL1,KA1,HU2,100\nL2,HU2,BO3,80\n")
    (d / "products.csv").write_text(products or "product,legs,fare,mean,std\nP1,L1,100,10,3\nP2,L1 L2,150,5,2\n")
    return d


# ---------------------------------------------------------------------------- items 1-3: decide
@pytest.mark.solver
def test_decide_refuses_a_table_of_decomp_tables(p100, dlp_result, tmp_path, capsys):
    # item 1: a `decomp tables` file holds one row per leg, period and seats left; the last row won
    tables = tmp_path / "t.parquet"
    assert main(["tables", str(p100), "--static", str(dlp_result), "--periods", "5", "--out", str(tables)]) == 0
    leg = str(ladder.load_rung("p100").leg_ids[0])
    rc, _, err = _run(["decide", tables, "--legs", leg, "--fare", "100"], capsys)
    assert rc == 2 and "listed twice" in err and "decomp tables" in err and "row" in err


def test_decide_refuses_duplicate_and_negative_bid_prices(tmp_path, capsys):
    dup = tmp_path / "dup.csv"
    dup.write_text("leg,bid_price\nA1,100\nA2,3\nA1,5\n")
    rc, out, err = _run(["decide", dup, "--legs", "A1", "--fare", "50"], capsys)
    assert rc == 2 and "row 3" in err and "'A1' is listed twice" in err and not out
    neg = tmp_path / "neg.csv"
    neg.write_text("leg,bid_price\nA1,-50\n")
    rc, out, err = _run(["decide", neg, "--legs", "A1", "--fare", "10"], capsys)
    assert rc == 2 and "-50" in err and ">= 0" in err and not out
    # a result JSON whose bid_prices object names a leg twice (json keeps the last one silently)
    res = tmp_path / "r.json"
    res.write_text('{"model": "dlp", "method": "highs", "termination": "optimal", "solution_status": "optimal", '
                   '"bid_prices": {"A1": 100, "A1": 5}}')
    rc, _, err = _run(["decide", res, "--legs", "A1", "--fare", "50"], capsys)
    assert rc == 2 and "appears twice" in err


def test_decide_refuses_a_leg_repeated_in_the_itinerary(tmp_path, capsys):
    # item 2: "L L" counted the same leg twice
    t = tmp_path / "bp.csv"
    t.write_text("leg,bid_price\nL,40\n")
    rc, out, err = _run(["decide", t, "--legs", "L L", "--fare", "100"], capsys)
    assert rc == 2 and "appears twice" in err and not out


@pytest.mark.solver
def test_decide_from_a_non_optimal_result_says_so(p100, tmp_path, capsys):
    # item 3: a result stopped by its iteration limit; the decision must carry its status
    res = tmp_path / "limited.json"
    assert main(["solve", str(p100), "--model", "pnlp", "--method", "ipopt", "--iteration-limit", "1",
                 "--out", str(res)]) == 1
    capsys.readouterr()
    leg = str(ladder.load_rung("p100").leg_ids[0])
    rc, out, err = _run(["decide", res, "--legs", leg, "--fare", "1000"], capsys)
    assert rc == 1 and "WARNING" in out and "iteration_limit" in out and "not certified optimal" in err
    rc, out, _ = _run(["decide", res, "--legs", leg, "--fare", "1000", "--json"], capsys)
    d = json.loads(out)
    assert rc == 1 and d["source_status"].startswith("iteration_limit") and d["warning"]
    from decomp.result import SolveResult

    decision = SolveResult.from_json(res).decide(leg, 1000)
    assert decision.to_dict()["warning"] and "WARNING" in decision.text()


# ---------------------------------------------------------------------------- item 4: with_forecast
def _inst():
    return Instance.from_lists([("L1", "KA1", "HU2", 100.0), ("L2", "HU2", "BO3", 80.0)],
                               [("P1", ["L1"], 100.0, 10.0, 3.0), ("P2", ["L1", "L2"], 150.0, 30.0, 2.0),
                                ("P3", ["L2"], 90.0, 8.0, 2.5)])


def test_with_forecast_aligns_a_series_by_product_id():
    pd = pytest.importorskip("pandas")
    inst = _inst()
    mean = pd.Series({"P3": 7.0, "P1": 11.0, "P2": 30.0})       # not in the instance's order
    out = inst.with_forecast(mean=mean)
    assert out.mean.tolist() == [11.0, 30.0, 7.0]
    assert inst.with_forecast(std={"P2": 1.0, "P1": 2.0, "P3": 3.0}).std.tolist() == [2.0, 1.0, 3.0]
    with pytest.raises(InstanceError, match="no value for product 'P3'") as e:
        inst.with_forecast(mean=pd.Series({"P1": 1.0, "P2": 2.0}))
    assert e.value.row == 3 and e.value.column == "mean"
    with pytest.raises(InstanceError, match="unknown product id 'P9'"):
        inst.with_forecast(mean={"P1": 1.0, "P2": 2.0, "P3": 3.0, "P9": 4.0})


@pytest.mark.parametrize("bad,words", [(-5.0, "must be >= 0"), (math.nan, "NaN"), (2e6, "limit"),
                                       ("12", "not a number")])
def test_with_forecast_checks_values_as_files_are(bad, words):
    with pytest.raises(InstanceError, match=words) as e:
        _inst().with_forecast(mean=[10.0, bad, 8.0])
    assert e.value.row == 2 and e.value.column == "mean"


# ---------------------------------------------------------------------------- item 5: Parquet text
def test_parquet_text_in_a_number_column_is_refused(tmp_path):
    d = tmp_path / "pq"
    d.mkdir()
    pq.write_table(pa.table({"leg": ["L1"], "origin": ["KA1"], "destination": ["HU2"], "capacity": [10.0]}),
                   d / "legs.parquet")
    pq.write_table(pa.table({"product": ["P1"], "legs": ["L1"], "fare": ["100"], "mean": [1.0], "std": [0.5]}),
                   d / "products.parquet")
    with pytest.raises(InstanceError, match="holds text, not numbers") as e:
        read_instance(d)
    assert e.value.row == 1 and e.value.column == "fare"


# ---------------------------------------------------------------------------- item 7: ipopt.opt
def _hostile_ipopt_opt(tmp_path, monkeypatch, more=""):
    """A working folder whose ipopt.opt would overwrite victim.txt with Ipopt's log; returns victim."""
    victim = tmp_path / "victim.txt"
    victim.write_text("keep me\n")
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    (cwd / "ipopt.opt").write_text(f"output_file {victim}\nfile_print_level 5\n{more}")
    monkeypatch.chdir(cwd)
    return victim


@pytest.mark.solver
@pytest.mark.parametrize("method", ["ipopt", "pyomo-ipopt"])
def test_an_ipopt_opt_in_the_working_folder_is_not_read(p100, tmp_path, monkeypatch, capsys, method):
    victim = _hostile_ipopt_opt(tmp_path, monkeypatch, "max_iter 1\n")
    rc, _, _ = _run(["solve", p100, "--model", "pnlp", "--method", method, "--out", tmp_path / "r.json"], capsys)
    assert rc == 0                                    # max_iter 1 from the file would have stopped it
    assert victim.read_text() == "keep me\n"


@pytest.mark.solver
def test_baseline_check_reads_no_ipopt_opt(tmp_path, monkeypatch, capsys):
    from decomp import baseline as bl

    base = tmp_path / "base"
    bl.record(base, cases=[bl.Case(bl.InstanceSpec("micro1", "micro", {"seed": 1, "n_products": 12}),
                                   "pnlp", "ipopt")])
    victim = _hostile_ipopt_opt(tmp_path, monkeypatch)
    rc, _, _ = _run(["baseline", "check", base], capsys)
    assert rc == 0 and victim.read_text() == "keep me\n"


# ---------------------------------------------------------------------------- item 8: Dask
def test_the_embedded_cluster_refuses_a_client_without_its_credentials():
    pytest.importorskip("distributed")
    from distributed import Client

    from decomp.production.runner import start_cluster

    cluster, client = start_cluster(1)
    try:
        address = cluster.scheduler_address
        assert address.startswith("tls://127.0.0.1:")
        assert client.run(os.getpid)                  # the run's own client works
        for addr, kw in ((address.replace("tls://", "tcp://"), {}), (address, {})):
            with pytest.raises(Exception):            # noqa: B017 - refused however Dask says it
                c = Client(addr, timeout=3, **kw)
                c.run(os.getuid)                      # reached only if the connection was accepted
    finally:
        client.close()
        cluster.close()


# ---------------------------------------------------------------------------- item 9: marked folders
def test_baseline_record_force_replaces_only_a_baseline(tmp_path, capsys):
    own = tmp_path / "own"
    own.mkdir()
    (own / "thesis.tex").write_text("mine")
    f = tmp_path / "file"
    f.write_text("mine")
    for target in (own, f, pathlib.Path("/dev/null")):
        rc, _, err = _run(["baseline", "record", "--suite", "micro", "--force", "--out", target], capsys)
        assert rc == 2 and str(target) in err and "Traceback" not in err
    assert (own / "thesis.tex").read_text() == "mine" and f.read_text() == "mine"
    assert pathlib.Path("/dev/null").is_char_device()


def test_generate_refuses_a_folder_of_the_users_own_tables(tmp_path, capsys):
    own = _tiny(tmp_path, "own")
    before = {p.name: p.read_bytes() for p in own.iterdir()}
    rc, _, err = _run(["generate", "--products", "20", "--out", own], capsys)
    assert rc == 2 and "not written by decomp" in err
    assert {p.name: p.read_bytes() for p in own.iterdir()} == before


# ---------------------------------------------------------------------------- items 10-11: baseline check
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
    rc, _, err = _run(["baseline", "check", base], capsys)
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
    rc, out, _ = _run(["baseline", "check", base, "--case", case.name], capsys)
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
    rc, out, _ = _run(["baseline", "check", base], capsys)
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
            t0 = time.perf_counter()
            while time.perf_counter() - t0 < seconds:      # wall time passes, CPU time is spent too
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


# ---------------------------------------------------------------------------- items 12-13: options
@pytest.mark.parametrize("args", [
    ["run", "{inst}", "--workers", "0"], ["run", "{inst}", "--workers", "-1"], ["run", "{inst}", "--retries", "-1"],
    ["run", "{inst}", "--dashboard", "-1"], ["run", "{inst}", "--dashboard", "70000"],
    ["run", "{inst}", "--warm-start", "/no/such/dir"],
    ["baseline", "record", "--suite", "micro", "--repeat", "0"], ["baseline", "record", "--suite", "micro", "--repeat", "-1"],
    ["baseline", "check", "{inst}", "--repeat", "0"],
])
def test_bad_options_are_refused_before_any_work(args, tmp_path, capsys):
    inst = _tiny(tmp_path)
    argv = [a.format(inst=inst) for a in args] + (["--out", str(tmp_path / "out")] if args[0] != "baseline"
                                                   or args[1] == "record" else [])
    t0 = time.perf_counter()
    rc, _, err = _run(argv, capsys)
    option = next(a for a in args if a.startswith("--"))
    assert rc == 2 and option in err and "Traceback" not in err
    assert time.perf_counter() - t0 < 30                  # refused, not run (-1 workers hung for 10 minutes)
    assert not (tmp_path / "out").exists()


def test_run_out_empty_is_refused(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    rc, _, err = _run(["run", _tiny(tmp_path), "--out", ""], capsys)
    assert rc == 2 and "--out" in err and "empty" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t"]          # nothing written into the cwd


def test_simulate_workers_0_says_it_runs_in_this_process(tmp_path, capsys):
    rc, _, err = _run(["simulate", _tiny(tmp_path), "--policies", "fcfs", "--paths", "2", "--workers", "0",
                       "--no-progress", "--out", tmp_path / "s"], capsys)
    assert rc == 0 and "--workers 0: the paths run in this process" in err


# ---------------------------------------------------------------------------- item 14: tracebacks
def test_json_integers_of_5000_digits_are_refused_naming_the_file(tmp_path, capsys):
    d = _tiny(tmp_path)
    (d / "meta.json").write_text('{"seed": ' + HUGE_INT + "}")
    rc, _, err = _run(["validate", d], capsys)
    assert rc == 2 and "meta.json" in err and "Traceback" not in err
    res = tmp_path / "r.json"
    res.write_text('{"model": "dlp", "method": "highs", "termination": "optimal", "solution_status": "optimal", '
                   '"bid_prices": {"L1": ' + HUGE_INT + "}}")
    bench = tmp_path / "benchmark.json"
    bench.write_text('{"machine_info": {"x": ' + HUGE_INT + '}, "benchmarks": []}')
    for argv, name in ((["decide", res, "--legs", "L1", "--fare", "5"], "r.json"),
                       (["solve", _tiny(tmp_path, "u"), "--model", "pnlp", "--method", "lagrangian", "--warm-start",
                         res, "--out", tmp_path / "o.json"], "r.json"),
                       (["bench", "compare", bench, bench], "benchmark.json"),
                       (["bench", "report", bench, "--out", tmp_path / "rep"], "benchmark.json"),
                       (["bench", "history", "--add", bench, "--store", tmp_path / "h.sqlite"], "benchmark.json")):
        rc, _, err = _run(argv, capsys)
        assert rc == 2 and name in err and "digits" in err and "Traceback" not in err


def test_json_integers_of_5000_digits_in_a_baseline_are_refused(tmp_path, capsys):
    from decomp import baseline as bl

    base = tmp_path / "b"
    bl.record(base, cases=[bl.Case(_inst().with_forecast(meta={"name": "t"}), "dlp", "highs")],
              solve_fn=lambda instance, **kw: _canned(instance))
    for rel in ("manifest.json", "cases/t-dlp-highs/result.json"):
        p = base / rel
        saved = p.read_text()
        p.write_text(saved.replace("{", '{"x": ' + HUGE_INT + ", ", 1))
        rc, _, err = _run(["baseline", "check", base], capsys)
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


@pytest.mark.parametrize("fare", [pa.array([2**62], pa.int64()), pa.array([2**64 - 1], pa.uint64())])
def test_huge_parquet_integers_are_refused_with_the_limit(tmp_path, fare, capsys):
    d = tmp_path / "pq"
    d.mkdir()
    pq.write_table(pa.table({"leg": ["L1"], "origin": ["KA1"], "destination": ["HU2"], "capacity": [10.0]}),
                   d / "legs.parquet")
    pq.write_table(pa.table({"product": ["P1"], "legs": ["L1"], "fare": fare, "mean": [1.0], "std": [0.5]}),
                   d / "products.parquet")
    rc, _, err = _run(["validate", d], capsys)
    assert rc == 2 and "row 1, column 'fare'" in err and "limit" in err and "Traceback" not in err


def test_a_subnormal_std_is_refused_before_the_solve(tmp_path, capsys):
    d = _tiny(tmp_path, products="product,legs,fare,mean,std\nP1,L1,100,10,1e-320\nP2,L1 L2,150,5,2\n")
    rc, _, err = _run(["solve", d, "--model", "pnlp", "--method", "lagrangian", "--out", tmp_path / "r.json"], capsys)
    assert rc == 2 and "row 1, column 'std'" in err and "subnormal" in err


_WANTS_FILE = ("tables", "bench compare --out")
_BAD_OUT = [(command, make)
            for command in ("simulate", "tables", "size", "bench", "bench report", "bench compare --out",
                            "baseline record", "baseline check")
            for make in ("folder" if command in _WANTS_FILE else "file", "device", "under-file")]


@pytest.mark.parametrize("command,make", _BAD_OUT)
def test_a_bad_out_is_refused_before_the_work(command, make, tmp_path, capsys, micro_bench):
    blocker = tmp_path / "blocker"
    blocker.write_text("x")
    target = {"file": blocker, "folder": tmp_path, "device": pathlib.Path("/dev/null"),
              "under-file": blocker / "x"}[make]
    inst = _tiny(tmp_path)
    argv = {"simulate": ["simulate", inst, "--policies", "fcfs", "--paths", "2", "--workers", "0", "--no-progress",
                         "--out", target],
            "tables": ["tables", inst, "--model", "dlp", "--periods", "5", "--out", target],
            "size": ["size", "--bench", micro_bench, "--products", "100000", "--window", "1h", "--out", target],
            "bench": ["bench", "--suite", "micro", "-k", "no_such_case", "--out", target],
            "bench report": ["bench", "report", micro_bench, "--out", target],
            "bench compare --out": ["bench", "compare", micro_bench, micro_bench, "--out", target],
            "baseline record": ["baseline", "record", "--suite", "micro", "--out", target],
            "baseline check": ["baseline", "check", inst, "--out", target]}[command]
    rc, _, err = _run(argv, capsys)
    assert rc == 2 and f"--out '{target}'" in err and "Traceback" not in err, err     # the option and its path
    assert blocker.read_text() == "x"


@pytest.fixture
def micro_bench(tmp_path):
    return write_benchmark(tmp_path / "bench" / "benchmark.json")


# ---------------------------------------------------------------------------- item 15: exit 2
@pytest.mark.parametrize("argv", [
    ["solve", "{inst}", "--model", "dlp", "--method", "highs", "--out", "{file}/x.json"],
    ["run", "{inst}", "--out", "{file}/r"],
    ["run", "{inst}", "--out", "/dev/null"],
])
def test_outputs_that_cannot_be_written_exit_2(argv, tmp_path, capsys):
    f = tmp_path / "file"
    f.write_text("x")
    inst = _tiny(tmp_path)
    rc, _, err = _run([a.format(inst=inst, file=f) for a in argv], capsys)
    assert rc == 2 and "--out" in err


# ---------------------------------------------------------------------------- item 16: full disk
def _full_disk(monkeypatch):
    """Every write fails as a full disk does: ENOSPC from write(), which names no file."""
    def full(*a, **k):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    monkeypatch.setattr(pathlib.Path, "write_text", full)
    monkeypatch.setattr(pathlib.Path, "write_bytes", full)
    monkeypatch.setattr(pq, "write_table", full)


@pytest.mark.solver
def test_a_full_disk_is_named_by_the_path_that_failed(tmp_path, monkeypatch, capsys, dlp_result, p100):
    # item 16: generate, baseline record, baseline check, simulate and tables said "cannot write : ..."
    inst = _tiny(tmp_path)
    base = tmp_path / "base"
    assert main(["baseline", "record", "--suite", "micro", "--out", str(base)]) == 0
    _full_disk(monkeypatch)
    for argv, path in ((["generate", "--products", "20", "--out", tmp_path / "g"], tmp_path / "g"),
                       (["simulate", inst, "--policies", "fcfs", "--paths", "2", "--workers", "0", "--no-progress",
                         "--out", tmp_path / "s"], tmp_path / "s"),
                       (["tables", p100, "--static", dlp_result, "--periods", "3", "--out", tmp_path / "t.parquet"],
                        tmp_path / "t.parquet"),
                       (["baseline", "record", "--suite", "micro", "--out", tmp_path / "b2"], tmp_path / "b2"),
                       (["baseline", "check", base, "--out", tmp_path / "chk"], tmp_path / "chk")):
        rc, _, err = _run(argv, capsys)
        assert rc == 1 and "No space left on device" in err and str(path) in err and "Traceback" not in err, err
        assert "cannot write :" not in err


def test_a_full_disk_names_the_file_it_refused_not_the_one_written(tmp_path, monkeypatch, capsys):
    import pyarrow.csv as pcsv

    inst = _tiny(tmp_path)

    def full(table, path, *a, **k):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    monkeypatch.setattr(pcsv, "write_csv", full)
    rc, _, err = _run(["solve", inst, "--model", "dlp", "--method", "highs", "--out", tmp_path / "ok.json",
                       "--product-table", tmp_path / "p.csv"], capsys)
    assert rc == 1 and f"cannot write {tmp_path / 'p.csv'}" in err and (tmp_path / "ok.json").is_file()


def test_a_read_only_folder_is_named_not_the_temporary_file(tmp_path, monkeypatch, capsys):
    import tempfile

    def read_only(*a, **k):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(tmp_path / ".r.json.abc.tmp"))
    monkeypatch.setattr(tempfile, "mkstemp", read_only)
    rc, _, err = _run(["solve", _tiny(tmp_path), "--model", "dlp", "--method", "highs", "--out",
                       tmp_path / "r.json"], capsys)
    assert rc == 1 and f"cannot write {tmp_path / 'r.json'}" in err and ".tmp" not in err


# ---------------------------------------------------------------------------- item 17: documented rules
@pytest.mark.parametrize("kind", ["loop", "dangling"])
def test_a_meta_json_link_to_nowhere_is_refused(tmp_path, kind, capsys):
    d = _tiny(tmp_path)
    (d / "meta.json").symlink_to(d / "meta.json" if kind == "loop" else d / "nowhere.json")
    rc, _, err = _run(["validate", d], capsys)
    assert rc == 2 and "meta.json" in err


def test_terminal_escapes_in_meta_are_refused(tmp_path, capsys):
    d = _tiny(tmp_path)
    (d / "meta.json").write_text(json.dumps({"name": "net\x1b[2J\x1b[31mRED"}))
    rc, out, err = _run(["inspect", d], capsys)
    assert rc == 2 and "\x1b" not in out + err and "meta.json" in err and "column 'name'" in err


@pytest.mark.parametrize("char", ["\u0085", "\u2028", "\u202e"])
@pytest.mark.parametrize("where", ["leg", "product"])
def test_ids_with_line_separators_or_a_right_to_left_override_are_refused(tmp_path, char, where, capsys):
    legs = f"leg,origin,destination,capacity\nL1,KA1,HU2,100\nL{char}2,HU2,BO3,80\n" if where == "leg" else None
    prods = (f"product,legs,fare,mean,std\nP1,L1,100,10,3\nP{char}2,L1,150,5,2\n" if where == "product" else
             "product,legs,fare,mean,std\nP1,L1,100,10,3\n")
    rc, out, err = _run(["validate", _tiny(tmp_path, legs=legs, products=prods)], capsys)
    assert rc == 2 and f"row 2, column '{where}'" in err and char not in err


# ---------------------------------------------------------------------------- item 18: legs per itinerary
def _long_chain(n):
    legs = [(f"L{k}", f"S{k}", f"S{k + 1}", 10.0) for k in range(n)]
    return legs, [("P1", ["L0"], 100.0, 1.0, 0.5), ("P2", [l[0] for l in legs], 500.0, 1.0, 0.5)]


def test_itineraries_beyond_the_documented_limit_are_refused_everywhere(tmp_path):
    from decomp.validation import MAX_LEGS_PER_ITINERARY

    assert MAX_LEGS_PER_ITINERARY == 16
    Instance.from_lists(*_long_chain(16))                                  # at the limit: accepted
    legs, prods = _long_chain(17)
    for build in (lambda: Instance.from_lists(legs, prods),
                  lambda: _from_frames(legs, prods),
                  lambda: read_instance(_folder(tmp_path, legs, prods)),
                  lambda: Instance(leg_ids=[l[0] for l in legs], leg_origin=[l[1] for l in legs],
                                   leg_destination=[l[2] for l in legs], capacity=[10.0] * 17,
                                   product_ids=["P1", "P2"], leg_ptr=[0, 1, 18],
                                   leg_index=[0] + list(range(17)), fare=[100.0, 500.0], mean=[1.0, 1.0],
                                   std=[0.5, 0.5])):
        with pytest.raises(InstanceError, match="limit is 16 legs per itinerary") as e:
            build()
        assert e.value.row == 2 and e.value.column == "legs" and "products" in str(e.value.file)


def _from_frames(legs, prods):
    pd = pytest.importorskip("pandas")
    return Instance.from_frames(pd.DataFrame(legs, columns=["leg", "origin", "destination", "capacity"]),
                                pd.DataFrame([(p[0], " ".join(p[1]), *p[2:]) for p in prods],
                                             columns=["product", "legs", "fare", "mean", "std"]))


def _folder(tmp_path, legs, prods):
    d = tmp_path / "long"
    d.mkdir()
    (d / "legs.csv").write_text("leg,origin,destination,capacity\n" + "".join(f"{a},{b},{c},{x}\n" for a, b, c, x in legs))
    (d / "products.csv").write_text("product,legs,fare,mean,std\n" +
                                    "".join(f"{p},{' '.join(l)},{f},{m},{s}\n" for p, l, f, m, s in prods))
    return d


# ---------------------------------------------------------------------------- item 19: signals
@pytest.fixture
def terminal_sigint():
    """SIGINT as a terminal gives it: Python's own handler, installed at the OS level too, whatever
    earlier tests of this process did. (Two full runs under heavy load saw a SIGINT sent after the last
    task go unnoticed here; the cause is not established: 50 runs of these tests alone and a full run
    watching SIGINT's disposition after every test saw neither the failure nor any change.)"""
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    yield
    signal.signal(signal.SIGINT, previous)


def _as_from_a_terminal():
    """Popen preexec_fn: the child starts with SIGINT at its default, as from an interactive shell."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _signal_self_within(monkeypatch, module, name, sig):
    """Send ``sig`` to this process at the start of ``module.name`` (after the last task is written:
    while the summary is written, or as the collection of finished tasks returns)."""
    real = getattr(module, name)

    def wrapped(*a, **k):
        if name == "_collect":
            out = real(*a, **k)
            os.kill(os.getpid(), sig)          # every task is finished: the signal lands as _collect returns
            return out
        os.kill(os.getpid(), sig)
        return real(*a, **k)
    monkeypatch.setattr(module, name, wrapped)


@pytest.mark.solver
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT])
@pytest.mark.parametrize("when", ["while the summary is written", "as the last result is collected"])
def test_a_signal_after_the_last_task_still_writes_the_summary(tmp_path, monkeypatch, capsys, sig, when,
                                                              terminal_sigint):
    from decomp.production import runner, summary

    if when == "while the summary is written":
        _signal_self_within(monkeypatch, summary, "write_summary", sig)
    else:
        _signal_self_within(monkeypatch, runner, "_collect", sig)
    out = tmp_path / "out"
    rc, _, err = _run(["run", _tiny(tmp_path), "--dates", "2", "--start", "2027-04-01", "--workers", "1",
                       "--out", out, "--no-progress"], capsys)
    s = json.loads((out / "summary.json").read_text())
    assert s["totals"]["ok"] == 2 and s["interrupted"] is None, err
    assert s["signal_after_last_task"] == sig.name and rc == 0, err
    assert "arrived after the last task" in err


def _run_batch_process(out, days):
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [os.environ.get("PYTHONPATH"), str(ROOT)]))}
    return subprocess.Popen([sys.executable, "-m", "decomp.cli", "run", "gen:1000:2", "--dates", str(days),
                             "--start", "2027-04-01", "--workers", "2", "--out", str(out), "--no-progress"],
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, preexec_fn=_as_from_a_terminal)


@pytest.mark.solver
def test_ctrl_c_to_the_process_group_prints_no_worker_tracebacks(tmp_path):
    out = tmp_path / "out"
    proc = _run_batch_process(out, days=40)
    deadline = time.monotonic() + 180
    while not list(out.glob("tasks/*/result.json")) and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.05)
    assert proc.poll() is None, "the run ended before the first task was seen: nothing to interrupt"
    os.killpg(proc.pid, signal.SIGINT)                # the whole group, as a terminal's Ctrl-C does
    _, err = proc.communicate(timeout=180)
    assert "Traceback" not in err and "KeyboardInterrupt" not in err, err
    s = json.loads((out / "summary.json").read_text())
    if proc.returncode == 1:                          # the usual case: cut short, finished tasks kept
        assert s["interrupted"] == "KeyboardInterrupt" and "interrupted" in err
    else:                                             # on a slow machine the signal may come after the end
        assert proc.returncode == 0 and s["signal_after_last_task"] == "SIGINT"


# ---------------------------------------------------------------------------- item 20: separators
@pytest.mark.parametrize("sep,word", [(";", "';' (semicolons)"), ("\t", "tabs")])
def test_a_file_with_another_separator_is_named_for_it(tmp_path, sep, word, capsys):
    legs = "\n".join(sep.join(r) for r in (["leg", "origin", "destination", "capacity"], ["L1", "KA1", "HU2", "100"]))
    rc, _, err = _run(["validate", _tiny(tmp_path, legs=legs + "\n")], capsys)
    assert rc == 2 and word in err and "legs.csv" in err


def test_a_thousands_separator_gets_a_hint(tmp_path, capsys):
    d = _tiny(tmp_path, products='product,legs,fare,mean,std\nP1,L1,"1,200",10,3\nP2,L1 L2,150,5,2\n')
    rc, _, err = _run(["validate", d], capsys)
    assert rc == 2 and "row 1, column 'fare'" in err and "thousands separator" in err


def test_python_api_errors_keep_the_row():
    with pytest.raises(InstanceError) as e:
        Instance.from_lists([("L1", "KA1", "HU2", 100.0)], [("P1", ["L1"], 100.0, 1.0, 0.5),
                                                            ("P2", ["L1"], "1,200", 1.0, 0.5)])
    assert e.value.row == 2 and e.value.column == "fare" and e.value.file == "products"
    pd = pytest.importorskip("pandas")
    legs = pd.DataFrame({"leg": ["L1"], "origin": ["KA1"], "destination": ["HU2"], "capacity": [100.0]})
    prods = pd.DataFrame({"product": ["P1", "P2"], "legs": ["L1", "L1"], "fare": [100.0, "1,200"],
                          "mean": [1.0, 1.0], "std": [0.5, 0.5]})
    with pytest.raises(InstanceError) as e:
        Instance.from_frames(legs, prods)
    assert e.value.row == 2 and e.value.column == "fare"
