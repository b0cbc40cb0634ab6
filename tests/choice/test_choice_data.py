"""Networks with markets: the markets file, the product columns, their checks, reading and writing, the generator.

Invented data throughout (a fictional carrier, invented station codes). The checks are
about messages naming file, row, column and value, round trips, and that a network
without markets is read and written exactly as before.
"""

from __future__ import annotations

import json
import pathlib
import subprocess
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

import decomp
from decomp.choice import with_markets
from decomp.choice.data import UnusedMarketWarning
from decomp.choice.generate import generate_choice
from decomp.errors import InstanceError

from support.paths import ROOT  # noqa: E402


def _frames():
    legs = pd.DataFrame({"leg": ["NV1", "NV2"], "origin": ["QAA", "QHB"], "destination": ["QHB", "QCC"],
                         "capacity": [50.0, 40.0]})
    products = pd.DataFrame({"product": ["Y1", "B1", "Y2", "X"], "legs": ["NV1 NV2", "NV1 NV2", "NV1", "NV2"],
                             "fare": [400.0, 220.0, 150.0, 90.0], "mean": [10.0, 20.0, 30.0, 5.0],
                             "std": [3.0, 4.0, 5.0, 2.0], "market": ["MA", "MA", "MB", ""],
                             "preference_weight": [1.0, 2.5, 1.0, None]})
    markets = pd.DataFrame({"market": ["MA", "MB"], "arrivals": [60.0, 45.0], "no_purchase_weight": [1.5, 0.8]})
    return legs, products, markets


def _instance():
    legs, products, markets = _frames()
    return with_markets(decomp.Instance.from_frames(legs, products), markets)


def test_markets_are_attached_with_their_products():
    inst = _instance()
    mk = inst.markets
    assert mk.market_ids.tolist() == ["MA", "MB"]
    assert mk.product_market.tolist() == [0, 0, 1, -1]            # X is outside every market
    assert mk.weight.tolist() == [1.0, 2.5, 1.0, 0.0]
    # the multinomial logit with everything open: arrivals * w / (w0 + sum w), by hand
    assert mk.open_sales[0] == pytest.approx(60 * 1.0 / (1.5 + 3.5))
    assert mk.open_sales[2] == pytest.approx(45 * 1.0 / (0.8 + 1.0))
    assert mk.open_sales[3] == 0.0


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_round_trip_keeps_markets(tmp_path, fmt):
    inst = _instance()
    out = decomp.write_instance(inst, tmp_path / "net", format=fmt)
    assert (out / f"markets.{fmt}").is_file()
    back = decomp.read_instance(out)
    for name in ("market_ids", "arrivals", "no_purchase_weight", "product_market", "weight"):
        assert np.array_equal(getattr(back.markets, name), getattr(inst.markets, name)), name
    # written again: the same bytes
    again = decomp.write_instance(back, tmp_path / "net2", format=fmt)
    if fmt == "csv":
        for f in ("legs.csv", "products.csv", "markets.csv"):
            assert (out / f).read_bytes() == (again / f).read_bytes()


def test_network_without_markets_is_unchanged(tmp_path):
    inst = decomp.read_instance(ROOT / "instances" / "p100")
    assert inst.markets is None
    out = decomp.write_instance(inst, tmp_path / "p100")
    # the instance's files and decomp's marker (decomp.paths), no markets file
    assert sorted(p.name for p in out.iterdir()) == [".decomp", "legs.csv", "meta.json", "products.csv"]
    for f in ("legs.csv", "products.csv"):
        assert (out / f).read_bytes() == (ROOT / "instances" / "p100" / f).read_bytes()


def _write(tmp_path, products=None, markets=None):
    legs, p, m = _frames()
    folder = tmp_path / "bad"
    folder.mkdir(exist_ok=True)
    legs.to_csv(folder / "legs.csv", index=False)
    (products if products is not None else p).to_csv(folder / "products.csv", index=False)
    if markets is not False:
        (markets if markets is not None else m).to_csv(folder / "markets.csv", index=False)
    return folder


@pytest.mark.parametrize("change, file, row, column, words", [
    (lambda p, m: m.assign(arrivals=[60.0, -1.0]), "markets.csv", 2, "arrivals", ">= 0"),
    (lambda p, m: m.assign(arrivals=["60", "lots"]), "markets.csv", 2, "arrivals", "not a number"),
    (lambda p, m: m.assign(no_purchase_weight=[0.0, 1.0]), "markets.csv", 1, "no_purchase_weight", "> 0"),
    (lambda p, m: m.assign(market=["MA", "MA"]), "markets.csv", 2, "market", "duplicate"),
    (lambda p, m: m.assign(market=["MA", "M B"]), "markets.csv", 2, "market", "spaces"),
    (lambda p, m: p.assign(market=["MA", "MA", "MZ", ""]), "products.csv", 3, "market", "unknown market"),
    (lambda p, m: p.assign(preference_weight=[1.0, -2.0, 1.0, None]), "products.csv", 2, "preference_weight",
     "> 0"),
    (lambda p, m: p.assign(preference_weight=[1.0, None, 1.0, None]), "products.csv", 2, "preference_weight",
     "needs a preference weight"),
    (lambda p, m: p.assign(preference_weight=[1.0, 2.0, 1.0, 3.0]), "products.csv", 4, "preference_weight",
     "without a market"),
    (lambda p, m: p.assign(preference_weight=[1.0, 2e7, 1.0, None]), "products.csv", 2, "preference_weight",
     "times its market's no_purchase_weight"),
])
def test_bad_markets_name_file_row_column(tmp_path, change, file, row, column, words):
    _, p, m = _frames()
    p2, m2 = p.copy(), m.copy()
    out = change(p2, m2)
    if "arrivals" in out.columns:
        m2 = out
    else:
        p2 = out
    folder = _write(tmp_path, p2, m2)
    with pytest.raises(InstanceError) as err:
        decomp.read_instance(folder)
    e = err.value
    assert pathlib.Path(e.file).name == file and e.row == row and e.column == column
    assert words in str(e)


