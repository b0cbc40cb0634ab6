"""Demand models of generated networks (decomp.demand_mix, decomp generate --demand) and the
Lagrangian method on them at mid size.

References outside the project's solver code: the independent certificate of
tests/family.py (scipy.stats alone; weak duality, a mathematical fact) and the law of large
numbers for the families' shares (a binomial count within 5 standard deviations).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

import family
from decomp import SolverOptions, Termination, solve
from decomp.cli import main
from decomp.demand_mix import NAMED, DemandMix, Part, apply
from decomp.errors import ConfigError
from decomp.generator import generate


def test_the_text_form_reads_back_to_the_same_mix():
    mix = DemandMix.parse("poisson 0.35, negbin 0.15 2-3, gamma 0.15, normal 0.25 0.02-0.3, known 0.1")
    assert mix.parts[1] == Part("negbin", 0.15, (2.0, 3.0))
    assert DemandMix.parse(mix.text()) == mix
    assert DemandMix.parse("mix") == NAMED["mix"]
    assert DemandMix.from_dict(mix.to_dict()) == mix


@pytest.mark.parametrize("text,words", [
    ("poisson 0.5", "add up to 0.5"),
    ("weibull 1", "unknown family"),
    ("poisson 0.5, poisson 0.5", "given twice"),
    ("poisson 1 2-3", "takes no spread"),
    ("negbin 1 0.5-2", "variance / mean"),
    ("normal 1 0.3-0.1", "low-high"),
    ("poisson 0.5 1 2, normal 0.5", "family share"),
    ("normal one", "not a number"),
    ("gamma -1, normal 2", "must be in (0, 1]"),
])
def test_a_malformed_mix_is_refused_with_what_to_write(text, words):
    with pytest.raises(ConfigError, match=words.replace("(", r"\(").replace(")", r"\)")):
        DemandMix.parse(text)


def test_the_mix_keeps_the_network_and_draws_families_in_their_shares():
    base = generate(20000, seed=5)
    inst = generate(20000, seed=5, demand="poisson 0.35, negbin 0.15 2-3, gamma 0.15, normal 0.25 0.02-0.3, "
                                          "known 0.1")
    assert np.array_equal(inst.mean, base.mean) and np.array_equal(inst.fare, base.fare)
    assert np.array_equal(inst.leg_index, base.leg_index) and np.array_equal(inst.capacity, base.capacity)
    names = np.asarray(inst.distribution)
    known = (names == "normal") & (inst.std == 0)
    counts = {"poisson": (names == "poisson").sum(), "negbin": (names == "negbin").sum(),
              "gamma": (names == "gamma").sum(), "known": known.sum(),
              "normal": ((names == "normal") & ~known).sum()}
    n = inst.n_products
    for fam, share in (("poisson", 0.35), ("negbin", 0.15), ("gamma", 0.15), ("normal", 0.25), ("known", 0.1)):
        assert abs(counts[fam] - share * n) <= 5 * np.sqrt(n * share * (1 - share)), fam
    # spreads: Poisson std sqrt(mean); negbin variance / mean in [2, 3] (rounding of std to 4
    # significant digits aside); normal CV in [0.02, 0.3]; gamma keeps the generator's CV
    po = names == "poisson"
    assert np.allclose(inst.std[po], np.sqrt(inst.mean[po]), rtol=1e-3)
    nb = names == "negbin"
    vmr = inst.std[nb] ** 2 / inst.mean[nb]
    assert np.all(vmr > 2.0 - 2e-3) and np.all(vmr < 3.0 + 2e-3)
    nm = (names == "normal") & ~known
    cv = inst.std[nm] / inst.mean[nm]
    assert np.all(cv >= 0.02 - 1e-4) and np.all(cv <= 0.3 + 1e-4)
    g = names == "gamma"
    assert np.array_equal(inst.std[g], base.std[g])
    assert inst.meta["params"]["demand"] == NAMED["mix"].text().replace("negbin 0.15", "negbin 0.15 2-3")


def test_a_mix_is_a_pure_function_of_the_seed():
    a = apply(generate(3000, seed=2), NAMED["mix"], 2)
    b = apply(generate(3000, seed=2), NAMED["mix"], 2)
    c = apply(generate(3000, seed=2), NAMED["mix"], 3)
    assert np.array_equal(a.std, b.std) and np.array_equal(a.distribution, b.distribution)
    assert not np.array_equal(a.distribution, c.distribution)


def test_generate_writes_the_same_bytes_with_and_without_the_default(tmp_path):
    # decomp generate without --demand writes what it wrote before demand models existed,
    # and --demand normal is the same; the same --demand and seed give the same bytes.
    for name, extra in (("a", []), ("b", ["--demand", "normal"]), ("c", ["--demand", "mix"]),
                        ("d", ["--demand", "mix"])):
        assert main(["generate", "--products", "800", "--seed", "4", "--out", str(tmp_path / name), *extra]) == 0
    for f in ("legs.csv", "products.csv", "meta.json"):
        assert (tmp_path / "a" / f).read_bytes() == (tmp_path / "b" / f).read_bytes()
        assert (tmp_path / "c" / f).read_bytes() == (tmp_path / "d" / f).read_bytes()
    assert "distribution" in (tmp_path / "c" / "products.csv").read_text().splitlines()[0]
    meta = json.loads((tmp_path / "c" / "meta.json").read_text())
    assert meta["params"]["demand"].startswith("poisson 0.35")


def test_generate_refuses_a_malformed_mix(tmp_path, capsys):
    assert main(["generate", "--products", "100", "--out", str(tmp_path / "x"), "--demand", "poisson 0.7"]) == 2
    assert "add up to" in capsys.readouterr().err
    assert not (tmp_path / "x").exists()


@pytest.mark.solver
@pytest.mark.parametrize("name", ["mix"])
def test_a_mid_size_mixed_network_is_optimal_by_the_independent_certificate(name):
    # 5,000 products, every family of the production-like mix; the answer checked by the
    # independent certificate (scipy.stats only) and its optimality by weak duality.
    inst = generate(5000, seed=11, demand=name)
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert (dual - primal) / max(1.0, abs(primal)) <= 1e-8


@pytest.mark.slow
@pytest.mark.solver
@pytest.mark.parametrize("name", ["gamma", "lowcv", "poisson", "negbin", "mix"])
@pytest.mark.parametrize("products", [10000, 100000])
def test_large_networks_of_every_demand_model(name, products):
    # The large tier: each named demand model on generated networks of 10,000 and 100,000
    # products, checked as the mid-size one is.
    inst = generate(products, seed=products // 1000 + 3, demand=name)
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(iteration_limit=400))
    assert r.termination is Termination.OPTIMAL, (name, products, r.message)
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert (dual - primal) / max(1.0, abs(primal)) <= 1e-8
