"""The embedded cluster of ``decomp run`` and the signals of a run: a client without the run's
credentials is refused, a signal after the last task still leaves the summary, Ctrl-C to the
process group prints no worker tracebacks.

External fact used: Dask's TLS security (``distributed.security.Security``: a connection without
the cluster's certificate is refused, Dask documentation "TLS/SSL").
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import pytest

from support.cli import run_cli
from support.paths import ROOT
from support.tiny import write_light


@pytest.mark.integration
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


@pytest.mark.integration
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
    rc, _, err = run_cli(["run", write_light(tmp_path), "--dates", "2", "--start", "2027-04-01", "--workers", "1",
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


@pytest.mark.integration
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
