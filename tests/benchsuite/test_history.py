"""The benchmark history: the SQLite store (schema, versions, demand families), ``decomp bench
history`` (listing, comparing by the rules of ``bench compare``), and the static HTML page, rendered
in headless Chromium (Debian's package, installed by scripts/setup.sh) and checked by what it shows.

The benchmark files here are small hand-written pytest-benchmark JSON files with known times and
errors (machinery tests); one test runs the real micro suite through ``decomp bench``.
"""

import json
import os
import re
import shutil
import sqlite3
import subprocess
import sys

import pytest

from decomp.benchsuite import history
from decomp.benchsuite.compare import compare_runs
from decomp.benchsuite.results import load_run
from decomp.cli import main

from support.paths import ROOT


VERSIONS = {"python": "3.11.7", "numpy": "2.4.6", "scipy": "1.17.1", "pyomo": "6.10.1", "highspy": "1.16.0",
            "cyipopt-wheels": "1.7.0.dev0"}


def _case(case, seconds, demand=None, gap=1e-10, bid=1e-8, termination="optimal", failures=()):
    info = {"case": case, "kind": "solve", "rung": case.split("-")[0], "model": "pnlp", "method": "lagrangian",
            "label": "lagrangian-newton", "n_products": 100_000, "termination": termination, "gap": gap,
            "bid_price_error": bid, "objective_error": gap, "max_violation_rel": 0.0,
            "accuracy_failures": list(failures)}
    if demand is not None:
        info["demand"] = demand
    return {"name": f"test_solve[{case}]", "extra_info": info,
            "stats": {"min": seconds, "median": seconds * 1.1, "mean": seconds * 1.2, "max": seconds * 1.3,
                      "stddev": 0.01, "rounds": 1}}


def _bench(path, cases, when, highs="1.16.0", load=0.5):
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps({
        "datetime": when, "commit_info": {"id": "0123456789abcdef", "dirty": False},
        "machine_info": {"node": "testhost", "system": "Linux", "release": "6", "cpu": {"brand_raw": "Test CPU"},
                         "decomp": {"logical_cpus": 2, "memory_total_gib": 24.0, "load_average_at_start": [load, 0, 0],
                                    "versions": {**VERSIONS, "highspy": highs}}},
        "decomp": {"suite": "quick", "load_average_at_end": [load + 0.1, 0, 0],
                   "run": {"suite": "quick", "k": None, "wall_seconds": 12.5, "pytest_exit_code": 0,
                           "command": "decomp bench --suite quick"}},
        "benchmarks": cases}))
    return path


NORMAL = "p100k-pnlp-lagrangian-newton-tol1e-09"
POISSON = "p100k-poisson-pnlp-lagrangian-newton-tol1e-09"


@pytest.fixture
def three_runs(tmp_path):
    """Run 1; run 2 with HiGHS 1.17.0 (nothing slower); run 3 with the Poisson case 3x slower and
    its bid-price error up from 1e-8 to 1e-5 (normal case unchanged)."""
    a = _bench(tmp_path / "r1" / "benchmark.json", [_case(NORMAL, 0.10), _case(POISSON, 0.20, "poisson")],
               "2026-12-01T10:00:00+00:00")
    b = _bench(tmp_path / "r2" / "benchmark.json", [_case(NORMAL, 0.10), _case(POISSON, 0.20, "poisson")],
               "2026-12-02T10:00:00+00:00", highs="1.17.0")
    c = _bench(tmp_path / "r3" / "benchmark.json", [_case(NORMAL, 0.101), _case(POISSON, 0.60, "poisson", bid=1e-5)],
               "2026-12-03T10:00:00+00:00", highs="1.17.0", load=1.7)
    store = tmp_path / "history.sqlite"
    with history.open_store(store) as s:
        ids = [s.add_bench_run(load_run(p)) for p in (a, b, c)]
    assert ids == [1, 2, 3]
    return store, (a, b, c)


# -- the store --------------------------------------------------------------------------

def test_store_schema_is_the_documented_one(tmp_path):
    path = tmp_path / "h.sqlite"
    with history.open_store(path):
        pass
    con = sqlite3.connect(path)
    assert con.execute("PRAGMA user_version").fetchone()[0] == history.SCHEMA_VERSION == 1
    assert dict(con.execute("SELECT key, value FROM meta"))["schema_version"] == "1"
    doc = history.__doc__
    for table in ("runs", "environments", "cases"):
        columns = [r[1] for r in con.execute(f"PRAGMA table_info({table})")]
        section = doc[doc.index(f"``{table}``"):]
        section = section[:section.index("``", section.index("--")) if table != "cases" else len(section)]
        missing = [c for c in columns if f"``{c}``" not in doc]
        assert not missing, (table, missing)          # every column is documented in the module docstring
    con.close()


