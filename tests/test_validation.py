"""Validation of instance folders: every bad-input case of the issue gets an
InstanceError naming the file, the 1-based data row, the column and the value.

The expected rows and columns below are read off the hand-written tables in
this file (row 1 is the first line after the header).
"""

from __future__ import annotations

import dataclasses
import pathlib
import warnings

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from decomp.errors import InstanceError
from decomp.instance import Instance
from decomp.io import UnusedLegWarning, check_instance, read_instance, write_instance

LEGS = [
    "leg,origin,destination,capacity",
    "L1,KA1,HU2,100",
    "L2,HU2,BO3,80",
    "L3,BO3,HU2,50",
]
PRODUCTS = [
    "product,legs,fare,mean,std",
    "P1,L1,100,10,3",
    "P2,L1 L2,150,5,2",
    "P3,L2,90,8,2.5",
    "P4,L3,60,4,1",
]


def make(tmp_path: pathlib.Path, legs=LEGS, products=PRODUCTS, name="inst") -> pathlib.Path:
    d = tmp_path / name
    d.mkdir()
    if legs is not None:
        (d / "legs.csv").write_text("\n".join(legs) + "\n")
    if products is not None:
        (d / "products.csv").write_text("\n".join(products) + "\n")
    return d


def with_field(lines, row, col, value):
    """Copy of ``lines`` with data row ``row`` (1-based) field ``col`` set to ``value``."""
    out = list(lines)
    header = out[0].split(",")
    fields = out[row].split(",")
    fields[header.index(col)] = value
    out[row] = ",".join(fields)
    return out


def expect(path, file, row=None, column=None, match=None):
    with pytest.raises(InstanceError) as info:
        read_instance(path)
    err = info.value
    assert err.file is not None and pathlib.Path(err.file).name == file, str(err)
    assert err.row == row, str(err)
    assert err.column == column, str(err)
    if match:
        assert match in err.reason, str(err)
    return err


def test_the_base_instance_is_valid(tmp_path):
    inst = read_instance(make(tmp_path))
    assert inst.n_legs == 3 and inst.n_products == 4
    assert inst.product_legs(1) == ["L1", "L2"]


# -- files and columns ----------------------------------------------------------

def test_missing_legs_file(tmp_path):
    expect(make(tmp_path, legs=None), "legs.csv", match="missing file")


def test_missing_products_file(tmp_path):
    expect(make(tmp_path, products=None), "products.csv", match="missing file")


def test_missing_folder(tmp_path):
    with pytest.raises(InstanceError, match="no such instance folder"):
        read_instance(tmp_path / "nowhere")


@pytest.mark.parametrize("col", ["leg", "origin", "destination", "capacity"])
def test_missing_leg_column(tmp_path, col):
    k = LEGS[0].split(",").index(col)
    legs = [",".join(f for i, f in enumerate(line.split(",")) if i != k) for line in LEGS]
    expect(make(tmp_path, legs=legs), "legs.csv", column=col, match="missing column")


@pytest.mark.parametrize("col", ["product", "legs", "fare", "mean", "std"])
def test_missing_product_column(tmp_path, col):
    k = PRODUCTS[0].split(",").index(col)
    prods = [",".join(f for i, f in enumerate(line.split(",")) if i != k) for line in PRODUCTS]
    expect(make(tmp_path, products=prods), "products.csv", column=col, match="missing column")


def test_empty_legs_table(tmp_path):
    expect(make(tmp_path, legs=LEGS[:1]), "legs.csv", match="no rows")


def test_empty_products_table(tmp_path):
    expect(make(tmp_path, products=PRODUCTS[:1]), "products.csv", match="no rows")


def test_empty_file(tmp_path):
    d = make(tmp_path)
    (d / "products.csv").write_text("")
    expect(d, "products.csv", match="empty")


