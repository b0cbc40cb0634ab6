"""Production runs under damage and faults: verified resume, content fingerprints, the output-folder
lock, a full or read-only folder, SIGTERM, the dashboard, and the fallback of a non-optimal task.

Faults are injected for real where a test can (files truncated, emptied, edited or removed
between runs; a process killed; a signal sent); a full disk is injected by making the write
raise the operating system's own error (ENOSPC, EROFS) inside an in-process cluster, where the
patched function is the one the worker calls. Reference answers come from Ipopt (normal-demand
PNLP) and from an uninterrupted run of the same batch.
"""

from __future__ import annotations

import errno
import json
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

from decomp.options import SolverOptions
from decomp.production import runner
from decomp.production.batch import build_batch, date_range
from decomp.production.lock import OutputLock, RunLockedError
from decomp.production.outputs import BID_FILE, RESULT_FILE, read_bid_prices, read_finished, task_dir

from support.paths import ROOT

BATCH = "gen:300:1"


@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("distributed")
    import logging

    # threads in this process: a function patched here is the one the tasks call
    cl = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None,
                                  silence_logs=logging.ERROR)
    c = distributed.Client(cl)
    yield c
    c.close()
    cl.close()


def _batch(days=4):
    return build_batch(BATCH, date_range(days=days, start="2027-04-01"))


def _cfg(out, **kw):
    kw.setdefault("options", SolverOptions(tol=1e-9, threads=1))
    return runner.RunConfig(model="pnlp", method=kw.pop("method", "lagrangian"), out=str(out), **kw)


def _answers(out, batch):
    return {s.key: read_bid_prices(task_dir(out, s.key) / BID_FILE) for s in batch.tasks}


@pytest.fixture(scope="module")
def clean(client, tmp_path_factory):
    out = tmp_path_factory.mktemp("clean")
    b = _batch()
    s = runner.run_batch(b, _cfg(out), client=client)
    assert s["totals"]["ok"] == len(b)
    return out, b, _answers(out, b)


