"""The command line of the analyst's items: solve tables and --out -, decide, --json, --version, -v."""

import json
import os
import subprocess
import sys

import pandas as pd
import pytest

import decomp
from decomp import ladder
from decomp.cli import main

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


@pytest.fixture(scope="module")
def inst_dir(p100_dir):
    return p100_dir


@pytest.fixture(scope="module")
def solved(inst_dir, tmp_path_factory):
    d = tmp_path_factory.mktemp("solved")
    assert main(["solve", str(inst_dir), "--model", "pnlp", "--method", "ipopt", "--out", str(d / "r.json"),
                 "--leg-table", str(d / "legs.csv"), "--product-table", str(d / "products.parquet")]) == 0
    return d


def _decomp(*args, cwd=None):
    env = dict(os.environ, PYTHONPATH=ROOT)
    return subprocess.run([sys.executable, "-m", "decomp.cli", *map(str, args)], capture_output=True, text=True,
                          env=env, cwd=cwd, timeout=300)


@pytest.mark.solver
def test_solve_writes_leg_and_product_tables(solved, inst_dir):
    inst = decomp.read_instance(inst_dir)
    legs = pd.read_csv(solved / "legs.csv")
    products = pd.read_parquet(solved / "products.parquet")
    assert list(legs.columns) == list(decomp.tables.LEG_COLUMNS)
    assert list(products.columns) == list(decomp.tables.PRODUCT_COLUMNS)
    assert len(legs) == inst.n_legs and len(products) == inst.n_products
    # the tables agree with each other and the instance: A x from the product table is the leg's load
    load = inst.leg_load(products["allocation"].to_numpy())
    assert legs["allocated"].to_numpy() == pytest.approx(load, rel=1e-12)
    bp = dict(zip(legs["leg"], legs["bid_price"]))
    sums = [sum(bp[leg] for leg in row.split(" ")) for row in products["legs"]]
    assert products["displacement"].to_numpy() == pytest.approx(sums, rel=1e-12)
    # complementary slackness (KKT of the PNLP): a priced leg is full
    binding = legs[legs["state"] == "binding"]
    assert (binding["load_factor"] > 1 - 1e-6).all()
    result = json.loads((solved / "r.json").read_text())
    assert result["bid_prices"] == pytest.approx(bp, rel=1e-15)


@pytest.mark.solver
def test_solve_out_dash_and_refused_outputs(inst_dir, tmp_path, capfd):
    code = main(["solve", str(inst_dir), "--model", "dlp", "--method", "highs", "--out", "-"])
    out, err = capfd.readouterr()
    assert code == 0
    data = json.loads(out)                              # stdout is the JSON alone
    assert data["termination"] == "optimal" and "binding" in err and "legs " in err
    assert not (tmp_path / "-").exists()
    # a folder, a FIFO: refused before the solve, left as they were
    fifo = tmp_path / "fifo"
    os.mkfifo(fifo)
    for target in (tmp_path, fifo):
        assert main(["solve", str(inst_dir), "--model", "dlp", "--method", "highs", "--out", str(target)]) == 2
        assert "not a regular file" in capfd.readouterr().err
    assert fifo.is_fifo()
    # options that do not apply
    assert main(["solve", str(inst_dir), "--model", "dlp", "--method", "highs", "--segments", "4",
                 "--out", str(tmp_path / "r.json")]) == 2
    assert "--segments applies to the pwl model only" in capfd.readouterr().err
    assert main(["solve", str(inst_dir), "--model", "dlp", "--method", "highs", "--warm-start",
                 str(tmp_path / "r.json"), "--out", str(tmp_path / "r.json")]) == 2
    assert "not used by method 'highs'" in capfd.readouterr().err
    assert not (tmp_path / "r.json").exists()