def test_row_with_wrong_field_count(tmp_path):
    prods = list(PRODUCTS)
    prods[3] += ",surplus"
    expect(make(tmp_path, products=prods), "products.csv", row=3, match="expected 5 fields, got 6")


def test_duplicate_header_column(tmp_path):
    legs = [line + "," + line.split(",")[3] for line in LEGS]
    expect(make(tmp_path, legs=legs), "legs.csv", column="capacity", match="twice")


def test_bad_meta_json(tmp_path):
    d = make(tmp_path)
    (d / "meta.json").write_text("{not json")
    expect(d, "meta.json", match="JSON")


# -- numbers --------------------------------------------------------------------

@pytest.mark.parametrize("file,col,row", [("legs.csv", "capacity", 2), ("products.csv", "fare", 3),
                                          ("products.csv", "mean", 1), ("products.csv", "std", 4)])
@pytest.mark.parametrize("value,why", [("abc", "not a number"), ("12x", "not a number"),
                                       ("", "missing value"), ("nan", "NaN"), ("inf", "infinite"),
                                       ("-inf", "infinite")])
def test_bad_numbers(tmp_path, file, col, row, value, why):
    legs, prods = LEGS, PRODUCTS
    if file == "legs.csv":
        legs = with_field(LEGS, row, col, value)
    else:
        prods = with_field(PRODUCTS, row, col, value)
    err = expect(make(tmp_path, legs=legs, products=prods), file, row=row, column=col, match=why)
    if why == "not a number":
        assert err.value == value


@pytest.mark.parametrize("file,col,value,why", [
    ("legs.csv", "capacity", "-1", "capacity must be >= 0"),
    ("products.csv", "mean", "-0.5", "mean must be >= 0"),
    ("products.csv", "std", "-2", "std must be >= 0"),
    ("products.csv", "fare", "0", "fare must be > 0"),
    ("products.csv", "fare", "-10", "fare must be > 0"),
])
def test_out_of_range(tmp_path, file, col, value, why):
    legs, prods = LEGS, PRODUCTS
    if file == "legs.csv":
        legs = with_field(LEGS, 3, col, value)
    else:
        prods = with_field(PRODUCTS, 3, col, value)
    err = expect(make(tmp_path, legs=legs, products=prods), file, row=3, column=col, match=why)
    assert err.value == float(value)


def test_zero_capacity_mean_std_are_allowed(tmp_path):
    legs = with_field(LEGS, 1, "capacity", "0")
    prods = with_field(with_field(PRODUCTS, 2, "mean", "0"), 2, "std", "0")
    inst = read_instance(make(tmp_path, legs=legs, products=prods))
    assert inst.capacity[0] == 0 and inst.mean[1] == 0 and inst.std[1] == 0


# -- ids and legs ---------------------------------------------------------------

def test_duplicate_leg_id(tmp_path):
    legs = LEGS + ["L2,HU2,BO3,70"]
    err = expect(make(tmp_path, legs=legs), "legs.csv", row=4, column="leg", match="duplicate leg id")
    assert "row 2" in err.reason and err.value == "L2"


def test_duplicate_product_id(tmp_path):
    prods = PRODUCTS + ["P3,L3,60,4,1"]
    err = expect(make(tmp_path, products=prods), "products.csv", row=5, column="product",
                 match="duplicate product id")
    assert "row 3" in err.reason


def test_empty_leg_id(tmp_path):
    expect(make(tmp_path, legs=with_field(LEGS, 2, "leg", "")), "legs.csv", row=2, column="leg",
           match="empty leg id")


def test_empty_station(tmp_path):
    expect(make(tmp_path, legs=with_field(LEGS, 3, "origin", "")), "legs.csv", row=3, column="origin",
           match="empty station")


def test_unknown_leg_id(tmp_path):
    err = expect(make(tmp_path, products=with_field(PRODUCTS, 2, "legs", "L1 L9")), "products.csv",
                 row=2, column="legs", match="unknown leg id 'L9'")
    assert err.value == "L1 L9"


