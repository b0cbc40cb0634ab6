"""The benchmark suite's machinery: one micro run (tiny rung, one round), report, plots, compare.

These tests check the machinery, not speed: no timing is asserted.
"""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest

from decomp import cli
from decomp.benchsuite import cases as bcases
from decomp.benchsuite.compare import compare_runs, parse_threshold
from decomp.benchsuite.fit import fit_power_law
from decomp.benchsuite.measure import bid_price_error
from decomp.benchsuite.plots import pareto_front
from decomp.benchsuite.results import BenchmarkFileError, load_run

ACCURACY_FIELDS = ("objective", "gap", "objective_error", "bid_price_error", "max_violation",
                   "max_violation_rel", "iterations", "termination", "solution_status",
                   "peak_memory_mib", "peak_rss_mib", "solver_version", "n_products", "n_legs", "reference")


# -- pure pieces ---------------------------------------------------------------

def test_fit_recovers_exact_power_law():
    # Mathematical fact: for t = a n^b exactly, least squares on logs returns a and b
    # with zero residual.
    n = np.array([1e2, 1e3, 1e4, 1e5])
    a, b, info = fit_power_law(n, 3e-6 * n ** 1.1)
    assert a == pytest.approx(3e-6, rel=1e-9) and b == pytest.approx(1.1, rel=1e-12)
    assert info["sigma"] == pytest.approx(0.0, abs=1e-9) and info["n_points"] == 4


def test_fit_matches_numpy_polyfit_and_its_covariance():
    # Reference: numpy.polyfit (degree 1 on logs) and its scaled covariance matrix.
    rng = np.random.default_rng(7)
    n = np.array([1e2, 1e3, 1e4, 1e5, 1e6])
    t = 2e-5 * n ** 0.97 * np.exp(rng.normal(0, 0.2, n.size))
    fit = fit_power_law(n, t)
    (b_ref, loga_ref), cov = np.polyfit(np.log(n), np.log(t), 1, cov=True)
    assert fit.b == pytest.approx(b_ref, rel=1e-10)
    assert math.log(fit.a) == pytest.approx(loga_ref, rel=1e-10)
    assert fit.stderr["b"] == pytest.approx(math.sqrt(cov[0, 0]), rel=1e-8)
    assert fit.predict(1e4) == pytest.approx(fit.a * 1e4 ** fit.b)


def test_fit_rejects_bad_input():
    with pytest.raises(ValueError, match="two"):
        fit_power_law([10], [1.0])
    with pytest.raises(ValueError, match="distinct"):
        fit_power_law([10, 10], [1.0, 2.0])
    with pytest.raises(ValueError, match="positive"):
        fit_power_law([10, 100], [1.0, 0.0])


def test_bid_price_error_ignores_legs_below_floor():
    ref = np.array([100.0, 50.0, 0.05, 0.0])
    pi = np.array([101.0, 50.0, 1.0, 3.0])   # legs 3, 4 are below 1e-3 of the largest
    assert bid_price_error(pi, ref) == pytest.approx(0.01)


def test_pareto_front():
    pts = [(1.0, 1e-3), (2.0, 1e-6), (3.0, 1e-5), (0.5, 1e-1), (4.0, 1e-9)]
    assert sorted(pareto_front(pts)) == [0, 1, 3, 4]


def test_case_table_is_skip_free_and_ordered():
    pairs = {("pnlp", "lagrangian"), ("pnlp", "ipopt"), ("dlp", "highs")}
    cs = bcases.suite_cases("quick", pairs, lambda m: m != "ipopt")
    assert cs and all((c.model, c.method) in pairs and c.method != "ipopt" for c in cs if c.kind == "solve")
    assert not any(c.kind == "build" for c in cs)       # its Pyomo methods are not there
    order = [bcases.RUNG_ORDER.index(c.rung) for c in cs]
    assert order == sorted(order)
    assert len({c.id for c in cs}) == len(cs)
    assert max(c.n_products for c in cs) == 100_000     # quick stops at p100k
    full = bcases.suite_cases("full", pairs, lambda m: True)
    assert max(c.n_products for c in full) == 1_000_000


