"""``decomp tables`` and the table policies of ``decomp simulate``: files, reports, exit codes.

Checks against outside facts: the DLP value bounds every policy's expected revenue
(Jensen's inequality, common practice), so its simulated mean may exceed it only by
sampling error; the Parquet file is read back with pyarrow (a reference library).
"""

import json

import numpy as np
import pyarrow.parquet as pq
import pytest

from decomp import ladder
from decomp.cli import main
from decomp.dynamic import read_parquet


@pytest.mark.solver
def test_tables_from_a_static_result(p100_dir, tmp_path, capsys):
    res, out = tmp_path / "dlp.json", tmp_path / "tables.parquet"
    assert main(["solve", str(p100_dir), "--model", "dlp", "--method", "highs", "--out", str(res)]) == 0
    assert main(["tables", str(p100_dir), "--static", str(res), "--periods", "30", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "legs x periods x seats x products per leg" in text and "wrote" in text
    inst = ladder.load_rung("p100")
    table = pq.read_table(out)
    cap = np.floor(inst.capacity + 1e-9).astype(int)
    assert table.num_rows == int(cap.sum()) * 30                       # every leg, period and seat count
    assert set(table.column("leg").to_pylist()) == set(inst.leg_ids.tolist())
    tb = read_parquet(out)
    assert tb.aligned_with(inst) and tb.periods == 30
    # a solve here gives the same tables as the result file (HiGHS is deterministic)
    out2 = tmp_path / "t2.parquet"
    assert main(["tables", str(p100_dir), "--model", "dlp", "--periods", "30", "--out", str(out2)]) == 0
    np.testing.assert_allclose(read_parquet(out2).values, tb.values, rtol=1e-9)


def test_tables_bad_input(p100_dir, tmp_path, capsys):
    res = tmp_path / "r.csv"                 # a leg table (columns leg, bid_price) for a leg not in the network
    res.write_text("leg,bid_price\nnope,1.0\n")
    assert main(["tables", str(p100_dir), "--static", str(res), "--out", str(tmp_path / "t.parquet")]) == 2
    assert "no bid price for 12 leg(s)" in capsys.readouterr().err
    assert not (tmp_path / "t.parquet").exists()
    # the relaxation needs at most one request per period: refused with the reason, nothing written
    assert main(["tables", str(p100_dir), "--model", "dlp", "--by", "relaxation", "--periods", "50",
                 "--out", str(tmp_path / "t.parquet")]) == 2
    assert "at most one request per period" in capsys.readouterr().err
    assert not (tmp_path / "t.parquet").exists()


@pytest.mark.solver
def test_simulate_with_table_policy(p100_dir, tmp_path, capsys):
    out = tmp_path / "sim"
    code = main(["simulate", str(p100_dir), "--policies", "dlp:highs,dynamic:dlp:highs", "--paths", "40",
                 "--periods", "60", "--workers", "0", "--no-progress", "--out", str(out)])
    assert code == 0
    text = capsys.readouterr().out
    assert "network bounds" in text and "of network bound %" in text
    data = json.loads((out / "simulation.json").read_text())
    bound = data["network_bound"]["value"]
    assert data["network_bound"]["name"] == "DLP"
    pols = {p["policy"]: p for p in data["scenarios"][0]["policies"]}
    assert set(pols) == {"bid dlp:highs", "dynamic:dlp:highs", "fcfs"}
    for p in pols.values():
        assert p["revenue"]["low"] <= bound                           # the DLP value bounds every policy
        assert p["share_of_network_bound"]["mean"] == pytest.approx(p["revenue"]["mean"] / bound, rel=1e-12)
    assert pols["dynamic:dlp:highs"]["solves"] == 1                    # computed once, at time 0
    paired = {d["policy"]: d for d in data["scenarios"][0]["paired"]}
    assert paired["dynamic:dlp:highs"]["halfwidth"] < paired["dynamic:dlp:highs"]["unpaired_halfwidth"]


def test_simulate_rejects_bad_table_policy(p100_dir, tmp_path, capsys):
    assert main(["simulate", str(p100_dir), "--policies", "dynamic:lp", "--paths", "5", "--workers", "0",
                 "--no-progress", "--out", str(tmp_path / "s")]) == 2
    assert "unknown model" in capsys.readouterr().err
    assert main(["simulate", str(p100_dir), "--policies", "dynamic:dlp", "--periods", "0", "--paths", "5",
                 "--workers", "0", "--no-progress", "--out", str(tmp_path / "s")]) == 2


@pytest.mark.solver
def test_simulate_relaxed_policy_needs_one_request_per_period(p100_dir, tmp_path, capsys):
    assert main(["simulate", str(p100_dir), "--policies", "relaxed:dlp", "--periods", "50", "--paths", "5",
                 "--workers", "0", "--no-progress", "--out", str(tmp_path / "s")]) == 2
    assert "at most one request per period" in capsys.readouterr().err