def test_empty_legs_field(tmp_path):
    expect(make(tmp_path, products=with_field(PRODUCTS, 4, "legs", "")), "products.csv", row=4,
           column="legs", match="empty legs field")


@pytest.mark.parametrize("legs", ["L1  L2", " L1 L2", "L1 L2 "])
def test_legs_not_single_space_separated(tmp_path, legs):
    expect(make(tmp_path, products=with_field(PRODUCTS, 2, "legs", legs)), "products.csv", row=2,
           column="legs", match="single spaces")


def test_legs_that_do_not_connect(tmp_path):
    # L1 arrives at HU2; L3 leaves from BO3
    err = expect(make(tmp_path, products=with_field(PRODUCTS, 2, "legs", "L1 L3")), "products.csv",
                 row=2, column="legs", match="do not connect")
    assert "HU2" in err.reason and "BO3" in err.reason


def test_connections_over_three_legs(tmp_path):
    # L1 KA1->HU2, L2 HU2->BO3, L3 BO3->HU2: a valid three-leg path
    inst = read_instance(make(tmp_path, products=with_field(PRODUCTS, 2, "legs", "L1 L2 L3")))
    assert inst.product_legs(1) == ["L1", "L2", "L3"]


def test_unknown_distribution(tmp_path):
    prods = [PRODUCTS[0] + ",distribution"] + [p + ",normal" for p in PRODUCTS[1:]]
    prods[2] = prods[2].replace(",normal", ",lognormal")
    expect(make(tmp_path, products=prods), "products.csv", row=2, column="distribution",
           match="unknown demand distribution")


def test_known_distributions_are_kept(tmp_path):
    prods = [PRODUCTS[0] + ",distribution"] + [p + "," + d for p, d in
                                               zip(PRODUCTS[1:], ["normal", "gamma", "poisson", "negbin"])]
    prods[4] = prods[4].replace(",4,1,", ",4,3,")       # a negative binomial needs std^2 > mean
    inst = read_instance(make(tmp_path, products=prods))
    assert list(inst.distribution) == ["normal", "gamma", "poisson", "negbin"]


def test_unused_leg_is_a_warning(tmp_path):
    legs = LEGS + ["L4,HU2,KA1,40"]
    with pytest.warns(UnusedLegWarning, match="row 4 'L4'"):
        inst = read_instance(make(tmp_path, legs=legs))
    assert inst.n_legs == 4


def test_blank_line_is_reported_at_its_row(tmp_path):
    prods = PRODUCTS[:3] + [""] + PRODUCTS[3:]
    expect(make(tmp_path, products=prods), "products.csv", row=3, column="product", match="empty product id")


def test_row_numbers_in_a_large_file(tmp_path):
    # 50,000 rows, one bad fare deep in the file: the row must be exact despite threaded parsing
    n = 50_000
    rows = [f"P{j},L1,{100 + j % 7},1,0.5" for j in range(n)]
    rows[41_233] = "P41233,L1,oops,1,0.5"
    prods = [PRODUCTS[0]] + rows
    legs = LEGS[:2]
    expect(make(tmp_path, legs=legs, products=prods), "products.csv", row=41_234, column="fare")
    rows[41_233] = "P41233,L1,100,1,0.5,extra"
    (tmp_path / "inst" / "products.csv").write_text("\n".join([PRODUCTS[0]] + rows) + "\n")
    expect(tmp_path / "inst", "products.csv", row=41_234, match="expected 5 fields")


# -- Parquet --------------------------------------------------------------------

def _parquet(tmp_path, legs: dict, products: dict):
    d = tmp_path / "pq"
    d.parent.mkdir(parents=True, exist_ok=True)
    d.mkdir()
    pq.write_table(pa.table(legs), d / "legs.parquet")
    pq.write_table(pa.table(products), d / "products.parquet")
    return d