# ---------------------------------------------------------------------------- verified resume
def _damage_all_ways(out, keys):
    """Five damaged finished tasks, each a different way; returns {key: what was done}."""
    done = {}
    k = iter(keys)
    p = task_dir(out, key := next(k)) / BID_FILE
    p.write_bytes(p.read_bytes()[: p.stat().st_size // 2])
    done[key] = "truncated"
    p = task_dir(out, key := next(k)) / BID_FILE
    p.write_bytes(b"")
    done[key] = "zero bytes"
    p = task_dir(out, key := next(k)) / BID_FILE
    t = pq.read_table(p)
    pq.write_table(pa.table({"leg": t.column("leg"),
                             "bid_price": pa.array(np.asarray(t.column("bid_price")) * 2.0)}), p)
    done[key] = "edited (valid Parquet, every bid price doubled)"
    (task_dir(out, key := next(k)) / BID_FILE).unlink()
    done[key] = "removed"
    return done


def test_resume_redoes_damaged_finished_output(client, clean, tmp_path):
    import shutil

    src, b, ref = clean
    out = tmp_path / "run"
    shutil.copytree(src, out)
    keys = [s.key for s in b.tasks]
    damaged = _damage_all_ways(out, keys)
    s = runner.run_batch(b, _cfg(out), client=client)
    t = s["totals"]
    assert t["ok"] == len(b) and t["skipped"] == len(b) - len(damaged) and t["run"] == len(damaged)
    assert t["redone"] == len(damaged)
    by = {x["key"]: x for x in s["tasks"]}
    assert "checksum" in by[keys[0]]["redone"] and "checksum" in by[keys[2]]["redone"]
    assert "missing" in by[keys[3]]["redone"]
    assert _answers(out, b) == ref          # byte-for-byte the answers of the undamaged run


def test_resume_redoes_unreadable_result_json(client, clean, tmp_path):
    import shutil

    src, b, ref = clean
    out = tmp_path / "run"
    shutil.copytree(src, out)
    key = b.tasks[0].key
    (task_dir(out, key) / RESULT_FILE).write_text('{"fingerprint": ')
    s = runner.run_batch(b, _cfg(out), client=client)
    assert s["totals"]["skipped"] == len(b) - 1 and _answers(out, b) == ref


# ---------------------------------------------------------------------------- the one result schema
def test_task_result_is_the_one_schema(clean):
    from decomp.production.outputs import file_sha256
    from decomp.result import SCHEMA, SCHEMA_VERSION, SolveResult

    src, b, ref = clean
    d = task_dir(src, b.tasks[0].key)
    data = json.loads((d / RESULT_FILE).read_text())
    assert data["schema"] == SCHEMA and data["schema_version"] == SCHEMA_VERSION
    ctx = data["context"]
    assert ctx["task"]["key"] == b.tasks[0].key and isinstance(ctx["fingerprint"], str)
    rec = ctx["record"]
    assert rec["task_status"] == "ok" and "status" not in rec and rec["attempts"][0]["task_status"] == "ok"
    assert rec["bid_prices_sha256"] == file_sha256(d / BID_FILE)
    assert pq.read_table(d / BID_FILE).column_names == ["leg", "bid_price"]
    back = SolveResult.from_json(d)          # the folder, its result.json, read back by the library
    assert back.ok and back.bid_prices == ref[b.tasks[0].key]


def _to_layout_before_the_schema(d, status="ok"):
    """Rewrite a finished task as decomp wrote it before the one result schema: the Parquet column
    leg_id, the record's "status", and fingerprint / task / record / result at the top level."""
    from decomp.production.outputs import file_sha256

    data = json.loads((d / RESULT_FILE).read_text())
    ctx = data.pop("context")
    t = pq.read_table(d / BID_FILE)
    pq.write_table(pa.table({"leg_id": t.column("leg"), "bid_price": t.column("bid_price")}), d / BID_FILE)
    rec = dict(ctx["record"])
    rec.pop("task_status")
    rec["status"] = status
    rec["bid_prices_sha256"] = file_sha256(d / BID_FILE)
    for k in ("schema", "schema_version", "ok"):
        data.pop(k)
    old = {"fingerprint": ctx["fingerprint"], "task": ctx["task"], "record": rec, "result": data}
    (d / RESULT_FILE).write_text(json.dumps(old))


def test_resume_reads_a_run_written_before_the_schema(client, clean, tmp_path):
    import shutil

    src, b, ref = clean
    out = tmp_path / "run"
    shutil.copytree(src, out)
    for spec in b.tasks:
        _to_layout_before_the_schema(task_dir(out, spec.key), "not_optimal" if spec is b.tasks[1] else "ok")
    s = runner.run_batch(b, _cfg(out), client=client)
    t = s["totals"]
    assert t["ok"] == len(b) and t["skipped"] == len(b) - 1 and t["redone"] == 1     # old "ok" tasks trusted
    assert "not_optimal" in {x["key"]: x for x in s["tasks"]}[b.tasks[1].key]["redone"]
    assert _answers(out, b) == ref
    # the task solved again is written in the schema; the others keep their old files, still readable
    assert "context" in json.loads((task_dir(out, b.tasks[1].key) / RESULT_FILE).read_text())
    assert pq.read_table(task_dir(out, b.tasks[0].key) / BID_FILE).column_names == ["leg_id", "bid_price"]


# ---------------------------------------------------------------------------- content fingerprint
def test_fare_edit_in_place_is_solved_again(client, tmp_path):
    from decomp.generator import generate
    from decomp.io import read_instance, write_instance

    nets = tmp_path / "nets"
    for i in range(2):
        write_instance(generate(200, seed=i), nets / f"net{i}", format="csv")
    out = tmp_path / "out"
    b = build_batch(str(nets))
    runner.run_batch(b, _cfg(out), client=client)
    before = json.loads((task_dir(out, "net1") / RESULT_FILE).read_text())["context"]["record"]["objective"]
    inst = read_instance(nets / "net1")
    write_instance(inst.__class__(**{**{f: getattr(inst, f) for f in inst.__dataclass_fields__},
                                     "fare": inst.fare * 2.0}), nets / "net1", format="csv")
    b2 = build_batch(str(nets))
    s = runner.run_batch(b2, _cfg(out), client=client)
    by = {x["key"]: x for x in s["tasks"]}
    assert by["net0"]["skipped"] and not by["net1"]["skipped"]
    # PNLP objective is linear in the fares at fixed allocation, and doubling every fare leaves the
    # optimal allocation unchanged (the KKT conditions scale), so the optimum doubles exactly (fact).
    assert by["net1"]["objective"] == pytest.approx(2.0 * before, rel=1e-7)


# ---------------------------------------------------------------------------- lock
def test_second_run_is_refused_naming_the_holder(tmp_path, capsys):
    from decomp.cli import main

    out = tmp_path / "out"
    out.mkdir()
    with OutputLock(out):
        with pytest.raises(RunLockedError, match=f"pid {os.getpid()}"):
            runner.run_batch(_batch(1), _cfg(out))
        rc = main(["run", BATCH, "--dates", "1", "--start", "2027-04-01", "--out", str(out), "--no-progress"])
        assert rc == 1
        assert f"pid {os.getpid()}" in capsys.readouterr().err
    assert not (out / "run.json").exists() and not (out / "tasks").exists()    # nothing was written


@pytest.mark.integration
def test_lock_of_a_killed_holder_is_free(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    code = ("import sys, time; sys.path.insert(0, %r); from decomp.production.lock import OutputLock\n"
            "with OutputLock(%r):\n    print('locked', flush=True); time.sleep(60)\n") % (str(ROOT), str(out))
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "locked"
    with pytest.raises(RunLockedError, match=f"pid {proc.pid}"):
        OutputLock(out).__enter__()
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    with OutputLock(out):            # the kernel dropped the lock with its holder
        pass


# ---------------------------------------------------------------------------- full or read-only folder
def test_disk_full_mid_run_stops_once_and_keeps_finished_tasks(client, tmp_path, monkeypatch):
    real = runner.write_bid_prices
    calls = []

    def filling_up(path, leg_ids, values):
        calls.append(path)
        if len(calls) > 2:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        return real(path, leg_ids, values)

    monkeypatch.setattr(runner, "write_bid_prices", filling_up)
    b = _batch(6)
    out = tmp_path / "out"
    s = runner.run_batch(b, _cfg(out), client=client, retries=2)
    # a task running when the run stopped still ends (Dask cancels futures, not running threads):
    # a no-op on each single-threaded worker runs after it
    client.gather([client.submit(int, 0, workers=[w], pure=False, allow_other_workers=False)
                   for w in client.scheduler_info()["workers"]])
    assert "No space left on device" in s["stopped"] and "Errno 28" in s["stopped"]
    t = s["totals"]
    assert t["failed"] >= 1 and t["ok"] + t["failed"] + t["not_run"] == len(b)
    assert len(set(calls)) == len(calls)    # no task was retried (a retry would meet the same full disk)
    summ = json.loads((out / "summary.json").read_text())
    assert summ["stopped"] == s["stopped"] and "STOPPED" in (out / "summary.md").read_text()
    fps = {x.key: _cfg(out).fingerprint(x) for x in b.tasks}
    finished = {x.key for x in b.tasks if read_finished(out, x, fps[x.key]) is not None}
    assert len(finished) == 2         # the two writes before the disk filled are kept and verify
    # every task the summary counts ok is one of them; the other may still have been writing on
    # the second worker when the summary was built (it is then counted not run, and the rerun
    # below finds it finished)
    counted_ok = {task["key"] for task in s["tasks"] if task["task_status"] == "ok"}
    assert counted_ok and counted_ok <= finished
    assert not list(out.rglob(".*.tmp"))
    monkeypatch.setattr(runner, "write_bid_prices", real)
    s = runner.run_batch(b, _cfg(out), client=client)          # space again: the rerun finishes
    assert s["totals"]["ok"] == len(b) and s["totals"]["skipped"] == 2


def test_read_only_folder_is_reported_as_such(tmp_path, monkeypatch, capsys):
    from decomp import atomic
    from decomp.cli import main

    def read_only(path, obj):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(path))

    monkeypatch.setattr(atomic, "write_json", read_only)
    rc = main(["run", BATCH, "--dates", "1", "--start", "2027-04-01", "--out", str(tmp_path / "o"),
               "--no-progress"])
    err = capsys.readouterr().err
    assert rc == 1 and "Read-only file system" in err and "cannot write to the output folder" in err
    assert "cluster" not in err                 # not blamed on Dask


def test_summary_that_cannot_be_written_is_returned(client, tmp_path, monkeypatch):
    from decomp import atomic

    real = atomic.write_text

    def full_for_markdown(path, text):
        if pathlib.Path(path).name == "summary.md":
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        return real(path, text)

    monkeypatch.setattr(atomic, "write_text", full_for_markdown)
    out = tmp_path / "o"
    s = runner.run_batch(_batch(1), _cfg(out), client=client)
    assert s["totals"]["ok"] == 1 and "summary.md (No space left" in s["summary_error"]
    assert json.loads((out / "summary.json").read_text())["totals"]["ok"] == 1     # what could be written was
    assert not (out / "summary.md").exists()


@pytest.mark.solver
def test_solve_on_a_full_disk_is_an_error_not_a_traceback(tmp_path, monkeypatch, capsys):
    from decomp import atomic
    from decomp.cli import main
    from decomp.generator import generate
    from decomp.io import write_instance

    write_instance(generate(50, seed=1), tmp_path / "inst")

    def full(path, text):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))

    monkeypatch.setattr(atomic, "write_text", full)
    rc = main(["solve", str(tmp_path / "inst"), "--model", "dlp", "--method", "highs",
               "--out", str(tmp_path / "r.json")])
    err = capsys.readouterr().err
    assert rc == 1 and "No space left on device" in err and "Traceback" not in err
    assert not (tmp_path / "r.json").exists()