def test_choice_cases_quick_to_c100k_full_to_c1m_not_micro():
    pairs = {("sblp", "lagrangian"), ("sblp", "highs"), ("sblp", "pyomo-highs"), ("dlp", "highs")}
    ids = {s: {c.id for c in bcases.suite_cases(s, pairs, lambda m: True) if c.model == "sblp"}
           for s in ("micro", "quick", "full")}
    assert ids["micro"] == set()                          # the tiny rung has no markets
    assert {"c100k-sblp-lagrangian-tol1e-09", "c100k-sblp-highs", "c1k-sblp-pyomo-highs"} <= ids["quick"]
    assert not any(i.startswith("c1m") for i in ids["quick"])
    assert {"c1m-sblp-lagrangian-tol1e-09", "c1m-sblp-highs", "c10k-sblp-pyomo-highs"} <= ids["full"]
    case = next(c for c in bcases.suite_cases("full", pairs, lambda m: True) if c.id == "c1m-sblp-lagrangian-tol1e-09")
    assert bcases.thresholds(case)["gap"] == 1e-9           # the target: certified gap <= 1e-9
    # independent-demand cases keep their rungs and ids
    quick = bcases.suite_cases("quick", pairs, lambda m: True)
    dlp = {c.id for c in quick if c.model == "dlp" and c.kind == "solve"}
    assert dlp == {f"{r}-dlp-highs" for r in ("p100", "p1k", "p10k", "p100k")}


def test_threshold_parsing():
    assert parse_threshold("10%") == pytest.approx(0.10)
    assert parse_threshold("0.25") == pytest.approx(0.25)
    assert parse_threshold("2x") == pytest.approx(1.0) and parse_threshold("1.1X") == pytest.approx(0.1)
    with pytest.raises(Exception, match="ratio above 1x"):
        parse_threshold("0.9x")
    with pytest.raises(Exception, match="threshold"):
        parse_threshold("fast")


def test_time_ratio_parsing_shares_the_threshold_forms():
    from decomp.benchsuite.compare import parse_ratio
    from decomp.errors import ConfigError

    # the old names read the same growth: --threshold 100% allows what --time-ratio 2x / 100% / 2 allows
    assert parse_ratio("2x") == parse_ratio("100%") == parse_ratio("2") == pytest.approx(1 + parse_threshold("100%"))
    assert parse_ratio("1.1X") == pytest.approx(1.1) and parse_ratio("2.5") == 2.5
    for bad in ("0.9x", "0.5", "-10%", "slow"):
        with pytest.raises(ConfigError):
            parse_ratio(bad)


# -- one micro run -------------------------------------------------------------

REVENUE_PATHS = 20

@pytest.fixture(scope="module")
def micro_run(tmp_path_factory):
    from decomp.benchsuite.runner import run_suite

    out = tmp_path_factory.mktemp("bench-micro")
    # 20 booking paths per case: the revenue pricing is checked on the same run (about 0.1 s a case).
    # Run from another folder with a relative --out (pytest itself runs in the project folder).
    here = os.getcwd()
    os.chdir(out.parent)
    try:
        res = run_suite("micro", out.name, progress=False, revenue_paths=REVENUE_PATHS)
    finally:
        os.chdir(here)
    log = (out / "pytest.log").read_text() if (out / "pytest.log").exists() else ""
    assert res.json_path is not None, log[-3000:]
    return res, out