LEGS_D = {"leg": ["L1", "L2"], "origin": ["KA1", "HU2"], "destination": ["HU2", "BO3"],
          "capacity": [100.0, 80.0]}
PRODS_D = {"product": ["P1", "P2"], "legs": ["L1", "L1 L2"], "fare": [100.0, 150.0],
           "mean": [10.0, 5.0], "std": [3.0, 2.0]}


def test_parquet_nan_and_negative(tmp_path):
    expect(_parquet(tmp_path, LEGS_D, dict(PRODS_D, mean=[1.0, float("nan")])), "products.parquet",
           row=2, column="mean", match="NaN")


def test_parquet_text_in_a_number_column(tmp_path):
    # a Parquet file stores types: text in a number column is refused, not parsed (issue 24, item 5),
    # even where every text reads as a number
    for capacity in (["100", "many"], ["100", "80"]):
        expect(_parquet(tmp_path / capacity[1], dict(LEGS_D, capacity=capacity), PRODS_D), "legs.parquet",
               row=1, column="capacity", match="holds text, not numbers")


def test_parquet_null_value(tmp_path):
    expect(_parquet(tmp_path, LEGS_D, dict(PRODS_D, fare=pa.array([None, 1.0], pa.float64()))),
           "products.parquet", row=1, column="fare", match="missing value")


def test_both_formats_present_is_an_error(tmp_path):
    d = _parquet(tmp_path, LEGS_D, PRODS_D)
    (d / "legs.csv").write_text("\n".join(LEGS) + "\n")
    with pytest.raises(InstanceError, match="keep one"):
        read_instance(d)


# -- writing never writes an invalid instance -----------------------------------

def test_invalid_instance_is_not_written(tmp_path):
    good = read_instance(make(tmp_path))
    out = write_instance(good, tmp_path / "out")
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    # with_forecast refuses a negative mean itself; dataclasses.replace makes one that skips the checks
    with pytest.raises(InstanceError, match="mean must be >= 0"):
        good.with_forecast(mean=np.array([1.0, -1.0, 1.0, 1.0]))
    bad = dataclasses.replace(good, mean=np.array([1.0, -1.0, 1.0, 1.0]))
    with pytest.raises(InstanceError) as info:
        write_instance(bad, out)
    assert info.value.row == 2 and info.value.column == "mean"
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["inst", "out"]   # no temporary left


def test_check_instance_connections():
    legs, products = [("A", "X1", "Y1", 10), ("B", "Z1", "X1", 10)], [("p", ["A", "B"], 10.0, 1.0, 1.0)]
    # from_lists runs the same checks and names the list
    with pytest.raises(InstanceError, match="products, row 1, column 'legs': legs do not connect"):
        Instance.from_lists(legs, products)
    inst = Instance(leg_ids=["A", "B"], leg_origin=["X1", "Z1"], leg_destination=["Y1", "X1"], capacity=[10, 10],
                    product_ids=["p"], leg_ptr=[0, 2], leg_index=[0, 1], fare=[10.0], mean=[1.0], std=[1.0])
    with pytest.raises(InstanceError, match="do not connect"):
        check_instance(inst)


# -- property tests: random corruption always gives InstanceError -------------------

# (column, table, values that make any row invalid)
CORRUPTIONS = [
    ("capacity", "legs", ["x", "-3", "nan", "", "1e999", "--1", "1,5"]),
    ("fare", "products", ["0", "-1", "inf", "abc", "", "0.0"]),
    ("mean", "products", ["-0.001", "NaN", "?", ""]),
    ("std", "products", ["-1e-9", "-inf", "s", ""]),
    ("legs", "products", ["", "ZZZ", "L1  L2", "L3 L1", " L1", "L2 L1"]),   # L2 ends at BO3, L1 starts at KA1
    ("leg", "legs", ["", "L1", "L3"]),              # empty, or the id of another row
    ("product", "products", ["", "P1", "P4"]),
]


