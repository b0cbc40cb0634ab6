"""Production runs on Dask: batches, atomic per-task output, kills, resumes, bad input.

The cluster tests use a LocalCluster of two single-threaded worker processes
on small generated batches; every solve is a real solve (see METHOD).
"""

from __future__ import annotations

import datetime as dt
import json
import os
import signal

import numpy as np
import pytest

from decomp.errors import ConfigError
from decomp.options import SolverOptions
from decomp.production import batch as batch_mod
from decomp.production.batch import DateVariation, build_batch, date_range
from decomp.production.durations import format_duration, parse_duration
from decomp.production.runner import (BID_FILE, RESULT_FILE, RunConfig, read_bid_prices, read_finished,
                                      run_batch, task_dir)

#: (model, method) of the cluster tests: the production method.
METHOD = ("pnlp", "lagrangian")
BATCH = "gen:5000:5"


# -- no cluster -------------------------------------------------------------------

def test_parse_duration():
    assert parse_duration("2h") == 7200
    assert parse_duration("1h30m") == 5400
    assert parse_duration("90s") == 90
    assert parse_duration("180s") == 180
    assert parse_duration(2.5) == 2.5
    for bad in ("", "2x", "h", "-5", "0"):
        with pytest.raises(ConfigError):
            parse_duration(bad)
    assert format_duration(3723) == "1h02m03s"
    assert format_duration(125) == "2m05s"


def test_date_range():
    d = date_range("2027-01-01:2027-12-31")
    assert len(d) == 365 and d[0] == dt.date(2027, 1, 1) and d[-1] == dt.date(2027, 12, 31)
    # 2028 is a leap year (Gregorian rule: divisible by 4, not a century): 366 dates
    assert len(date_range("2028-01-01:2028-12-31")) == 366
    assert date_range(days=3, start="2027-02-27")[-1] == dt.date(2027, 3, 1)
    with pytest.raises(ConfigError):
        date_range("2027-02-01:2027-01-01")
    with pytest.raises(ConfigError):
        date_range("2027-13-01:2027-12-31")
    with pytest.raises(ConfigError):
        date_range("2027-01-01:2027-01-02", days=3)


def test_date_variation_deterministic_and_mean_one():
    var = DateVariation(seed=3, sigma=0.2, seasonal=0.0, weekday=(1.0,) * 7)
    day = dt.date(2027, 6, 1)
    f1, f2 = var.factors(day, 400_000), var.factors(day, 400_000)
    np.testing.assert_array_equal(f1, f2)
    assert not np.array_equal(f1, var.factors(day + dt.timedelta(days=1), 400_000))
    # Lognormal mean (a mathematical fact): E[exp(s Z - s^2/2)] = 1 for Z ~ N(0,1);
    # the sample mean is within 5 standard errors of 1.
    se = np.sqrt(np.expm1(0.2 ** 2)) / np.sqrt(f1.size)
    assert abs(f1.mean() - 1.0) < 5 * se
    # log factors are normal with sd sigma (same fact)
    assert abs(np.log(f1).std() - 0.2) < 0.002


def test_batch_shapes(tmp_path):
    from decomp.generator import generate
    from decomp.io import write_instance

    b = build_batch("gen:300:1", date_range(days=4, start="2027-01-01"))
    assert [t.key for t in b.tasks] == ["2027-01-01", "2027-01-02", "2027-01-03", "2027-01-04"]
    inst = b.tasks[1].load()
    base = generate(300, seed=1)
    f = DateVariation().factors(dt.date(2027, 1, 2), 300)
    np.testing.assert_allclose(inst.mean, base.mean * f)
    np.testing.assert_allclose(inst.std, base.std * f)
    np.testing.assert_array_equal(inst.capacity, base.capacity)
    for i in range(2):
        write_instance(generate(100 + 50 * i, seed=i), tmp_path / "nets" / f"net{i}")
    folder = build_batch(str(tmp_path / "nets"))
    assert sorted(t.key for t in folder.tasks) == ["net0", "net1"]
    assert folder.tasks[0].key == "net1"            # larger first
    crossed = build_batch(str(tmp_path / "nets"), date_range(days=2, start="2027-05-01"))
    assert len(crossed) == 4 and "net0_2027-05-01" in {t.key for t in crossed.tasks}
    with pytest.raises(Exception, match="not found"):
        build_batch(str(tmp_path / "missing"))


