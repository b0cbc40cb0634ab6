"""``decomp decide`` reads a bid-price table or a result only when it is unambiguous, and a decision
from a non-optimal result says so (the decision rule: accept when the fare covers the sum of the
itinerary's bid prices).
"""

from __future__ import annotations

import json

import pytest

from decomp import ladder
from decomp.cli import main

from support.cli import run_cli


@pytest.mark.solver
def test_decide_refuses_a_table_of_decomp_tables(p100_dir, p100_dlp, tmp_path, capsys):
    # a `decomp tables` file holds one row per leg, period and seats left; the last row won
    tables = tmp_path / "t.parquet"
    assert main(["tables", str(p100_dir), "--static", str(p100_dlp), "--periods", "5", "--out", str(tables)]) == 0
    leg = str(ladder.load_rung("p100").leg_ids[0])
    rc, _, err = run_cli(["decide", tables, "--legs", leg, "--fare", "100"], capsys)
    assert rc == 2 and "listed twice" in err and "decomp tables" in err and "row" in err


def test_decide_refuses_duplicate_and_negative_bid_prices(tmp_path, capsys):
    dup = tmp_path / "dup.csv"
    dup.write_text("leg,bid_price\nA1,100\nA2,3\nA1,5\n")
    rc, out, err = run_cli(["decide", dup, "--legs", "A1", "--fare", "50"], capsys)
    assert rc == 2 and "row 3" in err and "'A1' is listed twice" in err and not out
    neg = tmp_path / "neg.csv"
    neg.write_text("leg,bid_price\nA1,-50\n")
    rc, out, err = run_cli(["decide", neg, "--legs", "A1", "--fare", "10"], capsys)
    assert rc == 2 and "-50" in err and ">= 0" in err and not out
    # a result JSON whose bid_prices object names a leg twice (json keeps the last one silently)
    res = tmp_path / "r.json"
    res.write_text('{"model": "dlp", "method": "highs", "termination": "optimal", "solution_status": "optimal", '
                   '"bid_prices": {"A1": 100, "A1": 5}}')
    rc, _, err = run_cli(["decide", res, "--legs", "A1", "--fare", "50"], capsys)
    assert rc == 2 and "appears twice" in err


def test_decide_refuses_a_leg_repeated_in_the_itinerary(tmp_path, capsys):
    # "L L" counted the same leg twice
    t = tmp_path / "bp.csv"
    t.write_text("leg,bid_price\nL,40\n")
    rc, out, err = run_cli(["decide", t, "--legs", "L L", "--fare", "100"], capsys)
    assert rc == 2 and "appears twice" in err and not out


@pytest.mark.solver
def test_decide_from_a_non_optimal_result_says_so(p100_dir, tmp_path, capsys):
    # a result stopped by its iteration limit; the decision must carry its status
    res = tmp_path / "limited.json"
    assert main(["solve", str(p100_dir), "--model", "pnlp", "--method", "ipopt", "--iteration-limit", "1",
                 "--out", str(res)]) == 1
    capsys.readouterr()
    leg = str(ladder.load_rung("p100").leg_ids[0])
    rc, out, err = run_cli(["decide", res, "--legs", leg, "--fare", "1000"], capsys)
    assert rc == 1 and "WARNING" in out and "iteration_limit" in out and "not certified optimal" in err
    rc, out, _ = run_cli(["decide", res, "--legs", leg, "--fare", "1000", "--json"], capsys)
    d = json.loads(out)
    assert rc == 1 and d["source_status"].startswith("iteration_limit") and d["warning"]
    from decomp.result import SolveResult

    decision = SolveResult.from_json(res).decide(leg, 1000)
    assert decision.to_dict()["warning"] and "WARNING" in decision.text()