@pytest.mark.integration
@pytest.mark.solver
def test_micro_run_writes_json_report_and_plots(micro_run):
    res, out = micro_run
    log = (out / "pytest.log").read_text()
    assert res.returncode == 0, "\n".join(l for l in log.splitlines() if l.startswith(("E ", "FAILED", "ERROR")))
    data = json.loads((out / "benchmark.json").read_text())
    assert data["machine_info"]["decomp"]["logical_cpus"] >= 1
    solve = [b for b in data["benchmarks"] if b["extra_info"]["kind"] == "solve"]
    assert solve, "the micro suite ran no solve case"
    for b in solve:
        info = b["extra_info"]
        missing = [f for f in ACCURACY_FIELDS if f not in info]
        assert not missing, f"{info['case']}: missing {missing}"
        assert b["stats"]["rounds"] == 1 and info["rung"] == "tiny"
        assert info["termination"] == "optimal" and not info["accuracy_failures"]
        assert info["objective_error"] is not None and info["bid_price_error"] is not None
    report = (out / "report.md").read_text()
    assert "## Rung tiny" in report and "x ipopt" in report
    pngs = sorted(p.name for p in out.glob("*.png"))
    assert "time_vs_products.png" in pngs and "pareto_tiny.png" in pngs
    for p in out.glob("*.png"):
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not list(out.glob(".bench-run-*")), "temporary run folder left behind"


def _write(path, data):
    path.write_text(json.dumps(data))
    return path


@pytest.mark.integration
@pytest.mark.solver
def test_compare_identical_run_passes(micro_run, tmp_path):
    _, out = micro_run
    assert cli.main(["bench", "compare", str(out), str(out / "benchmark.json")]) == 0
    cmp = compare_runs(out, out)
    assert not cmp.regressions and all(c.ratio == pytest.approx(1.0) for c in cmp.cases)


@pytest.mark.integration
@pytest.mark.solver
def test_compare_flags_2x_slowdown(micro_run, tmp_path):
    _, out = micro_run
    slow = json.loads((out / "benchmark.json").read_text())
    victim = slow["benchmarks"][0]
    for k in ("min", "max", "mean", "median"):
        victim["stats"][k] *= 2.0
    new = _write(tmp_path / "slow.json", slow)
    cmp = compare_runs(out, new, threshold=0.10)
    flagged = [c.case for c in cmp.regressions]
    assert flagged == [victim["extra_info"]["case"]]
    assert "slower" in cmp.regressions[0].flags[0]
    assert cli.main(["bench", "compare", str(out), str(new), "--max-growth", "10%"]) == 1
    # a 2x slow-down passes a 150 % threshold
    assert cli.main(["bench", "compare", str(out), str(new), "--max-growth", "150%"]) == 0


@pytest.mark.integration
@pytest.mark.solver
def test_compare_flags_bid_price_error(micro_run, tmp_path):
    _, out = micro_run
    bad = json.loads((out / "benchmark.json").read_text())
    victim = next(b for b in bad["benchmarks"] if b["extra_info"]["kind"] == "solve")
    victim["extra_info"]["bid_price_error"] = 1e-2
    new = _write(tmp_path / "bad.json", bad)
    cmp = compare_runs(out, new)
    assert [c.case for c in cmp.regressions] == [victim["extra_info"]["case"]]
    assert any("bid_price_error" in f for f in cmp.regressions[0].flags)
    assert cli.main(["bench", "compare", str(out), str(new)]) == 1


def test_missing_and_corrupt_files_give_clear_errors(tmp_path, capsys):
    missing = tmp_path / "nowhere" / "benchmark.json"
    with pytest.raises(BenchmarkFileError, match="nowhere"):
        load_run(missing)
    empty_dir = tmp_path / "empty"
    empty_dir.mkdir()
    with pytest.raises(BenchmarkFileError, match="no benchmark.json"):
        load_run(empty_dir)
    corrupt = tmp_path / "corrupt.json"
    corrupt.write_text('{"benchmarks": [ {"name": ')
    with pytest.raises(BenchmarkFileError, match="not valid JSON"):
        load_run(corrupt)
    wrong = _write(tmp_path / "wrong.json", {"benchmarks": [{"name": "x", "stats": {"min": "fast"},
                                                             "extra_info": {"case": "x"}}]})
    with pytest.raises(BenchmarkFileError, match=r"row 1.*stats.min"):
        load_run(wrong)
    good = _write(tmp_path / "good.json", {"benchmarks": []})
    assert cli.main(["bench", "compare", str(good), str(corrupt)]) == 2
    err = capsys.readouterr().err
    assert "corrupt.json" in err and "not valid JSON" in err
    assert cli.main(["bench", "compare", str(missing), str(good)]) == 2
    assert "nowhere" in capsys.readouterr().err


