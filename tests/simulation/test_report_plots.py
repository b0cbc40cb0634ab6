"""Readable plots: the simulation's revenue panels wrap at two a row and name the revenue unit."""

import matplotlib.image as mpimg

from decomp.simulation import report


def _summary(n_fe=3, every=(7.0, 14.0)):
    scen = [{"forecast_error_label": f"bias {b}", "policies": [{"revenue": {"mean": 100.0 + r, "halfwidth": 1.0}}]}
            for b in range(n_fe) for r in range(len(every))]
    return {"config": {"policies": [{"label": "pnlp"}], "reoptimize_every": list(every),
                       "forecast_errors": [{"bias": b / 10, "sigma_factor": 1.0, "spread": 0.0} for b in range(n_fe)]},
            "scenarios": scen, "instance": {"name": "tiny"}, "paths": 10}


def test_revenue_vs_reoptimization_is_readable(tmp_path, monkeypatch):
    labels = []
    import matplotlib.axes

    orig = matplotlib.axes.Axes.set_ylabel
    monkeypatch.setattr(matplotlib.axes.Axes, "set_ylabel",
                        lambda self, text, *a, **k: (labels.append(text), orig(self, text, *a, **k))[1])
    written = report.plots(_summary(), tmp_path)
    png = next(p for p in written if p.name == "revenue_vs_reoptimization.png")
    h, w = mpimg.imread(png).shape[:2]
    # three panels: two a row, two rows (not one strip 1815 x 462 pixels)
    assert w / h < 2 and h > 800, (w, h)
    assert labels and all("fare units" in t for t in labels)
