"""Solver-upgrade regression checks (decomp.baseline): record, check, tamper detection.

The answers compared here come from HiGHS and Ipopt themselves (re-solving in an
unchanged environment must reproduce them); the alternative-dual check rests on
LP duality (a dual-feasible point whose dual objective equals the primal optimum
is an optimal dual), shown on a network small enough to solve by hand.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import re

import numpy as np
import pytest

from decomp import baseline as bl
from decomp.options import SolverOptions
from decomp.result import Termination

from support.fakes import FakeClock, canned_solver, dlp_dual
from support.networks import series


def _available(model, method):
    from decomp import registry

    try:
        ok, reason = registry.get_method(method, model).available()
    except Exception as exc:  # noqa: BLE001 - method not written yet in this checkout
        return False, str(exc)
    return ok, reason


def _need(model, method):
    ok, reason = _available(model, method)
    if not ok:
        pytest.skip(f"{model}/{method} not available: {reason}")


def _pnlp_methods():
    return [m for m in ("lagrangian", "ipopt") if _available("pnlp", m)[0]]


MICRO1 = bl.InstanceSpec("micro1", "micro", {"seed": 1, "n_products": 12})
MICRO2 = bl.InstanceSpec("micro2", "micro", {"seed": 2, "n_products": 24})


def _perturb(solve_fn, legs_delta):
    """A solve function returning the real answer with some bid prices moved (leg id -> delta)."""
    def fake(instance, **kw):
        res = solve_fn(instance, **kw)
        pi = np.array(res.bid_price_array, dtype=np.float64)
        for leg, delta in legs_delta.items():
            pi[list(instance.leg_ids).index(leg)] += delta
        return dataclasses.replace(res, bid_price_array=pi)
    return fake


def _real_solve():
    from decomp import registry

    return registry.solve


# ---------------------------------------------------------------------------- pure helpers
def test_round_significant_and_digest():
    # Rounding to 6 significant digits, checked against Python's own '%.5e' formatting (a reference).
    x = np.array([1234567.0, 9.9999996, 0.000123456789, 0.0, 3e-9, 999999.5, 1000.0])
    m, e = bl.round_significant(x, 6)
    for xi, mi, ei in zip(x.tolist(), m.tolist(), e.tolist()):
        if abs(xi) < bl.ZERO_SEATS:
            assert (mi, ei) == (0, 0)
        else:
            assert float(mi) * 10.0 ** (ei - 5) == pytest.approx(float("%.5e" % xi), rel=1e-12)
            assert 100000 <= abs(mi) <= 999999
    d1 = bl.allocation_digest(x)
    d2 = bl.allocation_digest(x * (1 + 1e-13))     # far below 6 significant digits
    d3 = bl.allocation_digest(x * (1 + 1e-4))
    assert d1["sha256"] == d2["sha256"] != d3["sha256"]
    assert d1["sum"] == pytest.approx(float(x.sum())) and d1["max"] == 1234567.0 and d1["min"] == 0.0


def test_dlp_dual_objective_on_series_network():
    # Two legs in series, one product (fare 100, mean 20, capacities 10): by LP duality the
    # DLP optimum is 100 * 10 = 1000 and the optimal duals are exactly pi1 + pi2 = 100, pi >= 0
    # (dual objective 10 pi1 + 10 pi2 + 20 (100 - pi1 - pi2)^+); worked out by hand.
    inst = series()
    for pi, want in (([100, 0], 1000.0), ([0, 100], 1000.0), ([37.5, 62.5], 1000.0), ([60, 60], 1200.0),
                     ([20, 30], 10 * 50 + 20 * 50)):
        assert dlp_dual(inst, pi) == pytest.approx(want)
        assert bl.lp_dual_objective(inst, "dlp", pi) == pytest.approx(want)


@pytest.mark.solver
def test_environment_lists_versions():
    env = bl.environment()
    for key in ("python", "numpy", "scipy", "pyomo", "highspy", "cyipopt", "highs_library", "ipopt_library",
                "cpu_model", "cpu_count_logical", "platform"):
        assert key in env
    import highspy

    # The HiGHS library reports its own version (reference: highspy.Highs().version()).
    assert env["highs_library"] == highspy.Highs().version()
    assert re.fullmatch(r"\d+\.\d+\.\d+", env["ipopt_library"] or "")
    changes = bl.environment_changes(env, {**env, "ipopt_library": "9.9.9", "new_key": 1})
    assert changes[0] == ("ipopt_library", env["ipopt_library"], "9.9.9")
    assert ("new_key", None, 1) in changes


# ---------------------------------------------------------------------------- fake-solver tests
def test_record_writes_plain_files_and_manifest(tmp_path):
    out = tmp_path / "base"
    summary = bl.record(out, cases=[bl.Case(series(), "dlp", "highs")],
                        solve_fn=canned_solver([100, 0]), clock=FakeClock(0.1))
    assert summary.path == out
    manifest = json.loads((out / "manifest.json").read_text())
    paths = {f["path"] for f in manifest["files"]}
    assert {"environment.json", "summary.csv", "cases/series-dlp-highs/result.json",
            "cases/series-dlp-highs/bid_prices.csv"} <= paths
    assert any(p.startswith("instances/series/") for p in paths)
    for f in manifest["files"]:   # sha256 from hashlib (reference)
        assert hashlib.sha256((out / f["path"]).read_bytes()).hexdigest() == f["sha256"]
    assert (out / "cases/series-dlp-highs/bid_prices.csv").read_text() == \
        "leg,bid_price\nQAAQHX,100.0\nQHXQAB,0.0\n"
    # the case's result.json is the one result schema, the case's own facts under context
    from decomp.result import SCHEMA, SolveResult, read_bid_prices

    data = json.loads((out / "cases/series-dlp-highs/result.json").read_text())
    assert data["schema"] == SCHEMA and data["schema_version"] == 1 and data["context"]["case"] == "series-dlp-highs"
    assert data["context"]["solver_options"]["tol"] == SolverOptions().tol and "history" not in data
    assert SolveResult.from_json(out / "cases/series-dlp-highs").bid_prices == {"QAAQHX": 100.0, "QHXQAB": 0.0}
    assert read_bid_prices(out / "cases/series-dlp-highs/bid_prices.csv") == {"QAAQHX": 100.0, "QHXQAB": 0.0}
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]   # no temporary left


def test_record_failure_leaves_nothing(tmp_path):
    def boom(instance, **kw):
        raise RuntimeError("solver crashed")

    with pytest.raises(RuntimeError):
        bl.record(tmp_path / "base", cases=[bl.Case(series(), "dlp", "highs")], solve_fn=boom)
    assert list(tmp_path.iterdir()) == []
    (tmp_path / "base").mkdir()
    from decomp.errors import OutputPathError

    with pytest.raises(OutputPathError, match="already exists"):
        bl.record(tmp_path / "base", cases=[bl.Case(series(), "dlp", "highs")],
                  solve_fn=canned_solver([100, 0]))


def test_alternative_optimal_duals_with_canned_solver(tmp_path):
    # Series network: (100, 0) and (0, 100) are both optimal duals (see the formula test above),
    # (60, 60) is dual feasible but its dual objective is 1200 > 1000: not optimal.
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(series(), "dlp", "highs")], solve_fn=canned_solver([100, 0]))
    rep = bl.check(out, solve_fn=canned_solver([0, 100]))
    (case,) = rep.cases
    assert case.verdict == bl.ALTERNATIVE_DUALS and not rep.regression
    assert case.metrics["bid_moved_legs"] == ["QAAQHX", "QHXQAB"]
    assert "QAAQHX" in rep.to_markdown() and "alternative" in rep.to_markdown()
    rep = bl.check(out, solve_fn=canned_solver([60, 60]))
    assert rep.cases[0].verdict == bl.REGRESSION
    assert any("not optimal duals" in f["message"] for f in rep.cases[0].findings)
    rep = bl.check(out, solve_fn=canned_solver([-10, 110]))
    assert rep.cases[0].verdict == bl.REGRESSION
    assert any("negative" in f["message"] for f in rep.cases[0].findings)


def test_alternative_optimal_duals_of_a_piecewise_linear_pnlp(tmp_path):
    # The series network with Poisson demand (mean 20) is an LP: expected sales are piecewise
    # linear between whole seats. Both legs have capacity 10, so the optimum sells 10 seats,
    # 100 E[min(D, 10)] (from scipy.stats.poisson: sum of P(D > k), k < 10), and its bid prices
    # are any split of a sum s with 100 P(D > 10) <= s <= 100 P(D > 9) (the subgradient at the
    # kink; the dual depends on pi1 + pi2 only, c1 = c2: a mathematical fact). The Lagrangian
    # method's restricted problems are HiGHS vertices, so a HiGHS upgrade may move them: moved
    # bid prices that remain optimal duals are alternative_duals, and a changed allocation a
    # note, as for the LP models; a sum outside the interval is still a regression.
    from scipy import stats

    from decomp import demand_mix

    inst = demand_mix.apply(series(), demand_mix.DemandMix.parse("poisson 1"), seed=0)
    d = stats.poisson(20.0)
    optimum = 100.0 * float(np.sum(d.sf(np.arange(10))))
    s = 50.0 * float(d.sf(9) + d.sf(10))
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(inst, "pnlp", "lagrangian")], solve_fn=canned_solver([s, 0.0], objective=optimum))
    rep = bl.check(out, solve_fn=canned_solver([0.0, s], objective=optimum))
    (case,) = rep.cases
    assert case.verdict == bl.ALTERNATIVE_DUALS and not rep.regression, rep.to_markdown()
    assert case.metrics["alt_dual_rel_gap"] == pytest.approx(0.0, abs=1e-12)
    rep = bl.check(out, solve_fn=canned_solver([s + 40.0, 0.0], objective=optimum))
    assert rep.cases[0].verdict == bl.REGRESSION
    assert any("not optimal duals" in f["message"] for f in rep.cases[0].findings)


def test_status_change_is_a_regression(tmp_path):
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(series(), "dlp", "highs")], solve_fn=canned_solver([100, 0]))
    rep = bl.check(out, solve_fn=canned_solver([100, 0], termination=Termination.ITERATION_LIMIT))
    assert rep.regression
    assert any(f["kind"] == "status" and "iteration_limit" in f["message"] for f in rep.cases[0].findings)


def test_timing_regression_with_fake_clock(tmp_path):
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(series(), "dlp", "highs")], solve_fn=canned_solver([100, 0]),
              clock=FakeClock(1.0))
    ok = bl.check(out, solve_fn=canned_solver([100, 0]), clock=FakeClock(1.9))
    assert not ok.regression and ok.cases[0].metrics["time_ratio"] == pytest.approx(1.9)
    slow = bl.check(out, solve_fn=canned_solver([100, 0]), clock=FakeClock(3.0))
    assert slow.regression and slow.cases[0].metrics["time_ratio"] == pytest.approx(3.0)
    assert [f["kind"] for f in slow.cases[0].findings] == ["time"]
    assert slow.cases[0].metrics["time_runs"] == 3          # the slow time was confirmed by 2 more runs
    # One slow run followed by normal ones is noise: confirmed away by the best of the extra runs.
    durations = iter([3.0, 1.0, 1.0, 1.0, 1.0])

    class NoisyClock(FakeClock):
        def __call__(self):
            self.calls += 1
            if self.calls % 2 == 0:
                self.t += next(durations)
            return self.t

    noisy = bl.check(out, solve_fn=canned_solver([100, 0]), clock=NoisyClock(None), warmup=False)
    assert not noisy.regression and noisy.cases[0].metrics["time_new"] == pytest.approx(1.0)
    lenient = bl.check(out, solve_fn=canned_solver([100, 0]), clock=FakeClock(3.0),
                       thresholds=bl.Thresholds(time_ratio=4.0))
    assert not lenient.regression
    # Below the time floor (0.5 s) a 10x ratio of millisecond solves is timer noise, not a regression.
    bl.record(tmp_path / "fast", cases=[bl.Case(series(), "dlp", "highs")],
              solve_fn=canned_solver([100, 0]), clock=FakeClock(0.01))
    assert not bl.check(tmp_path / "fast", solve_fn=canned_solver([100, 0]), clock=FakeClock(0.1)).regression


# ---------------------------------------------------------------------------- tampered baselines
@pytest.fixture
def recorded(tmp_path):
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(series(), "dlp", "highs")], solve_fn=canned_solver([100, 0]))
    return out


def test_missing_file_is_named(recorded):
    target = recorded / "cases/series-dlp-highs/bid_prices.csv"
    target.unlink()
    with pytest.raises(bl.BaselineError, match="missing") as exc:
        bl.load(recorded)
    assert exc.value.file == str(target)


def test_truncated_file_is_named(recorded):
    target = recorded / "cases/series-dlp-highs/result.json"
    text = target.read_text()
    target.write_text(text[: len(text) // 2])
    with pytest.raises(bl.BaselineError, match="truncated") as exc:
        bl.load(recorded)
    assert exc.value.file == str(target)


def test_hand_edited_file_is_named(recorded):
    target = recorded / "cases/series-dlp-highs/bid_prices.csv"
    target.write_text(target.read_text().replace("100.0", "101.0"))   # same length, other content
    with pytest.raises(bl.BaselineError, match="sha256") as exc:
        bl.load(recorded)
    assert exc.value.file == str(target)


def test_edited_manifest_and_missing_folder(recorded, tmp_path):
    mpath = recorded / "manifest.json"
    m = json.loads(mpath.read_text())
    m["files"] = [f for f in m["files"] if not f["path"].endswith("bid_prices.csv")]
    mpath.write_text(json.dumps(m))
    with pytest.raises(bl.BaselineError, match="manifest_sha256") as exc:
        bl.load(recorded)
    assert exc.value.file == str(mpath)
    mpath.unlink()
    with pytest.raises(bl.BaselineError, match="not a baseline folder"):
        bl.load(recorded)
    with pytest.raises(bl.BaselineError, match="not found"):
        bl.load(tmp_path / "nowhere")


def test_cli_time_growth_takes_the_forms_of_bench_compare(recorded, capsys):
    from decomp.cli import build_parser, main

    assert build_parser().parse_args(["baseline", "check", str(recorded)]).max_time_growth == "2x"
    for bad in ("fast", "0.5x", "0.5"):          # refused before anything is solved: exit 2, the value named
        assert main(["baseline", "check", str(recorded), "--max-time-growth", bad]) == 2
        assert bad in capsys.readouterr().err


def test_cli_exit_code_2_on_tampered_baseline(recorded, capsys):
    from decomp.cli import main

    target = recorded / "cases/series-dlp-highs/result.json"
    target.write_text(target.read_text()[:-10])
    assert main(["baseline", "check", str(recorded)]) == 2
    err = capsys.readouterr().err
    assert "result.json" in err and "truncated" in err


def test_unknown_override_is_rejected(recorded):
    from decomp.errors import ConfigError

    with pytest.raises(ConfigError, match="unknown options"):
        bl.check(recorded, options_override={"tolerance": 1e-3}, solve_fn=canned_solver([100, 0]))
    with pytest.raises(ConfigError):
        bl.Thresholds(time_ratio=0.5)


# ---------------------------------------------------------------------------- real solvers
@pytest.mark.solver
def test_identical_environment_passes(tmp_path):
    cases = []
    for model, method in (("dlp", "highs"), ("pwl", "highs"), *(("pnlp", m) for m in _pnlp_methods())):
        if _available(model, method)[0]:
            cases += [bl.Case(MICRO1, model, method), bl.Case(MICRO2, model, method)]
    if not cases:
        pytest.skip("no solver method available yet")
    out = tmp_path / "base"
    bl.record(out, cases=cases)
    rep = bl.check(out)
    assert [c.verdict for c in rep.cases] == [bl.PASS] * len(cases), rep.to_markdown()
    assert rep.environment_changes == []
    jpath, mpath = bl.write_report(rep, tmp_path / "report")
    assert json.loads(jpath.read_text())["regression"] is False
    assert "no regression" in mpath.read_text()
    from decomp.cli import main

    assert main(["baseline", "check", str(out), "--out", str(tmp_path / "r2")]) == 0


@pytest.mark.solver
@pytest.mark.parametrize("method", ["ipopt", "lagrangian"])
def test_changed_tolerance_is_caught(tmp_path, method):
    _need("pnlp", method)
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(MICRO1, "pnlp", method), bl.Case(MICRO2, "pnlp", method)])
    rep = bl.check(out, options_override={"tol": 1e-3})
    assert rep.regression, rep.to_markdown()
    for c in rep.cases:
        assert c.verdict == bl.REGRESSION
        assert any(f["kind"] == "options" and "tol 1e-09 -> 0.001" in f["message"] for f in c.findings)
        # the looser answer is certified less accurately than the recorded tolerance asked for
        assert c.metrics["gap_new"] > 1e-9 or c.metrics["objective_rel_change"] > 1e-8
    # Tight bid-price thresholds also name the legs that moved.
    tight = bl.check(out, options_override={"tol": 1e-3}, thresholds=bl.Thresholds(bid_rtol=1e-12, bid_atol=1e-12))
    legs = set(bl.micro_instance(1).leg_ids.tolist())
    moved = tight.cases[0].metrics["bid_moved_legs"]
    assert moved and set(moved) <= legs


@pytest.mark.solver
def test_iteration_limit_status_change_is_caught(tmp_path):
    _need("pnlp", "ipopt")
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(MICRO1, "pnlp", "ipopt")])
    rep = bl.check(out, options_override={"iteration_limit": 1})
    assert rep.regression
    assert any(f["kind"] == "status" for f in rep.cases[0].findings), rep.to_markdown()


@pytest.mark.solver
@pytest.mark.parametrize("model,method", [("pnlp", "ipopt"), ("pnlp", "lagrangian"), ("dlp", "highs")])
def test_injected_bid_price_change_names_the_leg(tmp_path, model, method):
    _need(model, method)
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(MICRO1, model, method)])
    rep = bl.check(out, solve_fn=_perturb(_real_solve(), {"QABQHX": 0.5}))
    (c,) = rep.cases
    assert c.verdict == bl.REGRESSION
    assert c.metrics["bid_moved_legs"] == ["QABQHX"]
    assert c.metrics["bid_max_abs_leg"] == "QABQHX"
    assert c.metrics["bid_max_abs_change"] == pytest.approx(0.5)
    assert "QABQHX" in rep.to_markdown()
    if model == "dlp":
        # raising a bid price on a leg with capacity > 0 raises the LP dual objective above the
        # optimum (weak duality), so these are not alternative optimal duals
        assert any("not optimal duals" in f["message"] for f in c.findings)


@pytest.mark.solver
@pytest.mark.parametrize("model", ["dlp", "pwl"])
def test_lp_alternative_duals_from_highs(tmp_path, model):
    # Series network: both legs have capacity 10 and carry the same single product, so the LP dual
    # objective c1 pi1 + c2 pi2 + g(pi1 + pi2) depends on pi1 + pi2 only (c1 = c2): moving the bid
    # price from one leg to the other keeps an optimal dual optimal (a mathematical fact, DLP and PWL).
    _need(model, "highs")
    from decomp import registry

    inst = series()
    res = registry.solve(inst, model=model, method="highs")
    total = float(np.sum(res.bid_price_array))
    if model == "dlp":
        # HiGHS against the hand solution: optimum 1000, bid prices on the optimal face pi1 + pi2 = 100.
        assert res.objective == pytest.approx(1000.0, rel=1e-12)
        assert total == pytest.approx(100.0, rel=1e-9)
        assert dlp_dual(inst, res.bid_price_array) == pytest.approx(1000.0, rel=1e-12)
    assert total > 1.0
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(inst, model, "highs")])
    other = [0.0, total] if res.bid_price_array[0] > total / 2 else [total, 0.0]
    delta = dict(zip(["QAAQHX", "QHXQAB"], (np.array(other) - res.bid_price_array).tolist()))
    rep = bl.check(out, solve_fn=_perturb(_real_solve(), delta))
    (c,) = rep.cases
    assert c.verdict == bl.ALTERNATIVE_DUALS, rep.to_markdown()
    assert not rep.regression
    assert sorted(c.metrics["bid_moved_legs"]) == ["QAAQHX", "QHXQAB"]
    # Negative control: raising both bid prices leaves the optimal face (dual objective grows).
    rep = bl.check(out, solve_fn=_perturb(_real_solve(), {"QAAQHX": 5.0, "QHXQAB": 5.0}))
    assert rep.cases[0].verdict == bl.REGRESSION


@pytest.mark.solver
def test_dlp_dual_objective_matches_highs_on_micro():
    # Strong LP duality: at HiGHS's optimal duals the dual objective equals its primal optimum.
    _need("dlp", "highs")
    from decomp import registry

    for seed in (1, 2):
        inst = bl.micro_instance(seed, 24)
        res = registry.solve(inst, model="dlp", method="highs")
        assert dlp_dual(inst, res.bid_price_array) == pytest.approx(res.objective, rel=1e-9)
        assert bl.lp_dual_objective(inst, "dlp", res.bid_price_array) == pytest.approx(res.objective, rel=1e-9)


def test_warmup_solves_each_pair_once_untimed(tmp_path):
    calls = []
    canned = canned_solver([100, 0])

    def counting(instance, **kw):
        calls.append(kw["method"])
        return canned(instance, **kw)

    cases = [bl.Case(series(), "dlp", "highs", label="a"), bl.Case(series(), "dlp", "highs", label="b")]
    bl.record(tmp_path / "w", cases=cases, solve_fn=counting)
    assert len(calls) == 3                      # one untimed warm-up, then one timed solve per case
    calls.clear()
    bl.record(tmp_path / "nw", cases=cases, solve_fn=counting, warmup=False, repeat=2)
    assert len(calls) == 4                      # two timed solves per case, no warm-up


def test_environment_change_is_reported(recorded, monkeypatch):
    real = bl.environment()
    import importlib

    check_module = importlib.import_module("decomp.baseline.check")   # the module, not the function
    monkeypatch.setattr(check_module, "environment", lambda: {**real, "highs_library": "99.0.0"})
    rep = bl.check(recorded, solve_fn=canned_solver([100, 0]))
    assert ("highs_library", real["highs_library"], "99.0.0") in rep.environment_changes
    assert not rep.regression                     # a version change alone is not a regression
    assert "| highs_library | " + str(real["highs_library"]) + " | 99.0.0 |" in rep.to_markdown()


@pytest.mark.solver
def test_cli_record_then_check_exit_codes(tmp_path, monkeypatch, capsys):
    _need("pnlp", "ipopt")
    from decomp.cli import main

    monkeypatch.setitem(bl.SUITES, "one", ("micro1 by Ipopt", lambda: [bl.Case(MICRO1, "pnlp", "ipopt")]))
    out = tmp_path / "base"
    assert main(["baseline", "record", "--suite", "one", "--out", str(out)]) == 0
    assert main(["baseline", "record", "--suite", "one", "--out", str(out)]) == 2     # exists, no --force
    assert main(["baseline", "check", str(out), "--out", str(tmp_path / "same")]) == 0
    assert main(["baseline", "check", str(out), "--override", "tol=1e-3", "--out", str(tmp_path / "loose")]) == 1
    text = (tmp_path / "loose" / "check.md").read_text()
    assert "micro1-pnlp-ipopt | regression" in text and "tol 1e-09 -> 0.001" in text
    assert main(["baseline", "check", str(out), "--override", "nonsense"]) == 2
    capsys.readouterr()


@pytest.mark.solver
def test_every_check_is_added_to_the_history(tmp_path, monkeypatch, capsys):
    _need("dlp", "highs")
    from decomp.benchsuite import history
    from decomp.cli import main

    monkeypatch.setitem(bl.SUITES, "one", ("micro1 by HiGHS", lambda: [bl.Case(MICRO1, "dlp", "highs")]))
    out, store = tmp_path / "base", tmp_path / "history.sqlite"
    assert main(["baseline", "record", "--suite", "one", "--out", str(out)]) == 0
    assert main(["baseline", "check", str(out), "--history", str(store)]) == 0
    assert main(["baseline", "check", str(out), "--history", str(store), "--override", "tol=1e-3"]) == 0
    assert main(["baseline", "check", str(out), "--history", str(store), "--no-history"]) == 0
    assert "added the check as run #2" in capsys.readouterr().out
    with history.open_store(store, create=False) as s:
        runs = s.runs()
        cases = s.cases(runs[-1].run_id)
    assert [r.kind for r in runs] == ["baseline-check"] * 2 and runs[0].suite == "one"
    env = bl.environment()
    assert runs[0].env["highs"] == env["highs_library"] and runs[0].env["numpy"] == env["numpy"]
    assert runs[0].env["host"] and runs[0].env["load_start"] is not None and runs[0].n_failed == 0
    (case,) = cases.values()
    assert case.row.case == "micro1-dlp-highs" and case.row.get("termination") == "optimal"
    assert case.row.get("verdict") == "pass" and case.row.min > 0 and case.demand == "normal"
