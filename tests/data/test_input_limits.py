"""Inputs beyond the documented limits (decomp.validation) are refused naming the file, row and
column, from files, DataFrames, lists and ``with_forecast`` alike.

External fact used: CPython's limit of 4,300 digits on integer-string conversion
(``sys.get_int_max_str_digits``, Python 3.11 documentation).
"""

from __future__ import annotations

import json
import math

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from decomp.errors import InstanceError
from decomp.instance import Instance
from decomp.io import read_instance

from support.cli import run_cli
from support.tiny import HUGE_INT, tiny_instance, write_light


def test_with_forecast_aligns_a_series_by_product_id():
    pd = pytest.importorskip("pandas")
    inst = tiny_instance()
    mean = pd.Series({"P3": 7.0, "P1": 11.0, "P2": 30.0})       # not in the instance's order
    out = inst.with_forecast(mean=mean)
    assert out.mean.tolist() == [11.0, 30.0, 7.0]
    assert inst.with_forecast(std={"P2": 1.0, "P1": 2.0, "P3": 3.0}).std.tolist() == [2.0, 1.0, 3.0]
    with pytest.raises(InstanceError, match="no value for product 'P3'") as e:
        inst.with_forecast(mean=pd.Series({"P1": 1.0, "P2": 2.0}))
    assert e.value.row == 3 and e.value.column == "mean"
    with pytest.raises(InstanceError, match="unknown product id 'P9'"):
        inst.with_forecast(mean={"P1": 1.0, "P2": 2.0, "P3": 3.0, "P9": 4.0})


@pytest.mark.parametrize("bad,words", [(-5.0, "must be >= 0"), (math.nan, "NaN"), (2e6, "limit"),
                                       ("12", "not a number")])
def test_with_forecast_checks_values_as_files_are(bad, words):
    with pytest.raises(InstanceError, match=words) as e:
        tiny_instance().with_forecast(mean=[10.0, bad, 8.0])
    assert e.value.row == 2 and e.value.column == "mean"


def test_parquet_text_in_a_number_column_is_refused(tmp_path):
    d = tmp_path / "pq"
    d.mkdir()
    pq.write_table(pa.table({"leg": ["L1"], "origin": ["KA1"], "destination": ["HU2"], "capacity": [10.0]}),
                   d / "legs.parquet")
    pq.write_table(pa.table({"product": ["P1"], "legs": ["L1"], "fare": ["100"], "mean": [1.0], "std": [0.5]}),
                   d / "products.parquet")
    with pytest.raises(InstanceError, match="holds text, not numbers") as e:
        read_instance(d)
    assert e.value.row == 1 and e.value.column == "fare"


def test_json_integers_of_5000_digits_are_refused_naming_the_file(tmp_path, capsys):
    d = write_light(tmp_path)
    (d / "meta.json").write_text('{"seed": ' + HUGE_INT + "}")
    rc, _, err = run_cli(["validate", d], capsys)
    assert rc == 2 and "meta.json" in err and "Traceback" not in err
    res = tmp_path / "r.json"
    res.write_text('{"model": "dlp", "method": "highs", "termination": "optimal", "solution_status": "optimal", '
                   '"bid_prices": {"L1": ' + HUGE_INT + "}}")
    bench = tmp_path / "benchmark.json"
    bench.write_text('{"machine_info": {"x": ' + HUGE_INT + '}, "benchmarks": []}')
    for argv, name in ((["decide", res, "--legs", "L1", "--fare", "5"], "r.json"),
                       (["solve", write_light(tmp_path, "u"), "--model", "pnlp", "--method", "lagrangian", "--warm-start",
                         res, "--out", tmp_path / "o.json"], "r.json"),
                       (["bench", "compare", bench, bench], "benchmark.json"),
                       (["bench", "report", bench, "--out", tmp_path / "rep"], "benchmark.json"),
                       (["bench", "history", "--add", bench, "--store", tmp_path / "h.sqlite"], "benchmark.json")):
        rc, _, err = run_cli(argv, capsys)
        assert rc == 2 and name in err and "digits" in err and "Traceback" not in err


@pytest.mark.parametrize("fare", [pa.array([2**62], pa.int64()), pa.array([2**64 - 1], pa.uint64())])
def test_huge_parquet_integers_are_refused_with_the_limit(tmp_path, fare, capsys):
    d = tmp_path / "pq"
    d.mkdir()
    pq.write_table(pa.table({"leg": ["L1"], "origin": ["KA1"], "destination": ["HU2"], "capacity": [10.0]}),
                   d / "legs.parquet")
    pq.write_table(pa.table({"product": ["P1"], "legs": ["L1"], "fare": fare, "mean": [1.0], "std": [0.5]}),
                   d / "products.parquet")
    rc, _, err = run_cli(["validate", d], capsys)
    assert rc == 2 and "row 1, column 'fare'" in err and "limit" in err and "Traceback" not in err


def test_a_subnormal_std_is_refused_before_the_solve(tmp_path, capsys):
    d = write_light(tmp_path, products="product,legs,fare,mean,std\nP1,L1,100,10,1e-320\nP2,L1 L2,150,5,2\n")
    rc, _, err = run_cli(["solve", d, "--model", "pnlp", "--method", "lagrangian", "--out", tmp_path / "r.json"], capsys)
    assert rc == 2 and "row 1, column 'std'" in err and "subnormal" in err


@pytest.mark.parametrize("kind", ["loop", "dangling"])
def test_a_meta_json_link_to_nowhere_is_refused(tmp_path, kind, capsys):
    d = write_light(tmp_path)
    (d / "meta.json").symlink_to(d / "meta.json" if kind == "loop" else d / "nowhere.json")
    rc, _, err = run_cli(["validate", d], capsys)
    assert rc == 2 and "meta.json" in err


