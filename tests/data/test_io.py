"""Reading and writing instance folders: exact round trips (CSV and Parquet),
extra columns, meta.json, and atomic replacement."""

from __future__ import annotations

import json

import numpy as np
import pytest

from decomp import io
from decomp.errors import OutputPathError
from decomp.generator import generate
from decomp.instance import Instance

CORE = ("leg_ids", "leg_origin", "leg_destination", "capacity", "product_ids",
        "leg_ptr", "leg_index", "fare", "mean", "std")


def assert_same(a: Instance, b: Instance):
    for name in CORE:
        x, y = getattr(a, name), getattr(b, name)
        assert x.shape == y.shape and np.array_equal(x, y), name
    assert (a.distribution is None) == (b.distribution is None)
    if a.distribution is not None:
        assert list(a.distribution) == list(b.distribution)
    for ex_a, ex_b in ((a.leg_extra, b.leg_extra), (a.product_extra, b.product_extra)):
        assert list(ex_a) == list(ex_b)
        for k in ex_a:
            assert np.array_equal(np.asarray(ex_a[k]), np.asarray(ex_b[k])), k


def awkward_instance() -> Instance:
    # floats that need all 17 significant digits, text that looks like numbers,
    # text needing CSV quotes, and a distribution column
    legs = [("A1", "KA1", "HU2", 100.0), ("A2", "HU2", "BO3", 0.1 + 0.2), ("A3", "BO3", "HU2", 1e-7)]
    prods = [("p,1", ["A1"], 1 / 3, 0.0, 0.0), ("p2", ["A1", "A2"], 123456789.123, 2.5, 1e-300),
             ('p"3', ["A2", "A3"], 7.0, 1e-20, 3.0)]     # (demand above 1e6 is refused: decomp.io.MAX_DEMAND)
    return Instance.from_lists(
        legs, prods, distribution=["normal", "gamma", "poisson"],
        leg_extra={"code": np.array(["007", "08", "9"], dtype=object), "bank": np.array([1, 2, 3])},
        product_extra={"note": np.array(["has, comma", ' padded ', 'quote "q"'], dtype=object),
                       "weight": np.array([0.5, 1.0, 2.25])},
        meta={"name": "awkward", "seed": 4})


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_round_trip_awkward_values(tmp_path, fmt):
    inst = awkward_instance()
    back = io.read_instance(io.write_instance(inst, tmp_path / "x", format=fmt))
    assert_same(inst, back)
    assert back.leg_extra["code"].dtype == object          # "007" stays text
    assert back.leg_extra["bank"].dtype.kind == "i"
    assert back.product_extra["weight"].dtype == np.float64
    assert dict(back.meta) == dict(inst.meta)


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_round_trip_generated(tmp_path, fmt):
    inst = generate(3000, seed=5)
    back = io.read_instance(io.write_instance(inst, tmp_path / "g", format=fmt))
    assert_same(inst, back)
    assert dict(back.meta) == json.loads(json.dumps(dict(inst.meta)))


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_rewrite_is_byte_identical(tmp_path, fmt):
    first = io.write_instance(awkward_instance(), tmp_path / "a", format=fmt)
    second = io.write_instance(io.read_instance(first), tmp_path / "b", format=fmt)
    for f in sorted(p.name for p in first.iterdir()):
        assert (first / f).read_bytes() == (second / f).read_bytes(), f


def test_csv_layout(tmp_path):
    d = io.write_instance(awkward_instance(), tmp_path / "a")
    legs = (d / "legs.csv").read_text().splitlines()
    prods = (d / "products.csv").read_text().splitlines()
    assert legs[0] == "leg,origin,destination,capacity,code,bank"
    assert legs[2] == "A2,HU2,BO3,0.30000000000000004,08,2"
    assert prods[0] == "product,legs,fare,mean,std,distribution,note,weight"
    assert prods[1] == '"p,1",A1,0.3333333333333333,0,0,normal,"has, comma",0.5'
    assert prods[3].startswith('"p""3",A2 A3,7,1e-20,3,poisson,"quote ""q""",')


def test_reads_user_csv_with_loose_number_forms(tmp_path):
    d = tmp_path / "u"
    d.mkdir()
    (d / "legs.csv").write_text("leg,origin,destination,capacity\nL1,AA1,BB2, 120.0\nL2,BB2,CC3,8e1\n")
    (d / "products.csv").write_text("product,legs,fare,mean,std\nP1,L1 L2,1.5E2,3,.5\n")
    inst = io.read_instance(d)
    assert inst.capacity.tolist() == [120.0, 80.0]
    assert inst.fare[0] == 150.0 and inst.std[0] == 0.5
    assert inst.meta["name"] == "u"


def test_replaces_an_existing_instance_atomically(tmp_path, monkeypatch):
    out = io.write_instance(generate(50, seed=1), tmp_path / "inst")
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    # fail halfway through writing the replacement: the old folder must be untouched
    real = io.csv_bytes
    calls = []

    def failing(table):
        calls.append(1)
        if len(calls) == 2:
            raise OSError("disk full (simulated)")
        return real(table)

    monkeypatch.setattr(io, "csv_bytes", failing)
    with pytest.raises(OSError, match="simulated"):
        io.write_instance(generate(60, seed=2), out)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert [p.name for p in tmp_path.iterdir()] == ["inst"]        # no temporary left behind
    monkeypatch.setattr(io, "csv_bytes", real)
    io.write_instance(generate(60, seed=2), out, format="parquet")
    assert sorted(p.name for p in out.iterdir()) == [".decomp", "legs.parquet", "meta.json", "products.parquet"]
    assert io.read_instance(out).n_products == 60


def test_refuses_a_folder_with_other_files(tmp_path):
    (tmp_path / "notes.txt").write_text("keep me")
    with pytest.raises(OutputPathError, match="no .decomp marker"):
        io.write_instance(generate(20, seed=1), tmp_path)
    assert (tmp_path / "notes.txt").read_text() == "keep me"
    # a folder decomp wrote, to which someone added a file of their own, is not replaced either
    out = io.write_instance(generate(20, seed=1), tmp_path / "inst")
    (out / "notes.txt").write_text("mine")
    with pytest.raises(OutputPathError, match="notes.txt"):
        io.write_instance(generate(20, seed=2), out)
    assert (out / "notes.txt").read_text() == "mine"


def test_refuses_a_folder_of_the_users_own_tables(tmp_path):
    # a folder holding someone's own legs.csv / products.csv (no marker) is not
    # replaced, by the Python API or by `decomp generate --out`
    from decomp.cli import main

    own = tmp_path / "mine"
    own.mkdir()
    (own / "legs.csv").write_text("leg,origin,destination,capacity\nL1,AA1,BB2,10\n")
    (own / "products.csv").write_text("product,legs,fare,mean,std\nP1,L1,100,5,1\n")
    before = {p.name: p.read_bytes() for p in own.iterdir()}
    with pytest.raises(OutputPathError, match="not written by decomp"):
        io.write_instance(generate(20, seed=1), own)
    assert main(["generate", "--products", "20", "--out", str(own)]) == 2
    assert {p.name: p.read_bytes() for p in own.iterdir()} == before
    # a folder decomp generated is replaced (its marker says so)
    assert main(["generate", "--products", "20", "--out", str(tmp_path / "gen")]) == 0
    assert main(["generate", "--products", "30", "--out", str(tmp_path / "gen")]) == 0
    assert io.read_instance(tmp_path / "gen").n_products == 30


def test_unknown_format(tmp_path):
    with pytest.raises(ValueError, match="format"):
        io.write_instance(generate(20), tmp_path / "x", format="xlsx")