# ---------------------------------------------------------------------------- SIGTERM
@pytest.mark.integration
def test_sigterm_writes_an_interrupted_summary(tmp_path):
    out = tmp_path / "out"
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen([sys.executable, "-m", "decomp.cli", "run", "gen:3000:2", "--dates", "8",
                             "--start", "2027-04-01", "--workers", "1", "--out", str(out), "--no-progress"],
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while not list(out.glob(f"tasks/*/{RESULT_FILE}")) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert proc.poll() is None, proc.communicate()
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    s = json.loads((out / "summary.json").read_text())
    assert s["interrupted"] == "SIGTERM" and s["totals"]["ok"] >= 1, err
    assert proc.returncode == 1 and "interrupted" in err
    assert "INTERRUPTED (SIGTERM)" in (out / "summary.md").read_text()


# ---------------------------------------------------------------------------- dashboard
def _listening(procs) -> set:
    out = set()
    for p in procs:
        try:
            for c in p.net_connections(kind="inet"):
                if c.status == "LISTEN":
                    out.add((p.pid, c.laddr.ip, c.laddr.port))
        except Exception:  # noqa: BLE001 - a process that ended meanwhile
            pass
    return out


@pytest.mark.integration
@pytest.mark.parametrize("dashboard", [None, 0])
def test_embedded_cluster_listens_on_loopback_only(dashboard):
    import psutil

    me = psutil.Process()
    before = _listening([me])
    cluster, client = runner.start_cluster(1, dashboard=dashboard)
    try:
        now = _listening([me, *me.children(recursive=True)]) - before
        assert now, "the scheduler listens somewhere"
        assert {ip for _, ip, _ in now} == {"127.0.0.1"}, now
        import urllib.error
        import urllib.request

        port = cluster.scheduler.http_server.port
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/health", timeout=10) as r:
            assert r.status == 200
        # scheduler and worker details: served only when a dashboard was asked for
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/identity.json", timeout=10) as r:
                served = r.status == 200
        except urllib.error.HTTPError:
            served = False
        assert served == (dashboard is not None)
    finally:
        client.close()
        cluster.close()


# ---------------------------------------------------------------------------- fallback
@pytest.mark.solver
def test_non_optimal_task_falls_back_to_ipopt_and_says_so(client, tmp_path):
    from decomp import solve

    b = _batch(2)
    limited = SolverOptions(tol=1e-9, threads=1, iteration_limit=1)
    out = tmp_path / "out"
    s = runner.run_batch(b, _cfg(out, options=limited, fallback="none"), client=client)
    assert s["totals"]["not_optimal"] == 2 and s["totals"]["fallback_used"] == 0
    # rerun with the fallback on: the non-optimal tasks are not skipped, Ipopt publishes their answers
    s = runner.run_batch(b, _cfg(out, options=limited), client=client)
    t = s["totals"]
    assert t["ok"] == 2 and t["skipped"] == 0 and t["fallback_used"] == 2 and t["redone"] == 2
    assert all(x["method"] == "ipopt" and x["fallback_used"] for x in s["tasks"])
    rec = json.loads((task_dir(out, b.tasks[0].key) / RESULT_FILE).read_text())["context"]["record"]
    assert [a["method"] for a in rec["attempts"]] == ["lagrangian", "ipopt"]
    assert rec["attempts"][0]["termination"] == "iteration_limit" and rec["attempts"][1]["task_status"] == "ok"
    assert "| ipopt (fallback) |" in (out / "summary.md").read_text()
    # reference: Ipopt on the same instance, in this process
    inst = b.tasks[0].load()
    ref = solve(inst, model="pnlp", method="ipopt", options=SolverOptions(tol=1e-9, threads=1))
    got = read_bid_prices(task_dir(out, b.tasks[0].key) / BID_FILE)
    np.testing.assert_allclose([got[str(k)] for k in inst.leg_ids], ref.bid_price_array, rtol=1e-9, atol=1e-9)


def test_fallback_choice():
    from decomp.generator import generate
    from decomp.production import fallback as fb

    inst = generate(100, seed=1)
    assert fb.choose("dlp", fb.AUTO, inst).label == "highs"
    assert fb.choose("pwl", fb.AUTO, inst).label == "highs"
    assert fb.choose("pnlp", fb.AUTO, inst).label == "ipopt"
    gamma = inst.__class__(**{**{f: getattr(inst, f) for f in inst.__dataclass_fields__},
                              "distribution": np.full(inst.n_products, "gamma", dtype=object)})
    assert fb.choose("pnlp", fb.AUTO, gamma).label == "lagrangian:lbfgsb"
    assert fb.parse("none") is None and fb.parse("lagrangian:lbfgsb") == fb.Fallback("lagrangian", "lbfgsb")
    from decomp.errors import ConfigError

    with pytest.raises(ConfigError):
        fb.parse("lagrangian:bogus")


# ---------------------------------------------------------------------------- warm starts of 1e308
def test_warm_start_of_1e308_is_clamped(client, clean, tmp_path):
    import shutil

    src, b, ref = clean
    bad = tmp_path / "bad"
    shutil.copytree(src, bad)
    for spec in b.tasks:
        p = task_dir(bad, spec.key) / BID_FILE
        legs = pq.read_table(p).column("leg")
        # the column name runs wrote before the one result schema: warm starts still read it
        pq.write_table(pa.table({"leg_id": legs, "bid_price": pa.array(np.full(len(legs), 1e308))}), p)
    out = tmp_path / "out"
    s = runner.run_batch(b, _cfg(out, warm_start_from=str(bad), fallback="none"), client=client)
    assert s["totals"]["ok"] == len(b)
    rec = json.loads((task_dir(out, b.tasks[0].key) / RESULT_FILE).read_text())["context"]["record"]
    assert rec["warm_start"]["clamped"] == rec["n_legs"]
    for k, prices in _answers(out, b).items():
        np.testing.assert_allclose(list(prices.values()), list(ref[k].values()), rtol=1e-6, atol=1e-6)


def test_bounded_warm_start_caps_at_the_largest_fare_on_the_leg():
    from decomp.instance import Instance
    from decomp.warmstart import bounded_warm_start

    inst = Instance.from_lists([("QAAQHX", "QAA", "QHX", 10.0), ("QHXQAB", "QHX", "QAB", 5.0),
                                ("QHXQAC", "QHX", "QAC", 5.0)],
                               [("P1", ["QAAQHX", "QHXQAB"], 300.0, 8.0, 2.0), ("P2", ["QAAQHX"], 120.0, 4.0, 1.0)])
    out, n = bounded_warm_start(inst, {"QAAQHX": 1e308, "QHXQAB": -4.0, "QHXQAC": 7.0, "ZZZ": 1.0})
    # caps: QAAQHX 300 (P1), QHXQAB 300 (P1), QHXQAC 0 (no product): hand-computed
    assert out == {"QAAQHX": 300.0, "QHXQAB": 0.0, "QHXQAC": 0.0, "ZZZ": 1.0} and n == 3
    arr, n = bounded_warm_start(inst, np.array([np.inf, 50.0, np.nan]))
    assert arr.tolist() == [0.0, 50.0, 0.0] and n == 2


def test_generate_on_a_full_disk_is_an_error_not_a_traceback(tmp_path, monkeypatch, capsys):
    from decomp.cli import main

    def full(path, data):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))

    monkeypatch.setattr(pathlib.Path, "write_bytes", full)
    rc = main(["generate", "--products", "50", "--seed", "1", "--out", str(tmp_path / "net")])
    err = capsys.readouterr().err
    assert rc == 1 and "No space left on device" in err and "Traceback" not in err
    assert not (tmp_path / "net").exists() and not list(tmp_path.iterdir())     # nothing half-written