def test_terminal_escapes_in_meta_are_refused(tmp_path, capsys):
    d = write_light(tmp_path)
    (d / "meta.json").write_text(json.dumps({"name": "net\x1b[2J\x1b[31mRED"}))
    rc, out, err = run_cli(["inspect", d], capsys)
    assert rc == 2 and "\x1b" not in out + err and "meta.json" in err and "column 'name'" in err


@pytest.mark.parametrize("char", ["\u0085", "\u2028", "\u202e"])
@pytest.mark.parametrize("where", ["leg", "product"])
def test_ids_with_line_separators_or_a_right_to_left_override_are_refused(tmp_path, char, where, capsys):
    legs = f"leg,origin,destination,capacity\nL1,KA1,HU2,100\nL{char}2,HU2,BO3,80\n" if where == "leg" else None
    prods = (f"product,legs,fare,mean,std\nP1,L1,100,10,3\nP{char}2,L1,150,5,2\n" if where == "product" else
             "product,legs,fare,mean,std\nP1,L1,100,10,3\n")
    rc, out, err = run_cli(["validate", write_light(tmp_path, legs=legs, products=prods)], capsys)
    assert rc == 2 and f"row 2, column '{where}'" in err and char not in err


def _long_chain(n):
    legs = [(f"L{k}", f"S{k}", f"S{k + 1}", 10.0) for k in range(n)]
    return legs, [("P1", ["L0"], 100.0, 1.0, 0.5), ("P2", [l[0] for l in legs], 500.0, 1.0, 0.5)]


def test_itineraries_beyond_the_documented_limit_are_refused_everywhere(tmp_path):
    from decomp.validation import MAX_LEGS_PER_ITINERARY

    assert MAX_LEGS_PER_ITINERARY == 16
    Instance.from_lists(*_long_chain(16))                                  # at the limit: accepted
    legs, prods = _long_chain(17)
    for build in (lambda: Instance.from_lists(legs, prods),
                  lambda: _from_frames(legs, prods),
                  lambda: read_instance(_folder(tmp_path, legs, prods)),
                  lambda: Instance(leg_ids=[l[0] for l in legs], leg_origin=[l[1] for l in legs],
                                   leg_destination=[l[2] for l in legs], capacity=[10.0] * 17,
                                   product_ids=["P1", "P2"], leg_ptr=[0, 1, 18],
                                   leg_index=[0] + list(range(17)), fare=[100.0, 500.0], mean=[1.0, 1.0],
                                   std=[0.5, 0.5])):
        with pytest.raises(InstanceError, match="limit is 16 legs per itinerary") as e:
            build()
        assert e.value.row == 2 and e.value.column == "legs" and "products" in str(e.value.file)


def _from_frames(legs, prods):
    pd = pytest.importorskip("pandas")
    return Instance.from_frames(pd.DataFrame(legs, columns=["leg", "origin", "destination", "capacity"]),
                                pd.DataFrame([(p[0], " ".join(p[1]), *p[2:]) for p in prods],
                                             columns=["product", "legs", "fare", "mean", "std"]))


def _folder(tmp_path, legs, prods):
    d = tmp_path / "long"
    d.mkdir()
    (d / "legs.csv").write_text("leg,origin,destination,capacity\n" + "".join(f"{a},{b},{c},{x}\n" for a, b, c, x in legs))
    (d / "products.csv").write_text("product,legs,fare,mean,std\n" +
                                    "".join(f"{p},{' '.join(l)},{f},{m},{s}\n" for p, l, f, m, s in prods))
    return d


@pytest.mark.parametrize("sep,word", [(";", "';' (semicolons)"), ("\t", "tabs")])
def test_a_file_with_another_separator_is_named_for_it(tmp_path, sep, word, capsys):
    legs = "\n".join(sep.join(r) for r in (["leg", "origin", "destination", "capacity"], ["L1", "KA1", "HU2", "100"]))
    rc, _, err = run_cli(["validate", write_light(tmp_path, legs=legs + "\n")], capsys)
    assert rc == 2 and word in err and "legs.csv" in err


def test_a_thousands_separator_gets_a_hint(tmp_path, capsys):
    d = write_light(tmp_path, products='product,legs,fare,mean,std\nP1,L1,"1,200",10,3\nP2,L1 L2,150,5,2\n')
    rc, _, err = run_cli(["validate", d], capsys)
    assert rc == 2 and "row 1, column 'fare'" in err and "thousands separator" in err


def test_python_api_errors_keep_the_row():
    with pytest.raises(InstanceError) as e:
        Instance.from_lists([("L1", "KA1", "HU2", 100.0)], [("P1", ["L1"], 100.0, 1.0, 0.5),
                                                            ("P2", ["L1"], "1,200", 1.0, 0.5)])
    assert e.value.row == 2 and e.value.column == "fare" and e.value.file == "products"
    pd = pytest.importorskip("pandas")
    legs = pd.DataFrame({"leg": ["L1"], "origin": ["KA1"], "destination": ["HU2"], "capacity": [100.0]})
    prods = pd.DataFrame({"product": ["P1", "P2"], "legs": ["L1", "L1"], "fare": [100.0, "1,200"],
                          "mean": [1.0, 1.0], "std": [0.5, 0.5]})
    with pytest.raises(InstanceError) as e:
        Instance.from_frames(legs, prods)
    assert e.value.row == 2 and e.value.column == "fare"
