"""The library from a notebook: DataFrames in, leg and product tables out, decisions, one result schema.

The worked example (``LEGS``, ``PRODUCTS`` of tests/support/networks.py) is small enough to
solve by hand; its DLP is checked against HiGHS and against the hand solution written there.
"""

import json
import math

import numpy as np
import pyarrow as pa
import pytest

import decomp
import decomp.tables
from decomp import Instance, InstanceError, SolveResult
from decomp.errors import ConfigError
from decomp.io import read_instance, write_instance

from support.paths import ROOT

from support.networks import HAND_ALLOCATION, HAND_REVENUE, LEGS, PRODUCTS

@pytest.fixture(scope="module")
def example():
    return Instance.from_frames(LEGS, PRODUCTS, meta={"name": "hand"})


@pytest.fixture(scope="module")
def dlp(example):
    return decomp.solve(example, model="dlp", method="highs")


# -- building from DataFrames, validated like files ----------------------------------

def test_from_frames_reads_like_the_files(example, tmp_path):
    write_instance(example, tmp_path / "hand")
    back = read_instance(tmp_path / "hand")
    for name in ("leg_ids", "leg_origin", "leg_destination", "capacity", "product_ids", "leg_ptr", "leg_index",
                 "fare", "mean", "std"):
        assert np.array_equal(getattr(example, name), getattr(back, name)), name
    # legs as lists, and an Arrow table, give the same instance
    as_lists = PRODUCTS.assign(legs=[s.split() for s in PRODUCTS["legs"]])
    for legs, products in ((LEGS, as_lists), (pa.Table.from_pandas(LEGS), pa.Table.from_pandas(PRODUCTS))):
        other = Instance.from_frames(legs, products)
        assert np.array_equal(other.leg_index, example.leg_index) and np.array_equal(other.fare, example.fare)


BAD = [  # (table, column, row (0-based), value)
    ("legs", "capacity", 1, -5.0),
    ("legs", "leg", 2, "A1"),                # duplicate id
    ("products", "mean", 1, float("nan")),
    ("products", "fare", 0, 0.0),
    ("products", "std", 4, float("inf")),
    ("products", "legs", 3, "A1 A9"),        # unknown leg
    ("products", "legs", 0, "A2 A1"),        # legs that do not connect
]


@pytest.mark.parametrize("table,column,row,value", BAD)
def test_from_frames_errors_are_the_file_errors(tmp_path, table, column, row, value):
    legs, products = LEGS.copy(), PRODUCTS.copy()
    frame = legs if table == "legs" else products
    frame[column] = frame[column].astype(object)
    frame.loc[row, column] = value
    with pytest.raises(InstanceError) as from_frames:
        Instance.from_frames(legs, products)
    folder = tmp_path / "inst"
    folder.mkdir()
    legs.to_csv(folder / "legs.csv", index=False)
    products.to_csv(folder / "products.csv", index=False)
    with pytest.raises(InstanceError) as from_files:
        read_instance(folder)
    a, b = from_frames.value, from_files.value
    assert (a.reason, a.row, a.column) == (b.reason, b.row, b.column) == (a.reason, row + 1, a.column)
    assert a.column == (column if column != "leg" else "leg")
    assert a.file == table and b.file.endswith(f"{table}.csv")


def test_from_lists_is_checked():
    legs = [("A1", "AAA", "HUB", 100.0)]
    with pytest.raises(InstanceError, match="legs, row 1, column 'capacity': capacity must be >= 0"):
        Instance.from_lists([("A1", "AAA", "HUB", -1.0)], [("p", ["A1"], 10.0, 1.0, 1.0)])
    with pytest.raises(InstanceError, match="products, row 2, column 'mean'"):
        Instance.from_lists(legs, [("p", ["A1"], 10.0, 1.0, 1.0), ("q", ["A1"], 10.0, math.nan, 1.0)])
    with pytest.raises(InstanceError, match="products, row 1, column 'legs': unknown leg id 'B7'"):
        Instance.from_lists(legs, [("p", ["B7"], 10.0, 1.0, 1.0)])
    with pytest.raises(InstanceError, match="expected a pandas DataFrame"):
        Instance.from_frames({"leg": ["A1"]}, PRODUCTS)