def test_market_column_without_markets_file_is_refused(tmp_path):
    folder = _write(tmp_path, markets=False)
    with pytest.raises(InstanceError, match="no markets.csv") as err:
        decomp.read_instance(folder)
    assert err.value.column == "market"


def test_markets_file_without_product_columns_is_refused(tmp_path):
    _, p, _ = _frames()
    folder = _write(tmp_path, p.drop(columns=["market", "preference_weight"]))
    with pytest.raises(InstanceError, match="missing column 'market'"):
        decomp.read_instance(folder)


def test_market_without_products_is_a_warning(tmp_path):
    _, p, m = _frames()
    m2 = pd.concat([m, pd.DataFrame({"market": ["MC"], "arrivals": [5.0], "no_purchase_weight": [1.0]})])
    folder = _write(tmp_path, p, m2)
    with pytest.warns(UnusedMarketWarning, match="MC"):
        inst = decomp.read_instance(folder)
    assert inst.markets.n_markets == 3


@pytest.mark.integration         # decomp in a subprocess
def test_validate_command_exits_2_naming_the_row(tmp_path):
    _, p, m = _frames()
    folder = _write(tmp_path, p, m.assign(arrivals=[60.0, float("nan")]))
    run = subprocess.run([sys.executable, "-m", "decomp.cli", "validate", str(folder)], capture_output=True,
                         text=True)
    assert run.returncode == 2
    assert "markets.csv" in run.stderr and "row 2" in run.stderr and "arrivals" in run.stderr


def test_sblp_needs_markets():
    inst = decomp.read_instance(ROOT / "instances" / "p100")
    with pytest.raises(InstanceError, match="no markets"):
        decomp.solve(inst, model="sblp")


def test_generator_is_deterministic_and_weights_fall_with_the_fare(tmp_path):
    a = generate_choice(2000, seed=5)
    b = generate_choice(2000, seed=5)
    pa_, pb = decomp.write_instance(a, tmp_path / "a"), decomp.write_instance(b, tmp_path / "b")
    for f in ("legs.csv", "products.csv", "markets.csv"):
        assert (pa_ / f).read_bytes() == (pb / f).read_bytes()
    mk = a.markets
    # within a market, the cheapest product has at least the weight of the dearest (up to the +-10% jitter)
    m, f, w = mk.product_market, a.fare, mk.weight
    for k in range(50):
        sel = np.flatnonzero(m == k)
        if len(sel) > 1:
            lo, hi = sel[np.argmin(f[sel])], sel[np.argmax(f[sel])]
            assert w[lo] >= w[hi] / 1.3
    # means are the sales with everything open (4 significant digits)
    assert np.allclose(a.mean, mk.open_sales, rtol=1e-3)
    assert set(mk.extra["buy_down"].tolist()) == {"strong", "weak"}
    # the network is the generator's (same legs, itineraries and fares)
    from decomp.generator import generate

    base = generate(2000, seed=5)
    assert np.array_equal(base.leg_index, a.leg_index) and np.array_equal(base.fare, a.fare)


@pytest.mark.integration         # decomp in a subprocess
def test_generate_command_writes_markets(tmp_path):
    out = tmp_path / "g"
    run = subprocess.run([sys.executable, "-m", "decomp.cli", "generate", "--products", "500", "--seed", "2",
                          "--markets", "--strong-buy-down-share", "1", "--out", str(out)], capture_output=True,
                         text=True)
    assert run.returncode == 0, run.stderr
    assert "markets" in run.stdout
    inst = decomp.read_instance(out)
    assert set(inst.markets.extra["buy_down"].tolist()) == {"strong"}
    meta = json.loads((out / "meta.json").read_text())
    assert meta["choice"]["strong_share"] == 1.0


@pytest.mark.integration         # decomp in a subprocess
def test_generate_choice_options_need_markets(tmp_path):
    run = subprocess.run([sys.executable, "-m", "decomp.cli", "generate", "--products", "100", "--weight-slope",
                          "1", "--out", str(tmp_path / "x")], capture_output=True, text=True)
    assert run.returncode == 2 and "--markets" in run.stderr


def test_check_instance_runs_the_market_checks():
    inst = _instance()
    decomp.check_instance(inst)
    import dataclasses

    from decomp.choice.data import Markets
    bad = dataclasses.replace(inst.markets, arrivals=np.array([60.0, -3.0]))
    with pytest.raises(InstanceError, match="arrivals"):
        decomp.check_instance(dataclasses.replace(inst, markets=bad))
    assert isinstance(bad, Markets)


def test_unused_leg_warning_is_not_raised_for_markets():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _instance()
