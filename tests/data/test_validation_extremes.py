"""Bad input at the edges (a fault-injection pass found each case): each gets a clear
InstanceError naming file, row and column, or is accepted on purpose (documented in decomp.io).

Tables are the hand-written ones of tests/support/tables.py; rows and columns expected below
are read off them (row 1 is the first line after the header).
"""

from __future__ import annotations

import json
import os

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from decomp.errors import InstanceError
from decomp.io import read_instance, write_instance

from support.tables import LEGS, PRODUCTS, expect, make, with_field


def _cli(args, capsys):
    from decomp.cli import main

    rc = main(args)
    cap = capsys.readouterr()
    return rc, cap.out, cap.err


# ---------------------------------------------------------------------------- accepted, now rejected
def test_itinerary_flying_a_leg_twice(tmp_path):
    # L2 HU2->BO3, L3 BO3->HU2, L2 again: the legs connect, but one sale would take two seats on L2
    prods = PRODUCTS + ["P5,L2 L3 L2,100,5,1"]
    err = expect(make(tmp_path, products=prods), "products.csv", row=5, column="legs", match="flies leg 'L2' twice")
    assert err.value == "L2 L3 L2"


def test_leg_whose_origin_is_its_destination(tmp_path):
    legs = LEGS + ["L4,KA1,KA1,10"]
    expect(make(tmp_path, legs=legs), "legs.csv", row=4, column="destination", match="origin is its destination")


def test_negative_binomial_with_variance_not_above_mean(tmp_path):
    prods = [PRODUCTS[0] + ",distribution"] + [p + ",negbin" for p in PRODUCTS[1:]]
    prods[1] = "P1,L1,100,10,5,negbin"     # 25 > 10: fine
    # P2: mean 5, std 2 -> 4 <= 5 (a negative binomial's variance exceeds its mean: r, p need std^2 > mean)
    expect(make(tmp_path, products=prods), "products.csv", row=2, column="std", match="std^2 > mean")


def test_negative_binomial_from_meta(tmp_path):
    d = make(tmp_path)
    (d / "meta.json").write_text(json.dumps({"distribution": "negbin"}))
    expect(d, "products.csv", row=1, column="std", match="std^2 > mean")       # P1: 3^2 = 9 <= 10


@pytest.mark.parametrize("value", ["lognormal", 5, None, ["normal"]])
def test_meta_distribution_unknown_or_not_text(tmp_path, value, capsys):
    d = make(tmp_path)
    (d / "meta.json").write_text(json.dumps({"distribution": value}))
    expect(d, "meta.json", column="distribution", match="unknown demand distribution")
    rc, _, err = _cli(["solve", str(d), "--model", "pnlp", "--method", "lagrangian", "--out",
                       str(tmp_path / "r.json")], capsys)
    assert rc == 2 and "meta.json" in err and not (tmp_path / "r.json").exists()


@pytest.mark.parametrize("where", ["product", "leg", "origin"])
def test_nul_character_in_an_id(tmp_path, where):
    if where == "product":
        expect(make(tmp_path, products=with_field(PRODUCTS, 1, "product", "P\x001")), "products.csv", row=1,
               column="product", match="control characters")
    elif where == "leg":
        legs = with_field(LEGS, 3, "leg", "L\x003")
        prods = [p.replace("L3", "L\x003") for p in PRODUCTS]
        expect(make(tmp_path, legs=legs, products=prods), "legs.csv", row=3, column="leg", match="control")
    else:
        legs = with_field(LEGS, 2, "origin", "HU\x002")
        expect(make(tmp_path, legs=legs), "legs.csv", row=2, column="origin", match="control")


# ---------------------------------------------------------------------------- tracebacks
def test_header_field_longer_than_the_csv_limit(tmp_path, capsys):
    prods = [PRODUCTS[0] + "," + "x" * 140_000] + [p + ",1" for p in PRODUCTS[1:]]
    d = make(tmp_path, products=prods)
    rc, _, err = _cli(["validate", str(d)], capsys)
    assert rc == 2 and "products.csv" in err and "Traceback" not in err
    assert len(err) < 2000                 # the 140,000-character name is not echoed


def test_meta_nested_1500_deep(tmp_path, capsys):
    d = make(tmp_path)
    (d / "meta.json").write_text('{"a": ' + "[" * 1500 + "]" * 1500 + "}")
    expect(d, "meta.json", match="nested too deeply")
    rc, _, err = _cli(["validate", str(d)], capsys)
    assert rc == 2 and "RecursionError" not in err