@pytest.mark.solver
def test_solve_takes_a_path_and_dict_or_keyword_options(tmp_path, example):
    write_instance(example, tmp_path / "hand")
    by_path = decomp.solve(str(tmp_path / "hand"), model="dlp", method="highs", options={"tol": 1e-8})
    by_kw = decomp.solve(tmp_path / "hand", model="dlp", method="highs", tol=1e-8, time_limit=30)
    assert by_path.options["tol"] == by_kw.options["tol"] == 1e-8 and by_kw.options["time_limit"] == 30
    assert by_path.objective == pytest.approx(HAND_REVENUE, rel=1e-9)
    with pytest.raises(ConfigError, match="unknown option 'tolerance'; valid options: tol, time_limit"):
        decomp.solve(example, model="dlp", method="highs", options={"tolerance": 1e-6})
    with pytest.raises(ConfigError, match="unknown option 'foo'"):
        decomp.solve(example, model="dlp", method="highs", foo=1)
    with pytest.raises(ConfigError, match="Instance or the path"):
        decomp.solve(42, model="dlp", method="highs")
    with pytest.raises(InstanceError, match="no such instance folder"):
        decomp.solve(tmp_path / "missing", model="dlp", method="highs")


@pytest.mark.solver
def test_short_reprs_and_version():
    from importlib import metadata

    inst = decomp.read_instance("instances/p1k")
    assert repr(inst) == f"Instance('p1k': {inst.n_legs:,} legs, 1,000 products, {len(inst.leg_index):,} product-leg pairs)"
    res = decomp.solve(inst, model="dlp", method="highs")
    assert len(repr(res)) < 250 and "dlp by highs: optimal/optimal" in repr(res)
    assert decomp.__version__ == metadata.version("decomp")


# -- tables and decisions on the worked example -------------------------------

@pytest.mark.solver
def test_tables_of_the_worked_example(example, dlp):
    assert dlp.ok and dlp.objective == pytest.approx(HAND_REVENUE, rel=1e-9)
    legs = decomp.leg_table(example, dlp)
    assert list(legs.columns) == list(decomp.tables.LEG_COLUMNS)
    legs = legs.set_index("leg")
    assert legs.loc[["A1", "A2"], "allocated"].tolist() == pytest.approx([100.0, 80.0], abs=1e-7)
    assert legs.loc[["A1", "A2"], "load_factor"].tolist() == pytest.approx([1.0, 1.0], abs=1e-9)
    assert legs.loc["A4", "load_factor"] == pytest.approx(20 / 1000)
    assert math.isnan(legs.loc["A3", "load_factor"])                    # no capacity: no load factor
    # hand solution: pi_A1 + pi_A2 = 300, each within [120, 180]; pi_A4 = 0
    assert legs.loc["A1", "bid_price"] + legs.loc["A2", "bid_price"] == pytest.approx(300.0, rel=1e-9)
    assert legs.loc["A4", "bid_price"] == pytest.approx(0.0, abs=1e-9)
    assert legs["state"].to_dict() == {"A1": "binding", "A2": "binding", "A3": "closed", "A4": "slack"}

    products = decomp.product_table(example, dlp)
    assert list(products.columns) == list(decomp.tables.PRODUCT_COLUMNS)
    products = products.set_index("product")
    assert products["allocation"].to_dict() == pytest.approx(HAND_ALLOCATION, abs=1e-7)
    assert products.loc["p1", "displacement"] == pytest.approx(300.0, rel=1e-9)
    assert products.loc["p1", "margin"] == pytest.approx(0.0, abs=1e-7)
    assert products.loc["p1", "decision"] == "open"                    # a tie is accepted
    assert products.loc["p5", "displacement"] == pytest.approx(0.0, abs=1e-9)
    assert (products["margin"] == products["fare"] - products["displacement"]).all()
    assert products.loc["p1", "legs"] == "A1 A2"
    assert products.loc["p4", "decision"] == "closed"                  # its leg A3 has no seat