@pytest.mark.solver
def test_decide_command(solved, capsys):
    data = json.loads((solved / "r.json").read_text())
    legs = list(data["bid_prices"])[:2]
    # pick two legs that connect: the product table names real itineraries
    products = pd.read_parquet(solved / "products.parquet")
    itinerary = next(r for r in products["legs"] if " " in r)
    cost = sum(data["bid_prices"][leg] for leg in itinerary.split())
    assert main(["decide", str(solved / "r.json"), "--legs", itinerary, "--fare", str(cost + 1), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["verdict"] == "accept" and d["displacement"] == pytest.approx(cost, rel=1e-12)
    assert [x["leg"] for x in d["legs"]] == itinerary.split()
    assert main(["decide", str(solved / "r.json"), "--legs", itinerary, "--fare", str(cost - 1)]) == 0
    text = capsys.readouterr().out
    assert text.startswith("REJECT") and "margin -1.00" in text
    # the leg table is a bid-price table too
    assert main(["decide", str(solved / "legs.csv"), "--legs", legs[0], "--fare", "1e6"]) == 0
    assert capsys.readouterr().out.startswith("ACCEPT")
    assert main(["decide", str(solved / "r.json"), "--legs", "NOPE", "--fare", "1"]) == 2
    assert "unknown leg id 'NOPE'" in capsys.readouterr().err
    assert main(["decide", str(solved / "missing.json"), "--legs", legs[0], "--fare", "1"]) == 2


@pytest.mark.solver
def test_solve_warm_starts_from_a_table_or_a_task_folder(solved, inst_dir, tmp_path):
    task = tmp_path / "tasks" / "k1"
    task.mkdir(parents=True)
    result = json.loads((solved / "r.json").read_text())
    (task / "result.json").write_text(json.dumps({"fingerprint": "f", "task": {"key": "k1"}, "record": {},
                                                  "result": result}))
    for source in (solved / "legs.csv", task):
        out = tmp_path / "w.json"
        assert main(["solve", str(inst_dir), "--model", "pnlp", "--method", "ipopt", "--warm-start", str(source),
                     "--out", str(out)]) == 0
        assert json.loads(out.read_text())["bid_prices"] == pytest.approx(result["bid_prices"], rel=1e-6)


def test_validate_and_inspect_json(inst_dir, tmp_path, capsys):
    assert main(["validate", str(inst_dir), "--json"]) == 0
    v = json.loads(capsys.readouterr().out)
    assert v["valid"] and v["n_products"] == 100
    bad = tmp_path / "bad"
    bad.mkdir()
    (bad / "legs.csv").write_text("leg,origin,destination,capacity\nA1,X,Y,-1\n")
    (bad / "products.csv").write_text("product,legs,fare,mean,std\np,A1,10,1,1\n")
    assert main(["validate", str(bad), "--json"]) == 2
    e = json.loads(capsys.readouterr().out)
    assert not e["valid"] and e["error"]["row"] == 1 and e["error"]["column"] == "capacity"
    assert main(["inspect", str(inst_dir), "--json", "--top", "3"]) == 0
    i = json.loads(capsys.readouterr().out)
    assert i["n_legs"] == 12 and len(i["most_loaded_legs"]) == 3
    assert sum(i["legs_per_product"].values()) == 100


def test_version_verbose_after_subcommand_and_warnings_once(inst_dir, tmp_path):
    r = _decomp("--version")
    assert r.returncode == 0 and r.stdout.strip() == f"decomp {decomp.__version__}"
    r = _decomp("validate", inst_dir, "-v")
    assert r.returncode == 0 and "Traceback" not in r.stderr
    # a leg no product uses: one warning line, not a log line and a printed line
    unused = tmp_path / "unused"
    unused.mkdir()
    (unused / "legs.csv").write_text("leg,origin,destination,capacity\nA1,X,Y,5\nA2,Y,Z,5\n")
    (unused / "products.csv").write_text("product,legs,fare,mean,std\np,A1,10,1,1\n")
    r = _decomp("solve", unused, "--model", "dlp", "--method", "highs", "--out", tmp_path / "r.json")
    assert r.returncode == 0, r.stderr
    assert (r.stdout + r.stderr).count("used by no product") == 1
    r = _decomp("validate", unused)
    assert (r.stdout + r.stderr).count("used by no product") == 1


def _options(parser, name="decomp"):
    import argparse

    for a in parser._actions:
        if isinstance(a, argparse._SubParsersAction):
            for n, sp in a.choices.items():
                yield from _options(sp, f"{name} {n}")
        elif not isinstance(a, (argparse._HelpAction, argparse._VersionAction)):
            yield name, a


def test_every_option_has_help_with_its_default():
    import argparse

    from decomp.cli import build_parser

    missing = []
    for name, a in _options(build_parser()):
        flag = isinstance(a, (argparse._StoreTrueAction, argparse.BooleanOptionalAction))
        needs_default = a.option_strings and not a.required and not flag and a.default is not argparse.SUPPRESS
        if not a.help or (needs_default and "default" not in a.help):
            missing.append(f"{name} {'/'.join(a.option_strings) or a.dest}")
    assert not missing, missing
    # and every help page renders (a stray % in a help text breaks --help only when it is asked for)
    def pages(parser):
        yield parser
        for a in parser._actions:
            if isinstance(a, argparse._SubParsersAction):
                for sp in a.choices.values():
                    yield from pages(sp)
    assert all(p.format_help() for p in pages(build_parser()))


def test_generate_into_an_unwritable_place_is_an_error_not_a_traceback(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    r = _decomp("generate", "--products", "100", "--out", blocker / "inst")
    assert r.returncode == 2 and "is a file, not a folder" in r.stderr and "Traceback" not in r.stderr
    assert blocker.read_text() == "x"


def test_simulate_takes_a_list_starting_with_a_negative_number():
    from decomp.cli import build_parser

    args = build_parser().parse_args(["simulate", "p100", "--forecast-bias", "-0.2,0,0.2", "--out", "x"])
    assert args.forecast_bias == "-0.2,0,0.2"


def test_bench_list_shows_case_names(capsys):
    assert main(["bench", "--suite", "micro", "--list", "-k", "dlp"]) == 0
    ids = capsys.readouterr().out.split()
    assert ids and all("dlp" in i for i in ids) and "tiny-dlp-highs" in ids
    assert main(["bench", "--suite", "micro", "--list", "-k", "no_such_case"]) == 2


def test_ipopt_bid_prices_are_never_negative():
    import numpy as np

    from decomp.methods.ipopt import nonnegative_bid_prices

    # Ipopt's mult_g stopped early can be negative; clipped, with the reason in the note
    pi, note = nonnegative_bid_prices(np.array([3.0, -0.5, 0.0]), np.array([100.0]))
    assert pi.tolist() == [3.0, 0.0, 0.0] and "1 of Ipopt's leg multipliers were negative" in note
    pi, note = nonnegative_bid_prices(np.array([3.0, -1e-12]), np.array([100.0]))
    assert pi.tolist() == [3.0, 0.0] and note is None                 # round-off: clipped silently
    # and at iteration limits on the ladder rungs, every bid price is >= 0
    for rung in ("p100", "p1k"):
        for k in (1, 3, 10):
            r = decomp.solve(ladder.load_rung(rung), model="pnlp", method="ipopt", iteration_limit=k)
            assert r.termination.value == "iteration_limit" and (r.bid_price_array >= 0).all()


def test_ipopt_reports_progress(monkeypatch, caplog):
    import logging

    from decomp.methods import ipopt

    monkeypatch.setattr(ipopt, "PROGRESS_SECONDS", 0.0)     # every iteration, instead of every 5 s
    with caplog.at_level(logging.INFO, logger="decomp.progress"):
        decomp.solve(ladder.load_rung("p100"), model="pnlp", method="ipopt")
    lines = [r.getMessage() for r in caplog.records if r.name == "decomp.progress.ipopt"]
    assert lines and all("iteration" in l and "revenue" in l and " s" in l for l in lines)
