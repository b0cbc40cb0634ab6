"""One interface to learn on the command line: one meaning per option name, renamed options still
accepted (with a warning) for one release, formats chosen by suffix, a listing that writes nothing,
decomp's own words in summaries, and progress that suits where the output goes.

External checks: the CSV and Parquet tables are read back with pyarrow (a reference library).
"""

import argparse
import json
import os
import pathlib
import shutil
import subprocess
import sys
import warnings

import numpy as np
import pyarrow.csv as pcsv
import pyarrow.parquet as pq
import pytest

import decomp
from decomp import ladder
from decomp.cli import build_parser, main

#: Old option names warn with decomp.commands._vocabulary.OldOptionName, a FutureWarning.
OldOptionName = FutureWarning

ROOT = pathlib.Path(__file__).resolve().parents[1]


def _decomp(*args, cwd=None, env=None):
    env = dict(os.environ if env is None else env, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "decomp.cli", *map(str, args)], capture_output=True, text=True,
                          env=env, cwd=cwd, timeout=600)


# -- item 5: one vocabulary; the old names still work for one release, with a warning -------------

#: A command line for each old name of RENAMED, and the attribute it must set.
OLD_NAME_USES = {
    "--legs FILE": (["solve", "p100", "--legs", "l.csv"], "leg_table", "l.csv"),
    "--products FILE, --allocation FILE": (["solve", "p100", "--allocation", "p.csv"], "product_table", "p.csv"),
    "--days N": (["run", "gen:100", "--out", "o", "--days", "3"], "days", 3),
    "--warm-start-from DIR": (["run", "gen:100", "--out", "o", "--warm-start-from", "prev"], "warm_start_from",
                              "prev"),
    "--threshold X": (["bench", "compare", "a", "b", "--threshold", "10"], "threshold", "10"),
    "--json FILE": (["bench", "compare", "a", "b", "--json", "c.json"], "out", "c.json"),
    "--time-ratio X": (["baseline", "check", "b", "--time-ratio", "2"], "time_ratio", "2"),
}


def test_every_renamed_option_keeps_its_old_name_with_a_warning():
    from decomp.commands._vocabulary import RENAMED

    assert {old for _, _, old, _ in RENAMED} == set(OLD_NAME_USES)
    for old, (argv, dest, value) in OLD_NAME_USES.items():
        with pytest.warns(OldOptionName, match="old name of"):
            args = build_parser().parse_args(argv)
        assert getattr(args, dest) == value, old
    # the new names parse without a warning
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        args = build_parser().parse_args(["solve", "p100", "--leg-table", "l.csv", "--product-table", "p.csv"])
        assert (args.leg_table, args.product_table) == ("l.csv", "p.csv")
        assert build_parser().parse_args(["run", "gen:100", "--out", "o", "--warm-start", "w"]).warm_start_from == "w"


def test_the_readme_lists_the_renamed_options():
    from decomp.commands._vocabulary import RENAMED

    readme = (ROOT / "README.md").read_text()
    section = readme[readme.index("## Commands"):readme.index("## Results")]
    for command, new, old, _ in RENAMED:
        row = next((line for line in section.splitlines() if line.startswith(f"| `{command}` | `{new}`")), None)
        assert row is not None and f"`{old}`" in row, (command, new, old)