@pytest.mark.solver
def test_decide_and_displacement(dlp):
    assert dlp.displacement("A1 A2") == pytest.approx(300.0, rel=1e-9)
    assert dlp.displacement(["A1", "A2"]) == dlp.displacement("A1 A2")
    yes, no = dlp.decide("A1 A2", 300.0 + 1e-6), dlp.decide(["A1", "A2"], 299.0)
    assert yes.accept and yes.verdict == "accept" and not no.accept and no.margin == pytest.approx(-1.0, abs=1e-7)
    assert no.bid_prices == (dlp.bid_prices["A1"], dlp.bid_prices["A2"])
    with pytest.raises(InstanceError, match="unknown leg id 'ZZ'"):
        dlp.decide("A1 ZZ", 100)
    with pytest.raises(InstanceError, match="fare"):
        dlp.decide("A1", "cheap")


# -- one schema, read back ------------------------------------------------------------

@pytest.mark.solver
def test_result_json_round_trip(example, dlp, tmp_path):
    d = dlp.to_json_dict(include_allocation=True, context={"instance": "hand"})
    assert d["schema"] == "decomp.result" and d["schema_version"] == decomp.SCHEMA_VERSION
    path = tmp_path / "r.json"
    path.write_text(json.dumps(d))
    back = SolveResult.from_json(path)
    assert back.termination is dlp.termination and back.solution_status is dlp.solution_status and back.ok
    assert back.bid_prices == dlp.bid_prices and back.objective == dlp.objective
    assert np.array_equal(back.allocation, dlp.allocation) and back.certificate == dlp.certificate
    assert decomp.leg_table(example, back).equals(decomp.leg_table(example, dlp))
    assert back.to_json_dict(include_allocation=True, context={"instance": "hand"}) == d
    with pytest.raises(InstanceError, match="unknown result schema"):
        SolveResult.from_json({**d, "schema_version": 99})


@pytest.mark.solver
def test_older_layouts_are_read(dlp, tmp_path):
    from decomp.result import read_bid_prices

    new = dlp.to_json_dict()
    old_solve = {k: v for k, v in new.items() if k not in ("schema", "schema_version", "ok", "context",
                                                          "termination")}
    old_solve.update(status="optimal", instance="hand", versions={})
    (tmp_path / "old.json").write_text(json.dumps(old_solve))
    task = tmp_path / "tasks" / "k1"
    task.mkdir(parents=True)
    (task / "result.json").write_text(json.dumps({"fingerprint": "f", "task": {"key": "k1"}, "record": {},
                                                  "result": {**old_solve, "instance": None}}))
    case = tmp_path / "cases" / "c1"
    case.mkdir(parents=True)
    (case / "result.json").write_text(json.dumps({"case": "c1", "model": "dlp", "method": "highs",
                                                  "termination": "optimal", "solution_status": "optimal",
                                                  "bid_prices_file": "bid_prices.csv"}))
    (case / "bid_prices.csv").write_text("leg_id,bid_price\n" + "".join(
        f"{k},{v!r}\n" for k, v in dlp.bid_prices.items()))
    current = tmp_path / "tasks" / "k2"          # a run task as decomp run wrote it just before the schema
    current.mkdir()
    (current / "result.json").write_text(json.dumps({"fingerprint": "f", "task": {"key": "k2"}, "record": {},
                                                     "result": dlp.to_json_dict()}))
    schema_task = tmp_path / "tasks" / "k3"      # a run task as decomp run writes it now: the schema, context
    schema_task.mkdir()
    (schema_task / "result.json").write_text(json.dumps(dlp.to_json_dict(context={
        "fingerprint": "f", "task": {"key": "k3"}, "record": {"task_status": "ok"}})))
    table = tmp_path / "bp.parquet"
    decomp.tables.write_table(decomp.leg_table(decomp.Instance.from_frames(LEGS, PRODUCTS), dlp), table)
    for source in (tmp_path / "old.json", task, task / "result.json", case, current, schema_task, table):
        assert read_bid_prices(source) == dlp.bid_prices, source
    # an old baseline case is data: its bid_prices_file names a file beside it, never a path elsewhere
    (case / "result.json").write_text(json.dumps({"case": "c1", "model": "dlp", "method": "highs",
                                                  "termination": "optimal", "solution_status": "optimal",
                                                  "bid_prices_file": "../../bp.parquet"}))
    with pytest.raises(InstanceError, match="bid_prices_file"):
        read_bid_prices(case)
    old = SolveResult.from_json(tmp_path / "old.json")
    assert old.termination.value == "optimal" and old.bid_prices == dlp.bid_prices