# -- on a cluster ---------------------------------------------------------------------

@pytest.fixture(scope="module")
def cluster():
    pytest.importorskip("distributed")
    from decomp.production.runner import start_cluster

    # the embedded cluster of decomp run itself: TLS with per-run credentials, workers ignoring SIGINT
    cl, client = start_cluster(2)
    yield cl, client
    client.close()
    cl.close()


def _batch(days=6):
    return build_batch(BATCH, date_range(days=days, start="2027-03-01"))


def _config(out, warm=None):
    return RunConfig(model=METHOD[0], method=METHOD[1], options=SolverOptions(tol=1e-9, threads=1),
                     out=str(out), warm_start_from=warm)


def _outputs(out, batch):
    """Bid prices and the solve figures of every task (what must be identical between runs)."""
    res = {}
    for spec in batch.tasks:
        d = task_dir(out, spec.key)
        rec = json.loads((d / RESULT_FILE).read_text())["context"]["record"]
        res[spec.key] = (read_bid_prices(d / BID_FILE), rec["objective"], rec["gap"], rec["iterations"],
                         rec["task_status"])
    return res


@pytest.fixture(scope="module")
def clean(cluster, tmp_path_factory):
    out = tmp_path_factory.mktemp("clean")
    b = _batch()
    s = run_batch(b, _config(out), client=cluster[1])
    return out, b, s


@pytest.mark.integration
@pytest.mark.solver
def test_clean_run(clean):
    out, b, s = clean
    t = s["totals"]
    assert t["ok"] == t["n_tasks"] == len(b) and t["failed"] == 0 and t["skipped"] == 0
    assert (out / "summary.json").is_file() and "| 2027-03-01 | ok |" in (out / "summary.md").read_text()
    # Peak memory per worker: every worker process that ran a task is listed with the largest
    # peak its tasks recorded (getrusage); a Python process that has imported numpy and scipy
    # holds well over 30 MiB (common practice, from memory: about 60-100 MiB).
    pids = {str(t["worker"]) for t in s["tasks"]}
    assert set(t["worker_peak_rss_mib"]) == pids
    assert all(30.0 < v < 1e5 for v in t["worker_peak_rss_mib"].values())
    assert "peak memory per worker" in (out / "summary.md").read_text()
    # Each task's answer is the one an in-process solve of the same instance gives.
    from decomp import solve

    spec = b.tasks[3]
    inst = spec.load()
    direct = solve(inst, model=METHOD[0], method=METHOD[1], options=SolverOptions(tol=1e-9, threads=1))
    stored = read_bid_prices(task_dir(out, spec.key) / BID_FILE)
    assert stored == {str(k): v for k, v in direct.bid_prices.items()}
    # Weak duality (a mathematical fact): the dual value at any bid prices >= 0 bounds the
    # optimum from above, so bound >= objective; the certified gap meets the tolerance.
    for spec in b.tasks:
        rec = json.loads((task_dir(out, spec.key) / RESULT_FILE).read_text())["context"]["record"]
        assert rec["bound"] >= rec["objective"] * (1 - 1e-12)
        assert -1e-12 <= rec["gap"] <= 1e-9          # rounding can make a closed gap slightly negative


@pytest.mark.integration
@pytest.mark.solver
def test_dlp_batch_against_linprog(cluster, tmp_path):
    b = build_batch("gen:3000:2", date_range(days=2, start="2027-07-01"))
    cfg = RunConfig(model="dlp", method="highs", options=SolverOptions(threads=1), out=str(tmp_path))
    s = run_batch(b, cfg, client=cluster[1])
    assert s["totals"]["ok"] == 2
    from scipy.optimize import linprog

    for spec in b.tasks:
        inst = spec.load()
        # Reference: scipy.optimize.linprog (HiGHS through scipy) on the DLP of the same date,
        # max f.x s.t. A x <= c, 0 <= x <= mean.
        lp = linprog(-inst.fare, A_ub=inst.A, b_ub=inst.capacity,
                     bounds=np.column_stack([np.zeros(inst.n_products), inst.mean]), method="highs")
        rec = json.loads((task_dir(tmp_path, spec.key) / RESULT_FILE).read_text())["context"]["record"]
        assert lp.status == 0
        assert rec["objective"] == pytest.approx(-lp.fun, rel=1e-8)