# ---------------------------------------------------------------------------- echo capped
def test_ten_megabyte_bad_value_is_not_echoed(tmp_path, capsys):
    huge = "x" * 10_000_000
    d = make(tmp_path, products=with_field(PRODUCTS, 2, "fare", huge))
    err_obj = expect(d, "products.csv", row=2, column="fare", match="not a number")
    assert len(str(err_obj)) < 1000
    rc, _, err = _cli(["validate", str(d)], capsys)
    assert rc == 2 and len(err) < 1000 and "10000000 characters" in err


def test_ten_megabyte_bad_value_in_a_run_is_capped(tmp_path):
    from decomp.options import SolverOptions
    from decomp.production import summary
    from decomp.production.batch import build_batch
    from decomp.production.runner import RunConfig, run_task

    nets = tmp_path / "nets"
    nets.mkdir()
    make(nets, products=with_field(PRODUCTS, 2, "fare", "y" * 10_000_000), name="net0")
    b = build_batch(str(nets))
    cfg = RunConfig(model="dlp", method="highs", options=SolverOptions(threads=1), out=str(tmp_path / "out"))
    rec = run_task(b.tasks[0], cfg, cfg.fingerprint(b.tasks[0]))
    assert rec["task_status"] == "failed" and "row 2" in rec["error"] and len(rec["error"]) < 2000
    s = summary.build_summary(b, cfg, {b.tasks[0].key: {**rec, "error": "z" * 10_000_000}}, wall_seconds=1.0)
    assert len(json.dumps(s)) < 5000 and len(summary.to_markdown(s)) < 5000


# ---------------------------------------------------------------------------- misleading reasons
def test_symlink_loop_folder_and_fifo_are_named_for_what_they_are(tmp_path):
    d = make(tmp_path, products=None)
    (d / "products.csv").symlink_to(d / "products.csv")
    expect(d, "products.csv", match="symbolic link loop")
    (d / "products.csv").unlink()
    (d / "products.csv").mkdir()
    expect(d, "products.csv", match="a folder, not a file")
    (d / "products.csv").rmdir()
    os.mkfifo(d / "products.csv")            # reading it would block: refused before it is opened
    expect(d, "products.csv", match="not a regular file")
    (d / "products.csv").unlink()
    (d / "products.csv").symlink_to(tmp_path / "nowhere.csv")
    expect(d, "products.csv", match="broken symbolic link")


def test_bad_byte_deep_in_the_file_gets_its_row(tmp_path):
    rows = [PRODUCTS[0]] + [f"Q{i},L1,100,1,0.5" for i in range(1, 50_001)]
    d = make(tmp_path, products=rows)
    data = (d / "products.csv").read_bytes()
    line = b"Q43210,L1,100,1,0.5"
    (d / "products.csv").write_bytes(data.replace(line, b"Q43210,L1,1\xff0,1,0.5"))
    expect(d, "products.csv", row=43_210, column="fare", match="not valid UTF-8")


# ---------------------------------------------------------------------------- too strict
@pytest.mark.parametrize("eol", ["\n", "\r\n"])
def test_one_trailing_blank_line_is_accepted(tmp_path, eol):
    d = make(tmp_path)
    (d / "products.csv").write_text(eol.join(PRODUCTS) + eol + eol, newline="")
    assert read_instance(d).n_products == len(PRODUCTS) - 1
    (d / "products.csv").write_text(eol.join(PRODUCTS) + eol + eol + eol, newline="")    # two: an error
    with pytest.raises(InstanceError, match="products.csv"):
        read_instance(d)