def test_the_readme_from_python_example_runs(tmp_path, monkeypatch):
    import re

    monkeypatch.chdir(tmp_path)                  # the example saves result.json where it runs
    readme = (ROOT / "README.md").read_text()
    section = readme.split("## From Python", 1)[1]
    code = re.search(r"```python\n(.*?)```", section, re.S).group(1)
    scope = {}
    exec(compile(code, "README.md (From Python)", "exec"), scope)
    result, network = scope["result"], scope["network"]
    assert result.ok and network.n_products == 3
    decision = result.decide("NV101 NV201", fare=300)
    assert decision.displacement == pytest.approx(result.displacement(["NV101"]) + result.displacement("NV201"))
    assert scope["again"].bid_prices == result.bid_prices and scope["warm"].ok
    assert scope["warm"].options.get("start") == "warm"


# Issue 13's input checks live in io.instance_from_tables, so a DataFrame meets each of them as a
# file does: the same refusal, naming the table, the 1-based row and the column.
@pytest.mark.parametrize("table,columns,row,column,words", [
    ("legs", {"destination": ["AAA", "BBB", "CCC", "DDD"]}, 1, None, "origin"),
    ("products", {"legs": ["A1 A2", "A1 A1", "A2", "A3", "A4"]}, 2, "legs", "twice"),
    ("legs", {"leg": ["A1", "A2", "A3", "A4\x00"]}, 4, "leg", "control"),
    ("legs", {"capacity": [100.0, 80.0, 0.0, 1e308]}, 4, "capacity", "limit"),
    ("products", {"mean": [60.0, 70.0, 50.0, 10.0, 2e6]}, 5, "mean", "limit"),
    ("products", {"distribution": ["normal"] * 4 + ["negbin"], "std": [20.0, 25.0, 15.0, 3.0, 4.0]}, 5, None,
     "mean"),
])
def test_frames_meet_the_checks_files_meet(table, columns, row, column, words):
    legs = LEGS.assign(**columns) if table == "legs" else LEGS
    prods = PRODUCTS.assign(**columns) if table == "products" else PRODUCTS
    with pytest.raises(InstanceError, match=words) as exc:
        Instance.from_frames(legs, prods)
    assert exc.value.file == table and exc.value.row == row
    if column is not None:
        assert exc.value.column == column


def test_frames_meta_distribution_is_checked_as_meta_json_is():
    with pytest.raises(InstanceError, match="unknown demand distribution"):
        Instance.from_frames(LEGS, PRODUCTS, meta={"distribution": "lognormal"})
    assert Instance.from_frames(LEGS, PRODUCTS, meta={"distribution": "gamma"}).meta["distribution"] == "gamma"
