"""decomp size: fitting benchmark times and projecting the nightly run, checked by hand."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from decomp.errors import ConfigError, InstanceError
from decomp.production import sizing


def _case(n, t, tol=1e-9, method="lagrangian", model="pnlp", label=None, kind="solve", failures=(),
          termination="optimal"):
    return {"name": f"test_solve[{model}-{method}-{n}-{tol:g}]",
            "extra_info": {"kind": kind, "model": model, "method": method,
                           "label": label or (f"{method}-newton" if method == "lagrangian" else method),
                           "knobs": {"tol": tol}, "n_products": n, "accuracy_failures": list(failures),
                           "termination": termination},
            "stats": {"median": t, "mean": t * 1.1, "min": t * 0.9}}


def _write(tmp_path, cases, name="benchmark.json"):
    path = tmp_path / name
    path.write_text(json.dumps({"machine_info": {}, "benchmarks": cases}))
    return path


@pytest.fixture
def exact(tmp_path):
    """t = 2e-6 * n exactly at tol 1e-9, and t = 1e-6 * n at the looser tol 1e-6."""
    sizes = (1_000, 10_000, 100_000, 1_000_000)
    cases = [_case(n, 2e-6 * n) for n in sizes[:-1]] + [_case(n, 1e-6 * n, tol=1e-6) for n in sizes]
    # converged, but missed an accuracy check: its time is kept
    cases.append(_case(sizes[-1], 2e-6 * sizes[-1], failures=["bid-price error 1e-3 > 1e-5"]))
    cases.append(_case(10_000, 99.0, kind="build"))                         # not a solve: ignored
    cases.append(_case(10_000, 99.0, termination="time_limit"))             # stopped by a limit: ignored
    return _write(tmp_path, cases)


def test_fit_recovers_exact_power_law(exact):
    cases = sizing.load_bench(exact)
    assert len(cases) == 8
    groups = sizing.select(cases, "pnlp", "lagrangian")
    assert sorted(groups) == [1e-9, 1e-6]
    tm = sizing.TimeModel.fit([c.n_products for c in groups[1e-9]], [c.seconds for c in groups[1e-9]])
    assert tm.a == pytest.approx(2e-6, rel=1e-9) and tm.b == pytest.approx(1.0, abs=1e-12)
    assert tm.predict(100_000) == pytest.approx(0.2, rel=1e-9)
    assert sum(c.accuracy_failures for c in groups[1e-9]) == 1


def test_projection_by_hand(exact):
    cases = sizing.load_bench(exact)
    s = sizing.size_run(cases, model="pnlp", method="lagrangian", tol=1e-9,
                        task_products=sizing.task_sizes(365, 100_000), workers=2, window=60.0, overhead=0.1)
    r = s["result"]
    # By hand: 365 tasks on 2 workers = ceil(365/2) = 183 rounds of (0.2 s solve + 0.1 s overhead) = 54.9 s.
    assert r["wall_seconds"] == pytest.approx(54.9, rel=1e-9)
    assert r["fits"] and r["margin_seconds"] == pytest.approx(5.1, rel=1e-6)
    # With a 30 s window: 3 workers give 122 * 0.3 = 36.6 s (too long), 4 give 92 * 0.3 = 27.6 s.
    s30 = sizing.size_run(cases, model="pnlp", method="lagrangian", tol=1e-9,
                          task_products=sizing.task_sizes(365, 100_000), workers=2, window=30.0, overhead=0.1)
    assert not s30["result"]["fits"] and s30["result"]["smallest_workers"] == 4
    # The looser tolerance (t = 1e-6 n): 183 * (0.1 + 0.1) = 36.6 s, fewest workers 3 (122 * 0.2 = 24.4 s).
    (loose,) = s30["looser"]
    assert loose["tol"] == 1e-6 and loose["wall_seconds"] == pytest.approx(36.6, rel=1e-9)
    assert loose["smallest_workers"] == 3
    # Exact data: the prediction interval collapses onto the fit.
    assert r["wall_low"] == pytest.approx(r["wall_seconds"]) and r["wall_high"] == pytest.approx(r["wall_seconds"])
    # networks multiply the tasks; start-up is added once: 2 x 365 tasks, 365 rounds of 0.3 s + 5 s
    s2 = sizing.size_run(cases, model="pnlp", method="lagrangian", tol=1e-9,
                         task_products=sizing.task_sizes(365, 100_000, networks=2), workers=2, window=600.0,
                         overhead=0.1, startup=5.0)
    assert s2["result"]["wall_seconds"] == pytest.approx(365 * 0.3 + 5.0, rel=1e-9)


def test_lpt_packing():
    # Graham (1969), the tight example of the LPT bound 4/3 - 1/(3m) for m = 2 machines:
    # jobs 3, 3, 2, 2, 2 give an LPT makespan of 7 (the optimum is 6: 3+3 | 2+2+2).
    assert sizing.lpt_makespan([2, 3, 2, 3, 2], 2) == 7
    assert sizing.lpt_makespan([5, 1, 1, 1, 1, 1], 2) == 5       # the long job alone; the rest fill the other
    assert sizing.lpt_makespan([1.0] * 7, 3) == 3                   # equal tasks: ceil(7/3) rounds
    assert sizing.lpt_makespan([4, 3], 5) == 4                      # more workers than tasks
    with pytest.raises(ConfigError):
        sizing.lpt_makespan([1], 0)


def test_uncertainty_against_scipy(tmp_path):
    rng = np.random.default_rng(7)
    n = np.array([1e3, 3e3, 1e4, 3e4, 1e5, 3e5])
    t = 3e-6 * n ** 1.1 * np.exp(rng.normal(0, 0.1, n.size))
    cases = sizing.load_bench(_write(tmp_path, [_case(int(a), float(b)) for a, b in zip(n, t)]))
    tm = sizing.TimeModel.fit([c.n_products for c in cases], [c.seconds for c in cases])
    # Reference: scipy.stats.linregress on (log n, log t) gives the same slope and its standard error.
    from scipy import stats

    lr = stats.linregress(np.log(n), np.log(t))
    assert tm.b == pytest.approx(lr.slope, rel=1e-10)
    assert tm.b_stderr == pytest.approx(lr.stderr, rel=1e-8)
    # The textbook 95 % prediction interval of simple regression at x0 = log 1e5:
    # yhat +- t_{0.975, n-2} * s * sqrt(1 + 1/n + (x0 - xbar)^2 / Sxx).
    x, y = np.log(n), np.log(t)
    s = np.sqrt(np.sum((y - (lr.intercept + lr.slope * x)) ** 2) / (n.size - 2))
    x0 = math.log(1e5)
    half = stats.t.ppf(0.975, n.size - 2) * s * math.sqrt(1 + 1 / n.size + (x0 - x.mean()) ** 2
                                                          / np.sum((x - x.mean()) ** 2))
    lo, hi = tm.interval(1e5)
    yhat = lr.intercept + lr.slope * x0
    assert math.log(lo) == pytest.approx(yhat - half, rel=1e-9)
    assert math.log(hi) == pytest.approx(yhat + half, rel=1e-9)


def test_instances_folder_and_run_summary(tmp_path):
    from decomp.generator import generate
    from decomp.io import write_instance

    write_instance(generate(120, seed=1), tmp_path / "nets" / "a", format="csv")
    write_instance(generate(80, seed=2), tmp_path / "nets" / "b", format="parquet")
    sizes = sizing.task_sizes(3, instances=tmp_path / "nets")
    assert sorted(sizes.tolist()) == [80.0] * 3 + [120.0] * 3
    summ = tmp_path / "summary.json"
    summ.write_text(json.dumps({"totals": {"overhead_per_task_seconds": 0.25, "cluster_start_seconds": 3.0}}))
    assert sizing.read_run_overhead(summ) == (0.25, 3.0)
    summ.write_text(json.dumps({"totals": {"overhead_per_task_seconds": None}}))
    with pytest.raises(InstanceError, match="no measured overhead"):
        sizing.read_run_overhead(summ)


def test_bad_inputs(tmp_path, exact):
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    with pytest.raises(InstanceError, match="bad.json"):
        sizing.load_bench(bad)
    with pytest.raises(ConfigError, match="no benchmark cases for model 'dlp'"):
        sizing.size_run(sizing.load_bench(exact), model="dlp", method="highs", tol=1e-9,
                        task_products=[10.0], workers=1, window=10.0)
    with pytest.raises(ConfigError, match="tolerances there"):
        sizing.size_run(sizing.load_bench(exact), model="pnlp", method="lagrangian", tol=1e-4,
                        task_products=[10.0], workers=1, window=10.0)


def test_size_command(exact, tmp_path, capsys):
    from decomp.cli import main

    out = tmp_path / "sz"
    rc = main(["size", "--bench", str(exact.parent), "--dates", "365", "--products", "100000",
               "--method", "lagrangian", "--model", "pnlp", "--tol", "1e-9", "--workers", "2",
               "--window", "1m", "--overhead", "0.1", "--out", str(out)])
    text = capsys.readouterr().out
    assert rc == 0 and "FITS" in text and "54.9s" in text and "1e-06" in text
    data = json.loads((out / "sizing.json").read_text())
    assert data["result"]["wall_seconds"] == pytest.approx(54.9)
    assert (out / "sizing.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    rc = main(["size", "--bench", str(exact), "--products", "100000", "--workers", "2", "--window", "30s",
               "--overhead", "0.1", "--out", str(out)])
    assert rc == 1 and "DOES NOT FIT" in capsys.readouterr().out
    assert main(["size", "--bench", str(tmp_path / "nothing.json"), "--products", "10", "--window", "1h",
                 "--out", str(out)]) == 2


def test_calibration_from_a_pilot_run(exact, tmp_path):
    # A pilot run whose solves took twice the benchmark fit (0.4 s at 100,000 products; by hand
    # the fit gives 0.2 s): the fit is scaled by 2, so 183 rounds of (0.4 + 0.1) s = 91.5 s.
    summ = tmp_path / "pilot.json"
    summ.write_text(json.dumps({"totals": {"overhead_per_task_seconds": 0.1, "cluster_start_seconds": 0.0},
                                "tasks": [{"task_status": "ok", "skipped": False, "n_products": 100_000,
                                           "seconds_solve": s} for s in (0.38, 0.4, 0.42)]
                                + [{"task_status": "failed", "n_products": 100_000, "seconds_solve": 9.0}]}))
    pairs = sizing.read_run_solves(summ)
    assert len(pairs) == 3
    # a summary.json of a run written before the one result schema names the field "status"
    old = tmp_path / "old.json"
    old.write_text(summ.read_text().replace('"task_status"', '"status"'))
    assert sizing.read_run_solves(old) == pairs
    s = sizing.size_run(sizing.load_bench(exact), model="pnlp", method="lagrangian", tol=1e-9,
                        task_products=sizing.task_sizes(365, 100_000), workers=2, window=60.0, overhead=0.1,
                        calibration=pairs)
    assert s["calibration_factor"] == pytest.approx(2.0, rel=1e-9)
    assert s["result"]["wall_seconds"] == pytest.approx(91.5, rel=1e-9)
    assert s["looser"][0]["wall_seconds"] == pytest.approx(183 * (0.2 + 0.1), rel=1e-9)   # 1e-6 n, scaled by 2


# -- revenue loss against tolerance (decomp size --revenue-loss) ---------------------------

def _priced(n, t, tol, loss, paths=200, halfwidth=1e-4):
    c = _case(n, t, tol=tol)
    ci = None if halfwidth is None else [loss - halfwidth, loss + halfwidth]
    c["extra_info"].update(revenue_loss_rel=loss, revenue_paths=paths, revenue_loss_ci=ci)
    return c


@pytest.fixture
def priced(tmp_path):
    """Times t = a_tol * n (a = 2e-6, 1e-6, 5e-7 at tol 1e-9, 1e-6, 1e-4); revenue losses known by hand.

    At the largest rung (100,000 products): loss 0 at 1e-9, 2e-4 at 1e-6, 3e-3 at 1e-4. At 10,000
    products the 1e-4 loss is only 5e-4: the answer must come from the largest rung, not this one.
    Every paired 95 % interval is the loss +- 1e-4 (+- 0 at 1e-9: the same bid prices as the reference).
    """
    cases = []
    for tol, a, losses in ((1e-9, 2e-6, (0.0, 0.0, 0.0)), (1e-6, 1e-6, (1e-5, -1e-4, 2e-4)),
                           (1e-4, 5e-7, (1e-4, 5e-4, 3e-3))):
        for n, loss in zip((1_000, 10_000, 100_000), losses):
            cases.append(_priced(n, a * n, tol, loss, halfwidth=0.0 if tol == 1e-9 else 1e-4))
    cases.append(_case(100_000, 99.0, tol=1e-4, termination="time_limit"))   # stopped by a limit: ignored
    return _write(tmp_path, cases)


def test_loosest_tolerance_within_revenue_loss_by_hand(priced):
    cases = sizing.load_bench(priced)
    kw = dict(model="pnlp", method="lagrangian", tol=1e-9, task_products=sizing.task_sizes(365, 100_000),
              workers=2, window=600.0)
    rv = sizing.size_run(cases, revenue_loss=1e-3, **kw)["revenue"]
    # By hand: at 100,000 products the losses are 0, 2e-4, 3e-3; within 1e-3: tol 1e-9 and 1e-6;
    # the loosest is 1e-6. Time saved per task: 2e-6 * 1e5 - 1e-6 * 1e5 = 0.1 s (measured at that
    # rung, and projected from the exact fits at 100,000 products).
    assert rv["rung_products"] == 100_000 and rv["loosest_tol"] == 1e-6
    assert rv["revenue_loss_rel"] == pytest.approx(2e-4)
    assert [r["within"] for r in rv["by_tol"]] == [True, True, False]
    assert rv["seconds_saved_measured"] == pytest.approx(0.1, rel=1e-9)
    assert rv["seconds_saved_per_task"] == pytest.approx(0.1, rel=1e-9)
    assert "upper end" in rv["estimate"]
    # the interval rule: within 2.5e-4 the point estimate of tol 1e-6 (2e-4) is, its interval
    # (up to 3e-4) is not, so tol 1e-6 is not recommended
    rv = sizing.size_run(cases, revenue_loss=2.5e-4, **kw)["revenue"]
    assert rv["loosest_tol"] == 1e-9 and rv["by_tol"][1]["why"] == "interval reaches past the limit"
    # within 1e-2 every tolerance qualifies: 1e-4, saving 0.2 - 0.05 = 0.15 s
    rv = sizing.size_run(cases, revenue_loss=1e-2, **kw)["revenue"]
    assert rv["loosest_tol"] == 1e-4 and rv["seconds_saved_per_task"] == pytest.approx(0.15, rel=1e-9)
    # within 1e-5 only the tight one (loss 0): nothing saved
    rv = sizing.size_run(cases, revenue_loss=1e-5, **kw)["revenue"]
    assert rv["loosest_tol"] == 1e-9 and rv["seconds_saved_measured"] == 0.0
    with pytest.raises(ConfigError, match="revenue-loss"):
        sizing.size_run(cases, revenue_loss=-0.1, **kw)


def test_revenue_loss_needs_revenue_data(exact, tmp_path, capsys):
    from decomp.cli import main

    with pytest.raises(ConfigError, match=r"decomp bench --revenue-paths N"):
        sizing.size_run(sizing.load_bench(exact), model="pnlp", method="lagrangian", tol=1e-9,
                        task_products=[100_000.0], workers=1, window=60.0, revenue_loss=1e-3)
    rc = main(["size", "--bench", str(exact), "--products", "100000", "--window", "1h", "--revenue-loss", "1e-3",
               "--out", str(tmp_path / "sz")])
    assert rc == 2 and "--revenue-paths" in capsys.readouterr().err
    bad = tmp_path / "badrev.json"
    c = _priced(1000, 0.01, 1e-9, "lots", halfwidth=None)
    bad.write_text(json.dumps({"benchmarks": [c]}))
    with pytest.raises(InstanceError, match="revenue_loss_rel"):
        sizing.load_bench(bad)


def test_size_command_revenue_loss(priced, tmp_path, capsys):
    from decomp.cli import main

    out = tmp_path / "sz"
    rc = main(["size", "--bench", str(priced), "--products", "100000", "--window", "10m", "--tol", "1e-9",
               "--revenue-loss", "0.001", "--out", str(out)])
    text = capsys.readouterr().out
    assert rc == 0 and "loosest tolerance within a revenue loss of 0.001: 1e-06" in text
    assert "NOT within" in text and "95% upper end +3.000e-04" in text
    data = json.loads((out / "sizing.json").read_text())
    assert data["revenue"]["loosest_tol"] == 1e-6
    assert data["revenue"]["seconds_saved_per_task"] == pytest.approx(0.1, rel=1e-9)


def test_fits_need_three_sizes_and_start_at_1000_products(tmp_path, capsys):
    """Two sizes fit any power law exactly (no residual, no interval): refused, with exit 2 on the command line."""
    from decomp.cli import main

    two = _write(tmp_path, [_case(n, 1e-6 * n) for n in (10_000, 100_000)])
    with pytest.raises(ConfigError, match="on 2 size"):
        sizing.size_run(sizing.load_bench(two), model="pnlp", method="lagrangian", tol=1e-9,
                        task_products=[1e5], workers=1, window=60.0)
    one = tmp_path / "one.json"
    one.write_text(json.dumps({"benchmarks": [_case(100_000, 0.1)]}))
    for bench in (two, one):
        rc = main(["size", "--bench", str(bench), "--products", "100000", "--window", "1h",
                   "--out", str(tmp_path / "sz")])
        assert rc == 2 and "at least 3" in capsys.readouterr().err
    # by default the fit starts at 1,000 products: a 100-product case does not make the third size
    small = tmp_path / "small.json"
    small.write_text(json.dumps({"benchmarks": [_case(n, 1e-6 * n) for n in (100, 10_000, 100_000)]}))
    assert main(["size", "--bench", str(small), "--products", "100000", "--window", "1h",
                 "--out", str(tmp_path / "sz")]) == 2
    capsys.readouterr()
    assert main(["size", "--bench", str(small), "--products", "100000", "--window", "1h", "--fit-min-products",
                 "0", "--dates", "2027-01-01:2027-01-10", "--workers", "2", "--json",
                 "--out", str(tmp_path / "sz")]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["tasks"] == 10 and data["result"]["fit"]["n_points"] == 3


# -- a calibration says how far it reaches, and refuses a pilot too small to tell ---------------

def _pilot(tmp_path, n, seconds, name="pilot.json"):
    path = tmp_path / name
    path.write_text(json.dumps({"totals": {"overhead_per_task_seconds": 0.1, "cluster_start_seconds": 0.0},
                                "tasks": [{"task_status": "ok", "skipped": False, "n_products": n,
                                           "seconds_solve": s} for s in seconds]}))
    return path


def test_calibration_reach_and_a_pilot_too_small(exact, tmp_path, capsys):
    from decomp.cli import main

    cases = sizing.load_bench(exact)
    kw = dict(model="pnlp", method="lagrangian", tol=1e-9, task_products=sizing.task_sizes(365, 100_000),
              workers=2, window=60.0, overhead=0.1)
    # 100 products, below the fit's smallest case (1,000): its ratio to the fit says little, refused
    with pytest.raises(ConfigError, match="pilot is too small.*100 products.*1,000"):
        sizing.size_run(cases, calibration=[(100.0, 0.0062)], **kw)
    small = _pilot(tmp_path, 100, [0.0062])
    argv = ["size", "--bench", str(exact), "--products", "100000", "--workers", "2", "--window", "1m",
            "--run-summary", str(small), "--calibrate", "--out", str(tmp_path / "sz")]
    assert main(argv) == 2 and "pilot is too small" in capsys.readouterr().err
    # a pilot at 1,000 products taking 2x the fit (by hand: 2e-6 * 1000 = 2 ms): factor 2, carried 100x
    s = sizing.size_run(cases, calibration=[(1000.0, 0.004)], **kw)
    cal = s["calibration"]
    assert cal["factor"] == pytest.approx(2.0) and cal["reach"] == pytest.approx(100.0)
    assert "100x beyond the pilot" in cal["warning"]
    argv[argv.index(str(small))] = str(_pilot(tmp_path, 1000, [0.004], "p1k.json"))
    assert main(argv) == 1                            # 183 rounds of 0.5 s do not fit a minute
    out, err = capsys.readouterr()
    assert "applied at 100,000 products, 100x the pilot's largest task" in out and "100x beyond" in err
    # at the production size itself there is nothing to warn about
    s = sizing.size_run(cases, calibration=[(100_000.0, 0.4)], **kw)
    assert s["calibration"]["reach"] == 1.0 and s["calibration"]["warning"] is None