def test_parquet_extra_columns_with_null_and_nested_values_are_kept(tmp_path):
    d = make(tmp_path)
    inst = read_instance(d)
    write_instance(inst, tmp_path / "pq", format="parquet")
    t = pq.read_table(tmp_path / "pq" / "products.parquet")
    t = t.append_column("note", pa.array(["a", None, "c", None]))
    t = t.append_column("bank", pa.array([1, None, 3, 4], pa.int64()))
    t = t.append_column("tags", pa.array([["x"], [], None, ["y", "z"]], pa.list_(pa.string())))
    pq.write_table(t, tmp_path / "pq" / "products.parquet")
    back = read_instance(tmp_path / "pq")
    assert back.product_extra["note"].tolist() == ["a", None, "c", None]
    assert back.product_extra["bank"].tolist() == [1, None, 3, 4]
    assert back.product_extra["tags"].tolist() == ['["x"]', "[]", None, '["y", "z"]']
    # and it writes back: Parquet keeps the nulls; CSV writes them as empty fields, so the column
    # reads back as text (CSV has no null; an extra column is numeric only when every value is)
    again = read_instance(write_instance(back, tmp_path / "again-pq", format="parquet"))
    assert again.product_extra["bank"].tolist() == [1, None, 3, 4]
    again = read_instance(write_instance(back, tmp_path / "again-csv", format="csv"))
    assert again.product_extra["bank"].tolist() == ["1", "", "3", "4"]


# ---------------------------------------------------------------------------- extreme values
@pytest.mark.parametrize("file,col,limit", [("legs.csv", "capacity", "1e+12"), ("products.csv", "fare", "1e+12"),
                                            ("products.csv", "mean", "1e+06"), ("products.csv", "std", "1e+06")])
def test_values_of_1e308_are_refused_with_the_limit(tmp_path, file, col, limit):
    lines = LEGS if file == "legs.csv" else PRODUCTS
    changed = with_field(lines, 2, col, "1e308")
    d = make(tmp_path, **({"legs": changed} if file == "legs.csv" else {"products": changed}))
    expect(d, file, row=2, column=col, match=f"limit of {limit}")


@pytest.mark.solver
def test_unlimited_capacity_of_1e12_solves(tmp_path):
    from decomp import solve

    d = make(tmp_path, legs=with_field(LEGS, 1, "capacity", "1e12"))
    inst = read_instance(d)
    res = solve(inst, model="dlp", method="highs")
    assert res.ok
    # An unlimited leg carries full mean demand of its local product P1 and has bid price 0 (an LP
    # fact: a slack constraint's dual is 0); the value is checked against scipy's linprog (HiGHS).
    from scipy.optimize import linprog

    lp = linprog(-inst.fare, A_ub=inst.A, b_ub=inst.capacity,
                 bounds=np.column_stack([np.zeros(inst.n_products), inst.mean]), method="highs")
    assert res.objective == pytest.approx(-lp.fun, rel=1e-9) and res.bid_prices["L1"] == 0.0


def test_solve_warm_start_of_1e308_is_clamped(tmp_path, capsys):
    d = make(tmp_path)
    warm = tmp_path / "warm.csv"                # a bid-price table, columns leg, bid_price
    warm.write_text("leg,bid_price\nL1,1e308\nL2,1e308\nL3,1e308\n")
    rc, out, _ = _cli(["solve", str(d), "--model", "pnlp", "--method", "lagrangian", "--warm-start", str(warm),
                       "--out", str(tmp_path / "r.json")], capsys)
    assert rc == 0, out
    assert json.loads((tmp_path / "r.json").read_text())["termination"] == "optimal"


# ---------------------------------------------------------------------------- zero-capacity legs
@pytest.mark.solver
@pytest.mark.parametrize("model,method", [("dlp", "highs"), ("pnlp", "ipopt")])
def test_bid_price_of_a_closed_leg_is_not_unique(tmp_path, model, method):
    """Any bid price at or above the smallest one that closes the leg's products is optimal: the
    leg's term c_i pi_i is 0, so the dual value does not change when pi_i grows (Lagrangian /
    LP duality; the dual value is decomp.certify's, the solution HiGHS' or Ipopt's)."""
    from decomp import certify, solve

    d = make(tmp_path, legs=with_field(LEGS, 2, "capacity", "0"))
    inst = read_instance(d)
    res = solve(inst, model=model, method=method)
    assert res.ok
    pi = np.asarray(res.bid_price_array, dtype=np.float64)
    base = certify.certify(inst, model, res.allocation, pi).dual_value
    for factor in (2.0, 10.0, 1000.0):
        raised = pi.copy()
        raised[1] = max(pi[1], 1.0) * factor            # L2, the closed leg
        assert certify.certify(inst, model, res.allocation, raised).dual_value == pytest.approx(base, rel=1e-9)
    assert res.allocation[[1, 2]].max() <= 1e-6 * inst.mean.max()    # P2, P3 (on L2) sell nothing
