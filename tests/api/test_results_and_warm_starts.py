"""One interface to learn, from Python: results that save and reload, warm starts from a result or
a file, decisions that print, options refused with a clear error.

The network is the hand-solved example of ``tests/support/networks.py`` (its DLP revenue 30,300 is
worked out by hand there); the checks here are about the interface around the solve.
"""

import math
import warnings

import numpy as np
import pytest

import decomp
from decomp.errors import ConfigError

from support.networks import HAND_REVENUE, LEGS, PRODUCTS


@pytest.fixture(scope="module")
def example():
    return decomp.Instance.from_frames(LEGS, PRODUCTS, meta={"name": "hand"})


@pytest.fixture(scope="module")
def dlp(example):
    return decomp.solve(example, model="dlp", method="highs")


# -- save() keeps what the tables need; a result without its allocation says so ----------

@pytest.mark.solver
def test_save_and_reload_keep_the_tables(example, dlp, tmp_path):
    assert dlp.ok and dlp.objective == pytest.approx(HAND_REVENUE, rel=1e-9)
    path = dlp.save(tmp_path / "r.json", context={"note": "from a notebook"})
    back = decomp.read_result(path)
    assert back.objective == dlp.objective and np.array_equal(back.allocation, dlp.allocation)
    assert decomp.SolveResult.load(path).bid_prices == dlp.bid_prices
    with warnings.catch_warnings():
        warnings.simplefilter("error")          # a saved result gives its tables without a warning
        legs = decomp.leg_table(example, back)
        products = decomp.product_table(example, back)
    assert legs.equals(decomp.leg_table(example, dlp)) and products.equals(decomp.product_table(example, dlp))
    assert not legs["load_factor"].drop(index=2).isna().any()        # leg A3 has no capacity: NaN by design


@pytest.mark.solver
def test_a_result_without_its_allocation_warns_in_the_tables(example, dlp, tmp_path):
    bare = decomp.SolveResult.from_json(dlp.to_json_dict(include_allocation=False))
    assert bare.allocation is None
    with pytest.warns(UserWarning, match="no allocation.*save"):
        legs = decomp.leg_table(example, bare)
    assert legs["allocated"].isna().all()
    with pytest.warns(UserWarning, match="no allocation"):
        decomp.product_table(example, bare)


# -- warm starts from a result, a result file or a bid-price table -----------------------

def test_warm_start_from_a_result_or_a_file(tmp_path):
    inst = decomp.read_instance("instances/p1k")
    cold = decomp.solve(inst, model="pnlp", method="lagrangian")
    path = cold.save(tmp_path / "cold.json")
    for warm in (cold, path, str(path), cold.bid_prices):
        res = decomp.solve(inst, model="pnlp", method="lagrangian", warm_start=warm)
        assert res.ok and res.options.get("start") == "warm", type(warm)
        # started at the optimum, it stops at once (and at the same bid prices, within its tolerance)
        assert res.iterations <= cold.iterations
        assert np.allclose(res.bid_price_array, cold.bid_price_array, rtol=1e-5, atol=1e-6)
    with pytest.raises(decomp.InstanceError, match="not found"):
        decomp.solve(inst, model="pnlp", method="lagrangian", warm_start=tmp_path / "missing.json")
    with pytest.raises(ConfigError, match="warm_start"):
        decomp.solve(inst, model="pnlp", method="lagrangian", warm_start=object())


# -- a decision prints as its text ------------------------------------------------------

@pytest.mark.solver
def test_a_decision_prints_as_text(dlp, capsys):
    d = dlp.decide("A1 A2", 310)
    print(d)
    out = capsys.readouterr().out
    assert out.startswith("ACCEPT: fare 310.00 >= displacement 300.00") and str(d) == d.text()
    assert "Decision(" in repr(d)          # repr stays the dataclass's


# -- an option of the wrong type is a ConfigError naming it, never a bare TypeError ---------

@pytest.mark.parametrize("name, value", [("time_limit", "10"), ("tol", "1e-6"), ("iteration_limit", "5"),
                                         ("iteration_limit", 2.5), ("threads", "2"), ("segments", "16"),
                                         ("time_limit", [10]), ("time_limit", math.nan), ("verbose", "yes"),
                                         ("dual_method", 3), ("solver_options", "tol=1")])
def test_options_of_the_wrong_type_are_config_errors(name, value):
    with pytest.raises(ConfigError, match=name):
        decomp.SolverOptions(**{name: value})
    with pytest.raises(ConfigError, match=name):
        decomp.solve("instances/p100", model="dlp", method="highs", **{name: value})
