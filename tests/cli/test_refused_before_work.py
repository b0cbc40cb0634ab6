"""Commands refuse bad options and outputs before any work, and a write that fails names the path it
was for: a folder of the user's own tables is never replaced, an output that cannot be written exits
2, a full disk or a read-only folder is named by the file decomp was writing, not its temporary file.
"""

from __future__ import annotations

import errno
import os
import pathlib
import time

import pyarrow.parquet as pq
import pytest

from decomp.cli import main

from support.cli import run_cli
from support.tiny import write_benchmark, write_light


def test_generate_refuses_a_folder_of_the_users_own_tables(tmp_path, capsys):
    own = write_light(tmp_path, "own")
    before = {p.name: p.read_bytes() for p in own.iterdir()}
    rc, _, err = run_cli(["generate", "--products", "20", "--out", own], capsys)
    assert rc == 2 and "not written by decomp" in err
    assert {p.name: p.read_bytes() for p in own.iterdir()} == before


@pytest.mark.parametrize("args", [
    ["run", "{inst}", "--workers", "0"], ["run", "{inst}", "--workers", "-1"], ["run", "{inst}", "--retries", "-1"],
    ["run", "{inst}", "--dashboard", "-1"], ["run", "{inst}", "--dashboard", "70000"],
    ["run", "{inst}", "--warm-start", "/no/such/dir"],
    ["baseline", "record", "--suite", "micro", "--repeat", "0"], ["baseline", "record", "--suite", "micro", "--repeat", "-1"],
    ["baseline", "check", "{inst}", "--repeat", "0"],
])
def test_bad_options_are_refused_before_any_work(args, tmp_path, capsys):
    inst = write_light(tmp_path)
    argv = [a.format(inst=inst) for a in args] + (["--out", str(tmp_path / "out")] if args[0] != "baseline"
                                                   or args[1] == "record" else [])
    t0 = time.perf_counter()
    rc, _, err = run_cli(argv, capsys)
    option = next(a for a in args if a.startswith("--"))
    assert rc == 2 and option in err and "Traceback" not in err
    assert time.perf_counter() - t0 < 30                  # refused, not run (-1 workers hung for 10 minutes)
    assert not (tmp_path / "out").exists()


def test_run_out_empty_is_refused(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    rc, _, err = run_cli(["run", write_light(tmp_path), "--out", ""], capsys)
    assert rc == 2 and "--out" in err and "empty" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t"]          # nothing written into the cwd


@pytest.mark.solver
def test_simulate_workers_0_says_it_runs_in_this_process(tmp_path, capsys):
    rc, _, err = run_cli(["simulate", write_light(tmp_path), "--policies", "fcfs", "--paths", "2", "--workers", "0",
                       "--no-progress", "--out", tmp_path / "s"], capsys)
    assert rc == 0 and "--workers 0: the paths run in this process" in err


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
    inst = write_light(tmp_path)
    argv = {"simulate": ["simulate", inst, "--policies", "fcfs", "--paths", "2", "--workers", "0", "--no-progress",
                         "--out", target],
            "tables": ["tables", inst, "--model", "dlp", "--periods", "5", "--out", target],
            "size": ["size", "--bench", micro_bench, "--products", "100000", "--window", "1h", "--out", target],
            "bench": ["bench", "--suite", "micro", "-k", "no_such_case", "--out", target],
            "bench report": ["bench", "report", micro_bench, "--out", target],
            "bench compare --out": ["bench", "compare", micro_bench, micro_bench, "--out", target],
            "baseline record": ["baseline", "record", "--suite", "micro", "--out", target],
            "baseline check": ["baseline", "check", inst, "--out", target]}[command]
    rc, _, err = run_cli(argv, capsys)
    assert rc == 2 and f"--out '{target}'" in err and "Traceback" not in err, err     # the option and its path
    assert blocker.read_text() == "x"


@pytest.fixture
def micro_bench(tmp_path):
    return write_benchmark(tmp_path / "bench" / "benchmark.json")


@pytest.mark.parametrize("argv", [
    ["solve", "{inst}", "--model", "dlp", "--method", "highs", "--out", "{file}/x.json"],
    ["run", "{inst}", "--out", "{file}/r"],
    ["run", "{inst}", "--out", "/dev/null"],
])
def test_outputs_that_cannot_be_written_exit_2(argv, tmp_path, capsys):
    f = tmp_path / "file"
    f.write_text("x")
    inst = write_light(tmp_path)
    rc, _, err = run_cli([a.format(inst=inst, file=f) for a in argv], capsys)
    assert rc == 2 and "--out" in err


def _full_disk(monkeypatch):
    """Every write fails as a full disk does: ENOSPC from write(), which names no file."""
    def full(*a, **k):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    monkeypatch.setattr(pathlib.Path, "write_text", full)
    monkeypatch.setattr(pathlib.Path, "write_bytes", full)
    monkeypatch.setattr(pq, "write_table", full)


@pytest.mark.solver
def test_a_full_disk_is_named_by_the_path_that_failed(tmp_path, monkeypatch, capsys, p100_dlp, p100_dir):
    # generate, baseline record, baseline check, simulate and tables said "cannot write : ..."
    inst = write_light(tmp_path)
    base = tmp_path / "base"
    assert main(["baseline", "record", "--suite", "micro", "--out", str(base)]) == 0
    _full_disk(monkeypatch)
    for argv, path in ((["generate", "--products", "20", "--out", tmp_path / "g"], tmp_path / "g"),
                       (["simulate", inst, "--policies", "fcfs", "--paths", "2", "--workers", "0", "--no-progress",
                         "--out", tmp_path / "s"], tmp_path / "s"),
                       (["tables", p100_dir, "--static", p100_dlp, "--periods", "3", "--out", tmp_path / "t.parquet"],
                        tmp_path / "t.parquet"),
                       (["baseline", "record", "--suite", "micro", "--out", tmp_path / "b2"], tmp_path / "b2"),
                       (["baseline", "check", base, "--out", tmp_path / "chk"], tmp_path / "chk")):
        rc, _, err = run_cli(argv, capsys)
        assert rc == 1 and "No space left on device" in err and str(path) in err and "Traceback" not in err, err
        assert "cannot write :" not in err


@pytest.mark.solver
def test_a_full_disk_names_the_file_it_refused_not_the_one_written(tmp_path, monkeypatch, capsys):
    import pyarrow.csv as pcsv

    inst = write_light(tmp_path)

    def full(table, path, *a, **k):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    monkeypatch.setattr(pcsv, "write_csv", full)
    rc, _, err = run_cli(["solve", inst, "--model", "dlp", "--method", "highs", "--out", tmp_path / "ok.json",
                       "--product-table", tmp_path / "p.csv"], capsys)
    assert rc == 1 and f"cannot write {tmp_path / 'p.csv'}" in err and (tmp_path / "ok.json").is_file()


@pytest.mark.solver
def test_a_read_only_folder_is_named_not_the_temporary_file(tmp_path, monkeypatch, capsys):
    import tempfile

    def read_only(*a, **k):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(tmp_path / ".r.json.abc.tmp"))
    monkeypatch.setattr(tempfile, "mkstemp", read_only)
    rc, _, err = run_cli(["solve", write_light(tmp_path), "--model", "dlp", "--method", "highs", "--out",
                       tmp_path / "r.json"], capsys)
    assert rc == 1 and f"cannot write {tmp_path / 'r.json'}" in err and ".tmp" not in err