@pytest.mark.integration
@pytest.mark.solver
def test_micro_run_prices_bid_prices_on_common_paths(micro_run):
    """--revenue-paths: every solve case carries its revenue and its loss against the reference."""
    import decomp
    from decomp.benchsuite.measure import revenue_seed
    from decomp.simulation.run import revenue_for_bid_prices

    _, out = micro_run
    data = json.loads((out / "benchmark.json").read_text())
    rev = data["decomp"]["revenue"]
    assert rev["paths"] == REVENUE_PATHS and set(rev["references"]) >= {"tiny/pnlp", "tiny/dlp"}
    solve = [b["extra_info"] for b in data["benchmarks"] if b["extra_info"]["kind"] == "solve"]
    for info in solve:
        assert info["revenue_paths"] == REVENUE_PATHS and info["revenue_seed"] == revenue_seed("tiny")
        low, high = info["revenue_ci"]
        assert low <= info["revenue_mean"] <= high
        ref = rev["references"][f"tiny/{bcases.REFERENCE_MODEL[info['model']]}"]["mean"]
        assert info["revenue_reference_mean"] == ref
        assert info["revenue_loss_rel"] == pytest.approx((ref - info["revenue_mean"]) / ref, rel=1e-12, abs=1e-15)
        # the paired interval of the loss holds its point estimate (mean of the per-path differences)
        lo, hi = info["revenue_loss_ci"]
        assert lo <= info["revenue_loss_rel"] + 1e-15 and info["revenue_loss_rel"] <= hi + 1e-15
    # Common random numbers (same seed, same paths): the DLP reference's bid prices from HiGHS,
    # priced again here, give exactly the revenue the run recorded for them, and the run's HiGHS
    # case (the same LP solved again) has the same revenue, so a loss of 0.
    inst, _ = bcases.load_instance("tiny")
    res = decomp.solve(inst, model="dlp", method="highs")
    mean, _ = revenue_for_bid_prices(inst, res.bid_price_array, REVENUE_PATHS, revenue_seed("tiny"))
    assert mean == pytest.approx(rev["references"]["tiny/dlp"]["mean"], rel=1e-12)
    highs = next(i for i in solve if i["model"] == "dlp" and i["method"] == "highs")
    assert highs["revenue_loss_rel"] == 0.0 and highs["revenue_loss_ci"] == [0.0, 0.0]
    report = (out / "report.md").read_text()
    assert "| revenue loss |" in report and f"same {REVENUE_PATHS} seeded booking" in report


class _Row(dict):
    def time(self, stat):
        return self["t"]


def test_pareto_panels_share_colours_and_keep_the_dlp_off_the_pnlp_front():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    from decomp.benchsuite import plots

    rows = [_Row(model="pnlp", label="ipopt", t=2.0, gap=1e-9, bid_price_error=1e-8, knobs={"tol": 1e-9}),
            _Row(model="pnlp", label="lagrangian-newton", t=1.0, gap=1e-7, bid_price_error=1e-6, knobs={"tol": 1e-6}),
            _Row(model="dlp", label="highs", t=0.1, gap=0.0, knobs={})]
    colors = plots.method_colors(rows)
    fig, (a1, a2) = plt.subplots(1, 2)
    plots._scatter(a1, [r for r in rows if r["model"] == "pnlp"], "bid_price_error", "min", "e", colors)
    plots._scatter(a2, rows, "gap", "min", "g", colors, on_front=lambda r: r["model"] != "dlp")
    def colour_of(ax, label):
        return next(l.get_color() for l in ax.lines if l.get_label() == label)
    for label in ("pnlp ipopt", "pnlp lagrangian-newton"):
        assert colour_of(a1, label) == colour_of(a2, label)
    front = next(l for l in a2.lines if l.get_label() == "Pareto front")
    # the DLP (fastest, gap 0 to its own LP) would dominate everything; it is not on the front
    assert 0.1 not in list(front.get_xdata()) and sorted(front.get_xdata()) == [1.0, 2.0]
    plt.close(fig)