@pytest.mark.integration
@pytest.mark.solver
def test_rerun_skips_finished(clean, cluster):
    out, b, _ = clean
    s = run_batch(b, _config(out), client=cluster[1])
    assert s["totals"]["skipped"] == len(b) and s["totals"]["run"] == 0
    # other arguments (a tolerance) change the fingerprint: nothing counts as finished
    other = RunConfig(model=METHOD[0], method=METHOD[1], options=SolverOptions(tol=1e-7, threads=1), out=str(out))
    assert read_finished(out, b.tasks[0], other.fingerprint(b.tasks[0])) is None


@pytest.mark.integration
@pytest.mark.solver
def test_rerun_of_a_finished_pilot_keeps_its_measurements(clean, cluster):
    from decomp.production import sizing

    out, b, first = clean
    pairs = sizing.read_run_solves(out / "summary.json")
    overhead = sizing.read_run_overhead(out / "summary.json")
    s = run_batch(b, _config(out), client=cluster[1])          # every task finished: nothing solved
    assert s["totals"]["run"] == 0 and s["totals"]["skipped"] == len(b)
    # decomp size --calibrate reads the same pilot from the rewritten summary
    assert sizing.read_run_solves(out / "summary.json") == pairs and len(pairs) == len(b)
    assert sizing.read_run_overhead(out / "summary.json") == overhead
    assert s["measurements"]["tasks_run"] == len(b) and "kept from the run written" in (out / "summary.md").read_text()


@pytest.mark.integration
@pytest.mark.solver
def test_worker_killed_mid_run(clean, cluster, tmp_path):
    _, b, _ = clean
    cl, client = cluster
    killed = {}

    def on_event(kind, rec, prog):
        if kind == "done" and not killed:
            # kill (SIGKILL, by pid) a worker process the scheduler has tasks on
            processing = client.processing()
            pids = client.run(os.getpid)
            addr = max(processing, key=lambda a: len(processing[a]))
            killed.update(pid=pids[addr], tasks=len(processing[addr]))
            os.kill(pids[addr], signal.SIGKILL)

    s = run_batch(b, _config(tmp_path / "killed"), client=client, on_event=on_event)
    assert killed and killed["tasks"] >= 1
    assert s["totals"]["ok"] == len(b) and s["totals"]["failed"] == 0
    assert _outputs(tmp_path / "killed", b) == _outputs(clean[0], b)
    client.wait_for_workers(2, timeout=60)      # the nanny restarted the killed worker ...
    assert killed["pid"] not in client.run(os.getpid).values()   # ... as a new process
    # ... which ignores SIGINT too (the worker plugin reaches restarted workers)
    assert all(client.run(lambda: signal.getsignal(signal.SIGINT) == signal.SIG_IGN).values())


class _Stop(Exception):
    pass


@pytest.mark.integration
@pytest.mark.solver
def test_interrupted_then_resumed(clean, cluster, tmp_path):
    _, b, _ = clean
    out = tmp_path / "resumed"

    def stop_after_three(kind, rec, prog):
        if kind == "done" and prog.done >= 3:
            raise _Stop("operator pressed ctrl-c")

    with pytest.raises(_Stop):
        run_batch(b, _config(out), client=cluster[1], on_event=stop_after_three)
    partial = json.loads((out / "summary.json").read_text())
    assert partial["interrupted"] == "_Stop" and partial["totals"]["ok"] >= 3
    # A task already running on a worker when the run was interrupted still
    # finishes and writes its (complete, atomic) output: Dask cancels futures,
    # not running threads. Let them: a no-op on each single-threaded worker runs
    # only after its current task, so afterwards the finished set is fixed.
    client = cluster[1]
    barrier = [client.submit(int, 0, workers=[w], pure=False, allow_other_workers=False)
               for w in client.scheduler_info()["workers"]]
    client.gather(barrier)
    finished = {k for k in (s.key for s in b.tasks) if (task_dir(out, k) / RESULT_FILE).is_file()}
    mtimes = {k: (task_dir(out, k) / RESULT_FILE).stat().st_mtime_ns for k in finished}
    s = run_batch(b, _config(out), client=cluster[1])
    assert s["totals"]["ok"] == len(b)
    assert s["totals"]["skipped"] == len(finished) >= 3
    assert s["totals"]["run"] == len(b) - len(finished)
    assert all((task_dir(out, k) / RESULT_FILE).stat().st_mtime_ns == mtimes[k] for k in finished)
    assert _outputs(out, b) == _outputs(clean[0], b)