def test_runs_cases_families_and_environment(three_runs):
    store, _ = three_runs
    with history.open_store(store, create=False) as s:
        runs = s.runs()
        points = s.points()
    assert [r.run_id for r in runs] == [1, 2, 3] and [r.kind for r in runs] == ["bench"] * 3
    r3 = runs[2]
    assert r3.started_utc == "2026-12-03T10:00:00+00:00" and r3.suite == "quick" and r3.n_cases == 2
    assert r3.env["highs"] == "1.17.0" and r3.env["numpy"] == "2.4.6" and r3.env["host"] == "testhost"
    assert r3.env["load_start"] == 1.7 and r3.env["load_end"] == pytest.approx(1.8)
    assert r3.env["git_commit"] == "0123456789abcdef" and r3.env["cpu"] == "Test CPU"
    by = {(p.run_id, p.row.case): p for p in points}
    assert by[(1, NORMAL)].demand == "normal"            # no "demand" key: the ladder's own, normal
    assert by[(3, POISSON)].demand == "poisson" and by[(3, POISSON)].row.min == 0.60
    assert by[(3, POISSON)].row.get("bid_price_error") == 1e-5


def test_a_store_that_is_not_one_is_refused(tmp_path, capsys):
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"not a database at all" * 100)
    other = tmp_path / "other.sqlite"
    con = sqlite3.connect(other)
    con.execute("CREATE TABLE t (x)")
    con.close()
    newer = tmp_path / "newer.sqlite"
    with history.open_store(newer):
        pass
    con = sqlite3.connect(newer)
    con.execute("PRAGMA user_version = 2")
    con.close()
    for path, words in ((junk, "not a history store"), (other, "other tables"), (newer, "newer")):
        with pytest.raises(history.HistoryError, match=words):
            with history.open_store(path):
                pass
        assert main(["bench", "history", "--store", str(path)]) == 2
        assert words in capsys.readouterr().err
    assert main(["bench", "history", "--store", str(tmp_path / "missing.sqlite")]) == 2
    assert not (tmp_path / "missing.sqlite").exists()                # listing creates nothing


def test_history_lists_and_compares_by_the_rules_of_bench_compare(three_runs, capsys):
    store, (a, b, c) = three_runs
    assert main(["bench", "history", "--store", str(store)]) == 0
    listing = capsys.readouterr().out.splitlines()
    assert len(listing) == 4 and listing[3].split()[0] == "#3" and "1.17.0" in listing[3]
    # the same two runs, compared from the files and from the store, give the same verdicts
    files = compare_runs(b, c, threshold=0.10)
    assert main(["bench", "history", "--store", str(store), "--compare", "2", "-1", "--json"]) == 1
    stored = json.loads(capsys.readouterr().out)
    assert [(x.case, list(x.flags)) for x in files.cases] == [(x["case"], x["flags"]) for x in stored["cases"]]
    flagged = {x["case"]: x["flags"] for x in stored["cases"] if x["flags"]}
    assert list(flagged) == [POISSON] and "slower: x3.00" in flagged[POISSON][0]
    assert any("bid_price_error" in f for f in flagged[POISSON])
    assert main(["bench", "history", "--store", str(store), "--compare", "1", "2"]) == 0
    assert main(["bench", "history", "--store", str(store), "--compare", "1", "9"]) == 2
    assert "no run 9" in capsys.readouterr().err


# -- the page ---------------------------------------------------------------------------

def _page(three_runs, tmp_path):
    store, _ = three_runs
    out = tmp_path / "page" / "history.html"
    assert main(["bench", "history", "--store", str(store), "--html", str(out)]) == 0
    return out


def test_the_page_is_self_contained(three_runs, tmp_path):
    text = _page(three_runs, tmp_path).read_text()
    # nothing fetched: no external script, style, image or font; SVG namespaces are names, not fetches
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//)""", text)
    assert "<link" not in text and "@import" not in text and not re.search(r"url\((?!#)", text)
    ids = re.findall(r'\bid="([^"]+)"', text)
    assert len(ids) == len(set(ids))                                 # one page of many charts: unique ids
    assert text.count("<svg") == 2 + 2                               # 2 families + 2 cases
    assert "HiGHS 1.16.0 -&gt; 1.17.0" in text                       # the upgrade, marked on the axis
    assert "<script src" not in text


def _chromium(*args, user_data):
    exe = shutil.which("chromium")
    assert exe, "chromium is not installed: run make setup (scripts/setup.sh installs it)"
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
           "--no-first-run", "--disable-component-update", "--disable-sync", f"--user-data-dir={user_data}",
           "--host-resolver-rules=MAP * ~NOTFOUND", *args]     # no name resolves: the page must need no network
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


