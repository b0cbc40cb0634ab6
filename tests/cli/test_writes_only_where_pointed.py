"""Every command that writes, writes only where it was pointed.

Each command runs in an empty working folder with its inputs elsewhere and its outputs pointed into
``dest``; afterwards the working folder holds nothing but ``dest``, the inputs' folder is as it was,
and ``dest`` holds what the command says it wrote. (Temporary files of libraries under the system's
temporary folder are not counted: they are removed by the libraries and are not the user's folders.)
"""

from __future__ import annotations

import pathlib

import pytest

from decomp.cli import main

from support.tiny import write_benchmark, write_tiny, write_tiny_markets

# HiGHS solves the inputs; `decomp bench` runs pytest in a subprocess and `decomp run` a Dask cluster.
pytestmark = [pytest.mark.solver, pytest.mark.integration]


def _tree(root: pathlib.Path) -> dict:
    return {str(p.relative_to(root)): (p.stat().st_size if p.is_file() else None) for p in sorted(root.rglob("*"))}


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    root = tmp_path_factory.mktemp("inputs")
    inst = write_tiny(root / "inst")
    write_tiny_markets(root / "mkt")
    assert main(["solve", str(inst), "--model", "dlp", "--method", "highs", "--out", str(root / "r.json")]) == 0
    write_benchmark(root / "benchmark.json")
    return root


@pytest.fixture(scope="module")
def bench_run(tmp_path_factory):
    """``decomp bench`` on one micro case, run from an empty working folder: it too writes only into
    its --out and the history store its --history names (checked here); its benchmark.json feeds bench
    compare and bench report."""
    import os

    work = tmp_path_factory.mktemp("benchwork")
    cwd = os.getcwd()
    os.chdir(work)
    try:
        rc = main(["bench", "--suite", "micro", "-k", "tiny-dlp-highs", "--no-progress", "--out", str(work / "dest"),
                   "--history", str(work / "dest" / "history.sqlite")])
    finally:
        os.chdir(cwd)
    assert rc == 0
    assert [p.name for p in work.iterdir()] == ["dest"]
    assert (work / "dest" / "benchmark.json").is_file() and (work / "dest" / "report.md").is_file()
    assert (work / "dest" / "history.sqlite").is_file()
    return work / "dest" / "benchmark.json"


COMMANDS = {
    "solve": (["solve", "{inst}", "--model", "dlp", "--method", "highs", "--out", "{dest}/r.json",
               "--leg-table", "{dest}/legs.csv", "--product-table", "{dest}/products.parquet"],
              ["r.json", "legs.csv", "products.parquet"]),
    "generate": (["generate", "--products", "20", "--out", "{dest}/g"], ["g/legs.csv", "g/products.csv", "g/meta.json"]),
    "generate --markets": (["generate", "--products", "50", "--markets", "--out", "{dest}/g"],
                           ["g/legs.csv", "g/products.csv", "g/markets.csv", "g/meta.json"]),
    "tables": (["tables", "{inst}", "--static", "{res}", "--periods", "5", "--out", "{dest}/t.parquet"],
               ["t.parquet"]),
    "simulate": (["simulate", "{inst}", "--policies", "dlp:highs,fcfs", "--paths", "4", "--workers", "0",
                  "--no-progress", "--out", "{dest}/sim"], ["sim/simulation.json", "sim/simulation.md"]),
    "simulate, markets": (["simulate", "{mkt}", "--policies", "sblp:highs,dlp:highs,fcfs", "--paths", "4",
                           "--reestimate", "1", "--no-progress", "--out", "{dest}/sim"],
                          ["sim/simulation.json", "sim/simulation.md"]),
    "run": (["run", "{inst}", "--out", "{dest}/run", "--workers", "1", "--no-progress"],
            ["run/summary.json", "run/summary.md", "run/run.json"]),
    "size": (["size", "--bench", "{bench}", "--products", "100000", "--window", "1h", "--out", "{dest}/sz"],
             ["sz/sizing.json", "sz/sizing.png"]),
    "bench compare": (["bench", "compare", "{run}", "{run}", "--out", "{dest}/cmp.json"], ["cmp.json"]),
    "bench report": (["bench", "report", "{run}", "--out", "{dest}/rep"], ["rep/report.md"]),
    "baseline": (["baseline", "record", "--suite", "micro", "--out", "{dest}/base"], ["base/manifest.json"]),
}


@pytest.mark.parametrize("name", list(COMMANDS))
def test_a_command_writes_only_where_it_was_pointed(name, inputs, bench_run, tmp_path, monkeypatch):
    work = tmp_path / "work"
    dest = work / "dest"
    work.mkdir()
    monkeypatch.chdir(work)
    before, before_run = _tree(inputs), _tree(bench_run.parent)
    argv, expected = COMMANDS[name]
    words = {"inst": inputs / "inst", "mkt": inputs / "mkt", "res": inputs / "r.json", "bench": inputs / "benchmark.json", "dest": dest,
             "run": bench_run}
    rc = main([a.format(**words) for a in argv])
    assert rc in (0, 1), rc                  # 1: a size that does not fit the window is still written
    assert [p.name for p in work.iterdir()] == ["dest"]                   # nothing else in the working folder
    assert _tree(inputs) == before and _tree(bench_run.parent) == before_run   # nothing beside the inputs
    for rel in expected:
        assert (dest / rel).is_file(), rel
    assert not [p for p in dest.rglob("*.tmp")]                           # no temporary left behind
    if name == "baseline":                   # and baseline check into its own --out, from the working folder
        assert main(["baseline", "check", str(dest / "base"), "--out", str(dest / "check"),
                     "--history", str(dest / "history.sqlite")]) == 0
        assert [p.name for p in work.iterdir()] == ["dest"] and (dest / "check" / "check.json").is_file()
        assert (dest / "history.sqlite").is_file()