@pytest.mark.integration
@pytest.mark.solver
def test_corrupt_instance_fails_alone(cluster, tmp_path):
    from decomp.cli import main
    from decomp.generator import generate
    from decomp.io import write_instance

    nets = tmp_path / "nets"
    for i in range(3):
        write_instance(generate(300, seed=i), nets / f"net{i}", format="csv")
    products = nets / "net1" / "products.csv"
    lines = products.read_text().splitlines()
    head = lines[0].split(",")
    row = lines[5].split(",")
    row[head.index("fare")] = "twelve"
    lines[5] = ",".join(row)
    products.write_text("\n".join(lines) + "\n")
    out = tmp_path / "out"
    argv = ["run", str(nets), "--model", METHOD[0], "--method", METHOD[1], "--out", str(out),
            "--scheduler", cluster[0].scheduler_address, "--no-progress"]
    assert main(argv) == 2 and not out.exists()     # a TLS scheduler, no credentials configured: refused
    # the client's credentials through Dask's configuration, as the README tells for an external
    # scheduler (here the embedded cluster's own, held in memory)
    import dask

    sec = cluster[0].security
    with dask.config.set({"distributed.comm.require-encryption": True, "distributed.comm.tls.ca-file": sec.tls_ca_file,
                          "distributed.comm.tls.client.cert": sec.tls_client_cert,
                          "distributed.comm.tls.client.key": sec.tls_client_key}):
        rc = main(argv)
    assert rc == 1
    s = json.loads((out / "summary.json").read_text())
    by = {t["key"]: t for t in s["tasks"]}
    assert by["net0"]["task_status"] == by["net2"]["task_status"] == "ok"
    assert by["net1"]["task_status"] == "failed"
    err = by["net1"]["error"]
    assert "InstanceError" in err and "products.csv" in err and "row 5" in err and "fare" in err
    assert (task_dir(out, "net1") / "error.json").is_file()
    assert not (task_dir(out, "net1") / RESULT_FILE).exists()
    assert "| net1 | failed |" in (out / "summary.md").read_text()


@pytest.mark.integration
@pytest.mark.solver
def test_embedded_cluster_and_warm_start(clean, tmp_path):
    out0, b, _ = clean
    two = batch_mod.Batch(tasks=b.tasks[:2], description="two dates")
    s = run_batch(two, _config(tmp_path / "warm", warm=str(out0)), workers=1)
    assert s["totals"]["ok"] == 2 and s["totals"]["workers"] == 1
    assert all(t["warm_started"] for t in s["tasks"])
    rec = json.loads((task_dir(tmp_path / "warm", two.tasks[0].key) / RESULT_FILE).read_text())
    rec = rec["context"]["record"]
    assert rec["warm_start"]["legs_matched"] == rec["n_legs"]
    ref = _outputs(out0, two)
    got = _outputs(tmp_path / "warm", two)
    for k in ref:
        assert got[k][1] == pytest.approx(ref[k][1], rel=1e-8)    # same optimum from a warm start
        assert got[k][3] < ref[k][3]                               # in fewer iterations


def test_run_takes_warm_start_like_solve():
    # one option name across solve and run (the older --warm-start-from still works, with a warning:
    # tests/cli/test_vocabulary.py)
    from decomp.cli import build_parser

    args = build_parser().parse_args(["run", "gen:100", "--dates", "1", "--out", "o", "--warm-start", "prev"])
    assert args.warm_start_from == "prev"


def test_dates_of_a_generated_network_share_one_base_and_equal_fresh_ones():
    # The tasks of a gen: batch keep the last generated base network per worker; each date's
    # instance must equal one built from a fresh generate() (the generator is the source).
    from decomp.distributions import family_codes
    from decomp.generator import generate
    b = build_batch("gen:400:3", dates=[dt.date(2026, 12, 5), dt.date(2026, 12, 6)], demand="mix")
    for spec in b.tasks:
        inst = spec.load()
        fresh = DateVariation().apply(generate(400, seed=3, demand=spec.demand), dt.date.fromisoformat(spec.date),
                                      name=spec.key)
        for field in ("capacity", "fare", "mean", "std", "leg_index", "leg_ptr"):
            assert np.array_equal(getattr(inst, field), getattr(fresh, field)), (spec.key, field)
        assert np.array_equal(family_codes(inst), family_codes(fresh)), spec.key
    assert batch_mod._generated.cache_info().hits >= 1