@pytest.mark.integration
def test_the_page_in_a_browser_shows_families_cases_and_the_regression(three_runs, tmp_path):
    page = _page(three_runs, tmp_path)
    r = _chromium("--dump-dom", page.as_uri(), user_data=tmp_path / "profile1")
    assert r.returncode == 0, r.stderr[-2000:]
    dom = r.stdout
    assert 'data-filter="all"' in dom and "2 case(s) shown" in dom          # the script ran
    for family in ("normal", "poisson"):
        assert f'id="family-{family}"' in dom and f"Demand family: {family}" in dom
    assert NORMAL in dom and POISSON in dom
    regressed = re.findall(r'<article class="case regressed"[^>]*data-case="([^"]+)"', dom)
    assert regressed == [POISSON]
    assert "REGRESSION x1" in dom and "run #3 against #2: slower: x3.00" in dom
    assert "Regressions (1)" in dom
    # the regressions-only view: the script hides the unchanged case and the empty family
    r = _chromium("--dump-dom", page.as_uri() + "#only-regressions", user_data=tmp_path / "profile2")
    dom = r.stdout
    assert 'data-filter="regressions"' in dom and "1 case(s) shown" in dom
    hidden = re.findall(r'<article class="case[^"]*"[^>]*data-case="([^"]+)"[^>]*hidden', dom)
    assert hidden == [NORMAL]
    assert re.search(r'<section class="family" id="family-normal"[^>]*hidden', dom)
    shot = tmp_path / "page.png"
    r = _chromium("--screenshot=" + str(shot), "--window-size=1280,1600", page.as_uri(),
                  user_data=tmp_path / "profile3")
    assert r.returncode == 0 and shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert int.from_bytes(shot.read_bytes()[16:20], "big") == 1280       # IHDR width


# -- every decomp bench run and every baseline check adds itself ---------------------------

@pytest.mark.integration
@pytest.mark.solver
def test_decomp_bench_adds_its_run_with_the_environment(tmp_path):
    store = tmp_path / "h.sqlite"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    r = subprocess.run([sys.executable, "-m", "decomp.cli", "bench", "--suite", "micro", "-k", "dlp-highs",
                        "--out", str(tmp_path / "run"), "--history", str(store)],
                       capture_output=True, text=True, env=env, timeout=900)
    assert r.returncode == 0, r.stdout + r.stderr
    assert f"added run #1 to the history {store}" in r.stdout
    with history.open_store(store, create=False) as s:
        (run,) = s.runs()
        cases = s.cases(run.run_id)
    bench = load_run(tmp_path / "run")
    assert set(cases) == {row.case for row in bench.rows} and run.n_cases == len(bench.rows) > 0
    import numpy as np
    import scipy

    assert run.env["numpy"] == np.__version__ and run.env["scipy"] == scipy.__version__
    assert run.env["highs"] and run.env["python"] and run.env["host"] and run.env["load_start"] is not None
    assert run.env["git_commit"] and run.command.startswith("decomp bench --suite micro")
    for case, p in cases.items():
        row = bench.by_case()[case]
        assert p.row.min == row.min and p.demand == "normal"
    # --no-history leaves the store alone
    r = subprocess.run([sys.executable, "-m", "decomp.cli", "bench", "--suite", "micro", "-k", "tiny-dlp-highs",
                        "--out", str(tmp_path / "run2"), "--history", str(store), "--no-history"],
                       capture_output=True, text=True, env=env, timeout=900)
    assert r.returncode == 0 and "added run" not in r.stdout
    with history.open_store(store, create=False) as s:
        assert len(s.runs()) == 1


def test_demand_table_splits_build_and_solve(tmp_path):
    # The targets speak of solve time, the whole call adds build and certificate: the
    # demand-model table shows both phases beside the whole call (numbers made up for the test).
    from decomp.benchsuite.report import render
    from decomp.benchsuite.results import load_run
    poisson = _case(POISSON, 5.0, demand="poisson")
    poisson["extra_info"]["phase_seconds"] = {"build": 1.25, "solve": 3.5, "certify": 0.25}
    run = load_run(_bench(tmp_path / "run" / "benchmark.json", [_case(NORMAL, 0.5), poisson], "2026-12-05T09:00:00"))
    table = render(run).split("## Demand models")[1].split("\n## ")[0]
    header = next(line for line in table.splitlines() if line.startswith("| demand"))
    row = next(line for line in table.splitlines() if line.startswith("| poisson"))
    cells = dict(zip([c.strip() for c in header.split("|")], [c.strip() for c in row.split("|")]))
    assert (cells["time s"], cells["build s"], cells["solve s"]) == ("5", "1.25", "3.5")
    assert cells["x normal"] == "10"
