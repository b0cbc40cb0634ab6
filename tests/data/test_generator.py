"""The hub-and-spoke generator: determinism, exact sizes, network shape and the
statistics it promises (demand factor, coefficient of variation, fare ladder)."""

from __future__ import annotations

import re

import numpy as np
import pytest

from decomp import io
from decomp.errors import ConfigError
from decomp.generator import GeneratorParams, generate


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_same_seed_gives_byte_identical_files(tmp_path, fmt):
    a = io.write_instance(generate(2000, seed=7), tmp_path / "a", format=fmt)
    b = io.write_instance(generate(2000, seed=7), tmp_path / "b", format=fmt)
    for f in sorted(p.name for p in a.iterdir()):
        assert (a / f).read_bytes() == (b / f).read_bytes(), f


def test_other_seed_gives_other_instance():
    a, b = generate(500, seed=1), generate(500, seed=2)
    assert not np.array_equal(a.mean, b.mean)


def test_meta_params_reproduce_the_instance():
    a = generate(800, seed=3, two_stop=False)
    b = generate(800, seed=3, **a.meta["params"])
    assert np.array_equal(a.mean, b.mean) and list(a.product_ids) == list(b.product_ids)


@pytest.mark.parametrize("n", [10, 11, 37, 100, 999, 1000, 5000, 10_000])
def test_exact_size_every_leg_used_and_valid(n):
    inst = generate(n, seed=n)
    assert inst.n_products == n
    io.check_instance(inst)             # ids unique, numbers in range, consecutive legs connect
    used = np.bincount(inst.leg_index, minlength=inst.n_legs)
    assert (used > 0).all()


def test_leg_counts_follow_the_size():
    # targets of the project: about 100-200 legs at 10,000 products
    assert 100 <= generate(10_000, seed=0).n_legs <= 200
    assert generate(100, seed=0).n_legs < generate(1000, seed=0).n_legs < generate(10_000, seed=0).n_legs


def test_demand_factor_is_achieved():
    lo, hi = 0.9, 1.3
    inst = generate(20_000, seed=4, demand_factor=(lo, hi))
    df = inst.leg_load(inst.mean) / inst.capacity
    big = inst.capacity >= 50          # capacity is rounded to whole seats; small legs lose precision
    assert big.sum() > 0.8 * inst.n_legs
    assert df[big].min() >= lo * 0.99 and df[big].max() <= hi * 1.01
    # targets are uniform on [lo, hi]: the mean over ~300 legs is near (lo + hi) / 2
    # (standard error (hi-lo)/sqrt(12 n) ~ 0.007)
    assert abs(df[big].mean() - (lo + hi) / 2) < 0.04


def test_coefficient_of_variation_range():
    inst = generate(5000, seed=2, cv=(0.3, 0.5))
    cv = inst.std / inst.mean         # both rounded to 4 significant digits: cv within ~1e-3
    assert cv.min() >= 0.3 - 1e-3 and cv.max() <= 0.5 + 1e-3


def test_legs_per_product():
    inst = generate(10_000, seed=1)
    lpp = inst.legs_per_product
    assert set(np.unique(lpp)) == {1, 2, 3}
    assert generate(3000, seed=1, two_stop=False).legs_per_product.max() == 2
    assert generate(3000, seed=1, hubs=1).legs_per_product.max() == 2


def test_hub_and_spoke_shape():
    inst = generate(2000, seed=3, hubs=2, spokes=10, banks=3)
    p = inst.meta["params"]
    assert (p["hubs"], p["spokes"], p["banks"]) == (2, 10, 3)
    assert inst.n_legs == 3 * (2 * 10 + 2 * 1)
    assert len(np.unique(np.concatenate([inst.leg_origin, inst.leg_destination]))) == 12
    np.testing.assert_array_equal(np.bincount(inst.leg_extra["bank"])[1:], [22, 22, 22])
    # every leg touches a hub: the two most frequent stations are on every leg
    st, counts = np.unique(np.concatenate([inst.leg_origin, inst.leg_destination]), return_counts=True)
    hubs = st[np.argsort(-counts)[:2]]
    assert np.all(np.isin(inst.leg_origin, hubs) | np.isin(inst.leg_destination, hubs))


def test_fare_ladder_decreases_by_class():
    inst = generate(5000, seed=6, fare_classes=4)
    cls = inst.product_extra["fare_class"]
    itin = np.array([pid.rsplit("-", 1)[0] for pid in inst.product_ids])
    full = np.flatnonzero(np.r_[itin[1:] == itin[:-1], False])   # next product is the same itinerary
    assert (inst.fare[full + 1] < inst.fare[full]).all()
    assert set(cls) == {"A", "B", "C", "D"}


def test_ids_and_invented_station_codes():
    inst = generate(2000, seed=8)
    codes = np.unique(np.concatenate([inst.leg_origin, inst.leg_destination]))
    # letter, letter, digit: IATA airport codes use letters only (common practice, from memory)
    assert all(re.fullmatch(r"[A-Z]{2}[0-9]", c) for c in codes)
    for lid, o, d in zip(inst.leg_ids, inst.leg_origin, inst.leg_destination):
        assert re.fullmatch(rf"K\d{{4}}-{o}-{d}", lid)
    for pid, cls in zip(inst.product_ids[:200], inst.product_extra["fare_class"][:200]):
        assert re.fullmatch(r"K\d{4}(\.K\d{4}){0,2}-[A-Z]", pid) and pid.endswith("-" + cls)
    assert len(set(inst.product_ids)) == inst.n_products


def test_product_origin_destination_columns():
    inst = generate(1000, seed=9)
    first = inst.leg_index[inst.leg_ptr[:-1]]
    last = inst.leg_index[inst.leg_ptr[1:] - 1]
    assert np.array_equal(inst.product_extra["origin"], inst.leg_origin[first])
    assert np.array_equal(inst.product_extra["destination"], inst.leg_destination[last])


@pytest.mark.parametrize("kw", [dict(fare_ratio=1.5), dict(demand_factor=(1.2, 0.8)), dict(cv=(-0.1, 0.2)),
                                dict(hubs=0), dict(spokes=1), dict(colour="red"), dict(fare_classes=40)])
def test_bad_parameters(kw):
    with pytest.raises(ConfigError):
        generate(100, seed=0, **kw)


@pytest.mark.parametrize("n", [0, -5, 2.5])
def test_bad_size(n):
    with pytest.raises(ConfigError):
        generate(n)


def test_params_object_and_override():
    p = GeneratorParams(hubs=2, banks=1)
    inst = generate(500, seed=1, params=p, fare_classes=2)
    assert inst.meta["params"]["hubs"] == 2 and inst.meta["params"]["fare_classes"] == 2
