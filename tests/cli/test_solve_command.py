"""``decomp solve``: result JSON, allocation files, summary, exit codes."""

import json

import numpy as np
import pyarrow.csv as pcsv
import pyarrow.parquet as pq
import pytest

from decomp import ladder
from decomp.cli import main


@pytest.mark.solver
def test_solve_writes_result_and_allocation(p100_dir, tmp_path, capsys):
    out, alloc = tmp_path / "r.json", tmp_path / "a.csv"
    code = main(["solve", str(p100_dir), "--model", "pnlp", "--method", "ipopt", "--out", str(out),
                 "--product-table", str(alloc)])
    assert code == 0
    data = json.loads(out.read_text())
    for key in ("schema", "schema_version", "termination", "solution_status", "ok", "model", "method",
                "objective", "gap", "bid_prices", "iterations", "seconds", "solver", "solver_version",
                "certificate", "context"):
        assert key in data, key
    assert data["termination"] == "optimal" and data["model"] == "pnlp" and data["method"] == "ipopt"
    assert data["schema"] == "decomp.result" and data["schema_version"] == 1 and data["ok"] is True
    assert data["context"]["instance"] == "p100"
    assert set(data["seconds"]) == {"build", "solve", "certify"}
    # the versions are those the libraries themselves report (numpy, cyipopt.IPOPT_VERSION, highspy's
    # compile-time constants)
    import cyipopt
    import highspy

    v = data["context"]["versions"]
    assert v["numpy"] == np.__version__
    assert v["ipopt_library"] == ".".join(map(str, cyipopt.IPOPT_VERSION))
    assert v["highs_library"] == f"{highspy.HIGHS_VERSION_MAJOR}.{highspy.HIGHS_VERSION_MINOR}.{highspy.HIGHS_VERSION_PATCH}"
    assert data["solver_version"] == "Ipopt " + v["ipopt_library"]
    inst = ladder.load_rung("p100")
    assert set(data["bid_prices"]) == set(inst.leg_ids.tolist())
    assert all(v >= 0 for v in data["bid_prices"].values())
    table = pcsv.read_csv(alloc)
    assert table.column_names == ["product", "legs", "fare", "mean", "std", "allocation", "displacement",
                                  "margin", "decision"]
    assert table.num_rows == inst.n_products
    x = table.column("allocation").to_numpy()
    # the allocation file keeps capacities (checked from the file, against the instance)
    assert np.all(inst.leg_load(x) <= inst.capacity * (1 + 1e-9))
    text = capsys.readouterr().out
    assert "optimal" in text and "highest bid prices" in text
    top = max(data["bid_prices"], key=data["bid_prices"].get)
    assert top in text


@pytest.mark.solver
def test_parquet_allocation_and_warm_start(p100_dir, tmp_path):
    first = tmp_path / "r1.json"
    assert main(["solve", str(p100_dir), "--model", "dlp", "--method", "highs", "--out", str(first),
                 "--product-table", str(tmp_path / "a.parquet")]) == 0
    assert pq.read_table(tmp_path / "a.parquet").num_rows == 100
    second = tmp_path / "r2.json"
    assert main(["solve", str(p100_dir), "--model", "pnlp", "--method", "ipopt", "--warm-start", str(first),
                 "--out", str(second)]) == 0
    assert json.loads(second.read_text())["termination"] == "optimal"


@pytest.mark.solver
def test_limits_exit_one_and_still_write(p100_dir, tmp_path):
    out = tmp_path / "r.json"
    assert main(["solve", str(p100_dir), "--model", "pnlp", "--method", "ipopt", "--iteration-limit", "2",
                 "--out", str(out)]) == 1
    data = json.loads(out.read_text())
    assert data["termination"] == "iteration_limit" and data["solution_status"] != "optimal"


def test_bad_input_exits_two(p100_dir, tmp_path, capsys):
    out = tmp_path / "r.json"
    assert main(["solve", str(tmp_path / "missing"), "--model", "dlp", "--method", "highs", "--out", str(out)]) == 2
    assert "missing" in capsys.readouterr().err
    assert main(["solve", str(p100_dir), "--model", "pnlp", "--method", "highs", "--out", str(out)]) == 2
    assert "methods for 'pnlp'" in capsys.readouterr().err
    assert main(["solve", str(p100_dir), "--model", "dlp", "--method", "highs", "--out", str(out),
                 "--product-table", str(tmp_path / "a.txt")]) == 2
    assert main(["solve", str(p100_dir), "--model", "dlp", "--method", "highs", "--out", str(out),
                 "--tol", "5"]) == 2
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    assert main(["solve", str(p100_dir), "--model", "pnlp", "--method", "ipopt", "--out", str(out),
                 "--warm-start", str(bad)]) == 2
    assert not out.exists()