def _base_rows():
    legs = LEGS + [f"M{k},HU2,S{k}X,{30 + k}" for k in range(6)]
    prods = PRODUCTS + [f"Q{k},M{k},{50 + k},{k},1" for k in range(6)] + ["Q9,L1 M2,120,2,1"]
    return legs, prods


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_random_corruption_is_always_an_instance_error(tmp_path_factory, data):
    legs, prods = _base_rows()
    col, table, values = data.draw(st.sampled_from(CORRUPTIONS))
    lines = legs if table == "legs" else prods
    row = data.draw(st.integers(1, len(lines) - 1))
    old = lines[row].split(",")[lines[0].split(",").index(col)]
    # an id equal to the row's own id is no corruption: use another row's id instead
    value = data.draw(st.sampled_from([v for v in values if v != old]))
    corrupted = with_field(lines, row, col, value)
    d = make(tmp_path_factory.mktemp("c"), legs=corrupted if table == "legs" else legs,
             products=corrupted if table == "products" else prods)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnusedLegWarning)
        with pytest.raises(InstanceError) as info:
            read_instance(d)
    assert pathlib.Path(info.value.file).name == f"{table}.csv"


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(pos=st.floats(0, 1, exclude_max=True), junk=st.binary(min_size=1, max_size=12),
       which=st.sampled_from(["legs.csv", "products.csv"]), mode=st.sampled_from(["insert", "overwrite", "truncate"]))
def test_random_bytes_never_escape_as_a_library_traceback(tmp_path_factory, pos, junk, which, mode):
    # Any byte damage either still reads as a valid instance or gives InstanceError,
    # never an exception from inside numpy or pyarrow.
    legs, prods = _base_rows()
    d = make(tmp_path_factory.mktemp("b"), legs=legs, products=prods)
    f = d / which
    raw = f.read_bytes()
    k = int(pos * len(raw))
    raw = {"insert": raw[:k] + junk + raw[k:], "overwrite": raw[:k] + junk + raw[k + len(junk):],
           "truncate": raw[:k]}[mode]
    f.write_bytes(raw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnusedLegWarning)
        try:
            read_instance(d)
        except InstanceError:
            pass


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(pos=st.floats(0, 1, exclude_max=True), junk=st.binary(min_size=1, max_size=16),
       mode=st.sampled_from(["overwrite", "truncate"]))
def test_damaged_parquet_never_escapes_as_a_library_traceback(tmp_path_factory, pos, junk, mode):
    d = tmp_path_factory.mktemp("pqb")
    pq.write_table(pa.table(LEGS_D), d / "legs.parquet")
    pq.write_table(pa.table(PRODS_D), d / "products.parquet")
    f = d / "products.parquet"
    raw = f.read_bytes()
    k = int(pos * len(raw))
    f.write_bytes(raw[:k] + junk + raw[k + len(junk):] if mode == "overwrite" else raw[:k])
    try:
        read_instance(d)
    except InstanceError:
        pass


@pytest.mark.parametrize("damaged", [b"f\x80re", b"P\x80"])
def test_parquet_with_invalid_utf8_is_an_instance_error(tmp_path, damaged):
    # Found by the random-damage test above: a column name (b"fare") or a string value
    # (b"P1") in the file that is not UTF-8 made pyarrow raise UnicodeDecodeError.
    pq.write_table(pa.table(LEGS_D), tmp_path / "legs.parquet")
    pq.write_table(pa.table(PRODS_D), tmp_path / "products.parquet", compression="none")
    f = tmp_path / "products.parquet"
    raw = f.read_bytes()
    target = b"fare" if damaged.startswith(b"f") else b"P1"
    assert target in raw
    f.write_bytes(raw.replace(target, damaged[:len(target)].ljust(len(target), b"1")))
    with pytest.raises(InstanceError, match="products.parquet"):
        read_instance(tmp_path)