def test_solve_needs_only_the_instance(tmp_path):
    r = _decomp("solve", "p100", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "pnlp by lagrangian" in r.stdout and list(tmp_path.iterdir()) == []     # the summary only
    r = _decomp("solve", "p100", "--model", "dlp", "--out", "r.json", "--leg-table", "legs.csv",
                "--product-table", "products.parquet", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert json.loads((tmp_path / "r.json").read_text())["method"] == "highs"      # the dlp's default method
    assert pcsv.read_csv(tmp_path / "legs.csv").num_rows == ladder.load_rung("p100").n_legs
    assert pq.read_table(tmp_path / "products.parquet").num_rows == 100
    r = _decomp("solve", "p100", "--model", "dlp", "--legs", "old.csv", cwd=tmp_path)
    assert r.returncode == 0 and (tmp_path / "old.csv").is_file()
    assert "warning: --legs is the old name of --leg-table" in r.stderr


def _bench_json(path, seconds, case="p1k-pnlp-lagrangian-newton-tol1e-09"):
    """A minimal pytest-benchmark file of one case (the fields decomp's reader needs)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps({"benchmarks": [{
        "name": f"test_solve[{case}]", "stats": {s: seconds for s in ("min", "median", "mean", "max")},
        "extra_info": {"case": case, "termination": "optimal", "gap": 1e-10, "accuracy_failures": []}}]}))
    return path


def test_allowed_growth_reads_the_same_in_compare_and_check(tmp_path, capsys):
    from decomp.benchsuite.compare import parse_growth, parse_ratio, parse_threshold
    from decomp.errors import ConfigError

    old, new = _bench_json(tmp_path / "old.json", 1.0), _bench_json(tmp_path / "new.json", 2.0)   # 2x slower
    assert parse_growth("100%") == parse_growth("2x") == pytest.approx(1.0)
    # what the old names meant: --threshold 1 a growth of 100 %, --time-ratio 2 a ratio of 2
    assert parse_threshold("1") == parse_growth("100%") and parse_ratio("2") == 1 + parse_growth("2x")
    for bare in ("10", "0.1", "2"):
        with pytest.raises(ConfigError, match="no unit"):
            parse_growth(bare)
    compare = ["bench", "compare", str(old), str(new)]
    assert main(compare + ["--max-growth", "50%"]) == 1 and "REGRESSION" in capsys.readouterr().out
    assert main(compare + ["--max-growth", "2.5x"]) == 0
    assert main(compare + ["--max-growth", "10"]) == 2 and "no unit" in capsys.readouterr().err
    with pytest.warns(OldOptionName, match="old name of"):
        assert main(compare + ["--threshold", "10"]) == 0             # its old meaning: +1000 %
    with pytest.warns(OldOptionName, match="old name of"):
        assert main(compare + ["--threshold", "0.5"]) == 1            # +50 %
    assert main(["baseline", "check", str(tmp_path / "nowhere"), "--max-time-growth", "2"]) == 2
    assert "no unit" in capsys.readouterr().err                        # refused before the baseline is read


def test_run_takes_dates_as_a_count_as_size_does():
    from decomp.commands.run import run_dates
    from decomp.errors import ConfigError

    args = build_parser().parse_args(["run", "gen:100", "--out", "o", "--dates", "3", "--start", "2027-01-30"])
    assert [d.isoformat() for d in run_dates(args)] == ["2027-01-30", "2027-01-31", "2027-02-01"]
    args = build_parser().parse_args(["run", "gen:100", "--out", "o", "--dates", "2027-01-30:2027-02-01"])
    assert len(run_dates(args)) == 3
    with pytest.warns(OldOptionName, match="old name of"):
        args = build_parser().parse_args(["run", "gen:100", "--out", "o", "--days", "3", "--start", "2027-01-30"])
    assert len(run_dates(args)) == 3
    for bad in ("0", "three"):
        with pytest.raises(ConfigError, match="--dates"):
            run_dates(build_parser().parse_args(["run", "gen:100", "--out", "o", "--dates", bad]))


def test_verbose_after_any_subcommand_nested_ones_included(capsys):
    assert main(["baseline", "record", "--list", "-v"]) == 0
    assert "micro:" in capsys.readouterr().out
    for argv in (["bench", "compare", "a", "b", "-v"], ["bench", "report", "r", "-v"],
                 ["baseline", "check", "b", "-v"], ["solve", "p100", "-v"]):
        assert build_parser().parse_args(argv).verbose is True


def test_size_window_needs_a_unit(tmp_path, capsys):
    bench = _bench_json(tmp_path / "b.json", 1.0)
    assert main(["size", "--bench", str(bench), "--products", "1000", "--window", "2",
                 "--out", str(tmp_path / "sz")]) == 2
    assert "--window: '2' has no unit" in capsys.readouterr().err
    from decomp.production import parse_duration

    assert parse_duration("2h") == 7200 and parse_duration(2.0) == 2.0      # a number from Python is seconds


# -- item 6: a table's format follows its suffix; another suffix is refused before the work --------

@pytest.mark.solver
def test_tables_format_by_suffix_and_the_fast_default_method(tmp_path):
    from decomp.dynamic import read_parquet

    r = _decomp("tables", "p100", "--periods", "20", "--out", tmp_path / "t.txt")
    assert r.returncode == 2 and "must end in .csv or .parquet" in r.stderr and "static" not in r.stdout
    assert list(tmp_path.iterdir()) == []
    r = _decomp("tables", "p100", "--periods", "20", "--out", tmp_path / "t.csv")
    assert r.returncode == 0, r.stderr
    assert "static bid prices from pnlp:lagrangian" in r.stdout                 # not the slow ipopt
    csv = pcsv.read_csv(tmp_path / "t.csv")
    assert csv.column_names == ["leg", "period", "seats_remaining", "bid_price"]
    assert (tmp_path / "t.csv").read_bytes()[:4] != b"PAR1"                     # not Parquet in disguise
    assert _decomp("tables", "p100", "--periods", "20", "--out", tmp_path / "t.parquet").returncode == 0
    tb = read_parquet(tmp_path / "t.parquet")
    inst = ladder.load_rung("p100")
    assert csv.num_rows == pq.read_table(tmp_path / "t.parquet").num_rows == int(np.floor(inst.capacity).sum()) * 20
    legs = csv.column("leg").to_pylist()
    pos = {leg: i for i, leg in enumerate(tb.leg_ids)}
    got = np.array([tb.leg(pos[l])[p, s] for l, p, s in zip(legs, csv.column("period").to_pylist(),
                                                            csv.column("seats_remaining").to_pylist())])
    np.testing.assert_allclose(csv.column("bid_price").to_numpy(), got, rtol=1e-12)


# -- item 7: listing the benchmark cases writes nothing, anywhere, and shows case names ------------

def _tree(root) -> dict:
    out = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for name in dirnames + filenames:
            p = pathlib.Path(dirpath) / name
            st = p.lstat()
            out[str(p.relative_to(root))] = (st.st_size, st.st_mtime_ns)
    return out


def test_bench_list_writes_nothing_and_names_cases(tmp_path):
    project = tmp_path / "project"
    shutil.copytree(ROOT, project, ignore=shutil.ignore_patterns(".venv", ".git", "__pycache__", ".benchmarks",
                                                                   "results", ".pytest_cache", "generated"))
    subprocess.run([sys.executable, "-m", "compileall", "-q", str(project / "decomp"), str(project / "models")],
                   check=True)          # as make setup does: the package itself is byte-compiled beforehand
    cwd = tmp_path / "elsewhere"
    cwd.mkdir()
    before = (_tree(project), _tree(cwd))
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}   # a user's usual shell
    r = subprocess.run([sys.executable, "-m", "decomp.cli", "bench", "--suite", "micro", "--list", "-k", "dlp"],
                       capture_output=True, text=True, cwd=cwd, timeout=300,
                       env=dict(env, PYTHONPATH=str(project)))
    assert r.returncode == 0, r.stderr
    assert (_tree(project), _tree(cwd)) == before
    names = r.stdout.split()
    assert "tiny-dlp-highs" in names and all("dlp" in n and "[" not in n for n in names)


# -- item 8: summaries in decomp's words --------------------------------------------------------

@pytest.mark.solver
def test_summaries_use_decomp_words_not_solver_codes(tmp_path):
    r = _decomp("solve", "p100", "--model", "dlp", "--method", "highs", "--out", tmp_path / "r.json")
    assert r.returncode == 0 and "status      optimal; solution optimal" in r.stdout
    assert "kOptimal" not in r.stdout + r.stderr
    import highspy

    from decomp.methods.highs import status_words

    assert status_words(highspy.HighsStatus.kError) == "error"
    assert status_words(highspy.HighsModelStatus.kTimeLimit) == "timelimit"


# -- item 9: a progress bar only on a terminal; long work logs progress with -v ----------------------

def test_progress_bars_only_on_a_terminal():
    import io

    from decomp.commands import _progress

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    assert _progress.wanted(None, Terminal()) is True
    assert _progress.wanted(argparse.Namespace(no_progress=True), Terminal()) is False
    assert _progress.wanted(None, io.StringIO()) is False


@pytest.mark.solver
def test_redirected_simulation_has_no_bar_and_explains_its_columns(tmp_path):
    # stderr is a pipe here, as in a log file; no --no-progress given
    r = _decomp("simulate", "p100", "--policies", "dlp:highs,fcfs", "--paths", "10", "--workers", "0",
                "--out", tmp_path / "sim")
    assert r.returncode == 0, r.stderr
    assert "\r" not in r.stderr and "path/s" not in r.stderr
    # no bar line ("decomp simulate: 40%|..."); the one line of its own is the note that --workers 0
    # runs the paths in this process (tests/test_safe_by_default.py)
    assert [line for line in r.stderr.splitlines()
            if "decomp simulate:" in line and "--workers 0: the paths run in this process" not in line] == []
    assert "re-opt every (days)" in r.stdout and "re-opt every (days)" in (tmp_path / "sim" / "simulation.md").read_text()


def _small_network(path):
    """Two legs through a hub and three products (about 6 requests in all)."""
    inst = decomp.Instance.from_lists(
        [("L1", "AAA", "HUB", 3), ("L2", "HUB", "BBB", 3)],
        [("p12", ["L1", "L2"], 300.0, 1.5, 0.5), ("p1", ["L1"], 150.0, 2.0, 0.7), ("p2", ["L2"], 180.0, 2.5, 0.8)])
    decomp.write_instance(inst, path)
    return inst


@pytest.mark.solver
def test_relaxation_says_how_many_periods_and_logs_its_progress(tmp_path):
    from decomp.dynamic import from_arrival_curves

    inst = _small_network(tmp_path / "net")
    r = _decomp("tables", tmp_path / "net", "--model", "dlp", "--by", "relaxation", "--periods", "3",
                "--out", tmp_path / "t.parquet")
    assert r.returncode == 2 and not (tmp_path / "t.parquet").exists()
    words = r.stderr.split("are the fewest that do; use --periods ")
    assert len(words) == 2, r.stderr
    fewest = int(words[1].split()[0])
    # the number is right: at most one request per period in the whole network with it, not one fewer
    assert from_arrival_curves(inst, fewest).prob.sum(axis=1).max() <= 1 + 1e-9
    assert from_arrival_curves(inst, fewest - 1).prob.sum(axis=1).max() > 1 + 1e-9
    r = _decomp("tables", tmp_path / "net", "--model", "dlp", "--by", "relaxation", "--periods", fewest,
                "--out", tmp_path / "t.parquet", "-v")
    assert r.returncode == 0, r.stderr
    assert "computing the tables by relaxation" in r.stderr and "relaxation: iteration 10 of at most" in r.stderr
    assert "relaxation: converged after" in r.stderr
