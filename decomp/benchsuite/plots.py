"""PNG plots of a benchmark run (matplotlib, Agg backend; files written atomically).

* ``time_vs_products.png``: solve time against products, log-log, one line per
  model and method at its headline knob (tightest tolerance; K nearest 16),
  with the fitted power-law slope b (t = a n^b, :mod:`.fit`) in the legend.
* ``pareto_<rung>.png``: per rung, time against accuracy for every method and
  knob: left, the largest relative bid-price error against the exact PNLP
  (PNLP and PWL cases); right, the certified gap (every solve case). The
  Pareto front (no other case both faster and more accurate) is drawn.
* ``lagrangian_gap.png``: certified gap against iteration for the Lagrangian
  cases on the largest rung they ran on.
"""

from __future__ import annotations

import math
import pathlib

from .. import atomic
from .cases import RUNG_ORDER
from .fit import fit_power_law

#: Values of exactly zero are drawn at this floor on log axes.
LOG_FLOOR = 1e-16
#: Slopes are fitted over rungs from this size up (fixed overheads dominate below).
FIT_MIN_N = 1000


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _save(fig, path: pathlib.Path) -> pathlib.Path:
    with atomic.atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110, bbox_inches="tight")
    return path


def _knob_key(row):
    k = row.get("knobs") or {}
    tol = k.get("tol", 0.0)
    seg = k.get("segments")
    return (abs(math.log(seg / 16.0)) if seg else 0.0, tol)


def headline_series(run, stat: str = "min") -> dict:
    """(model, label) -> sorted list of (n_products, time, row) at the headline knob."""
    groups = {}
    for r in run.rows:
        if r.get("kind") not in ("solve", "build", "tables") or (r.get("demand") or "normal") != "normal":
            continue
        groups.setdefault((r.get("model"), r.get("label")), []).append(r)
    out = {}
    for key, rows in groups.items():
        best = min((_knob_key(r) for r in rows))
        pts = sorted((r.get("n_products"), r.time(stat), r) for r in rows if _knob_key(r) == best)
        # one point per size (the first in knob order)
        seen, uniq = set(), []
        for n, t, r in pts:
            if n not in seen:
                seen.add(n)
                uniq.append((n, t, r))
        out[key] = uniq
    return out


def slopes(run, stat: str = "min", min_n: int = 0) -> dict:
    """(model, label) -> PowerLawFit over the headline series (sizes >= min_n), where >= 2 sizes."""
    out = {}
    for key, pts in headline_series(run, stat).items():
        pts = [p for p in pts if p[0] >= min_n and p[1] > 0]
        if len({p[0] for p in pts}) >= 2:
            out[key] = fit_power_law([p[0] for p in pts], [p[1] for p in pts])
    return out


def knob_parts(row, limits: bool = False) -> list:
    """The accuracy knobs of a case as short texts (K, tol; with ``limits`` also time and iteration limits)."""
    k = row.get("knobs") or {}
    parts = []
    if "segments" in k:
        parts.append(f"K={k['segments']}")
    if "tol" in k:
        parts.append(f"tol={k['tol']:.0e}")
    if "periods" in k:
        parts.append(f"T={k['periods']}")
    if limits:
        parts += [f"{name}={k[name]:g}" for name in ("time_limit", "iteration_limit") if k.get(name) is not None]
    return parts


def _knob_text(row) -> str:
    return " ".join(knob_parts(row))


def plot_time_vs_products(run, path, stat="min"):
    plt = _plt()
    series = headline_series(run, stat)
    fig, ax = plt.subplots(figsize=(9, 6))
    colors = plt.get_cmap("tab20").colors
    markers = {"pnlp": "o", "dlp": "s", "pwl": "^"}
    for i, ((model, label), pts) in enumerate(sorted(series.items(), key=lambda kv: (str(kv[0][0]), str(kv[0][1])))):
        if not pts:
            continue
        n = [p[0] for p in pts]
        t = [p[1] for p in pts]
        name = f"{model} {label} {_knob_text(pts[0][2])}".strip()
        big = [(a, b) for a, b in zip(n, t) if a >= FIT_MIN_N]
        if len({a for a, _ in big}) >= 2:
            fit = fit_power_law([a for a, _ in big], [b for _, b in big])
            se = fit.stderr.get("b")
            name += f": b={fit.b:.2f}" + (f"±{se:.2f}" if se is not None else "")
        style = "--" if label and str(label).endswith("build") else "-"
        ax.plot(n, t, style, marker=markers.get(model, "o"), color=colors[(2 * i) % 20 if i < 10 else (2 * i + 1) % 20],
                label=name)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("products")
    ax.set_ylabel(f"time per call, s ({stat} of rounds)")
    ax.set_title(f"Time against network size; b: fitted slope of t = a n^b over rungs >= {FIT_MIN_N:,} products")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=7, loc="upper left")
    try:
        return _save(fig, pathlib.Path(path))
    finally:
        plt.close(fig)


def pareto_front(points):
    """Indices of points (time, error) not dominated by another (faster and at least as accurate)."""
    order = sorted(range(len(points)), key=lambda i: (points[i][0], points[i][1]))
    front, best = [], math.inf
    for i in order:
        if points[i][1] < best:
            front.append(i)
            best = points[i][1]
    return front


def _base_label(row) -> str:
    """A case's method label without its knobs: one colour per method across the panels."""
    return f"{row.get('model')} {row.get('label')}".strip()


def method_colors(rows) -> dict:
    """Base label -> colour, fixed for a rung so that both Pareto panels agree."""
    import matplotlib.pyplot as plt

    cycle = plt.get_cmap("tab10").colors
    names = sorted({_base_label(r) for r in rows})
    return {name: cycle[i % len(cycle)] for i, name in enumerate(names)}


def _scatter(ax, rows, field, stat, title, colors, on_front=lambda r: True):
    """Time against ``field``; the Pareto front is drawn over the rows ``on_front`` accepts."""
    pts, kept = [], []
    for r in rows:
        v = r.get(field)
        if v is None:
            continue
        pts.append((r.time(stat), max(float(v), LOG_FLOOR)))
        kept.append(r)
    if not pts:
        ax.set_visible(False)
        return
    seen = set()
    for (t, e), r in zip(pts, kept):
        base = _base_label(r)
        front_case = on_front(r)
        label = None
        if base not in seen:
            seen.add(base)
            label = base if front_case else f"{base} (not on the front)"
        ax.plot([t], [e], "o" if front_case else "x", color=colors[base], label=label)
        ax.annotate(_knob_text(r), (t, e), fontsize=6, xytext=(3, 3), textcoords="offset points")
    idx = [i for i, r in enumerate(kept) if on_front(r)]
    front = [idx[i] for i in pareto_front([pts[i] for i in idx])]
    fx = [pts[i][0] for i in front]
    fy = [pts[i][1] for i in front]
    if fx:
        ax.step(fx, fy, where="post", color="k", lw=1, alpha=0.6, label="Pareto front")
    ax.set_xscale("log")
    ax.set_yscale("log")
    _no_minor_labels(ax)
    ax.set_xlabel(f"time, s ({stat} of rounds)")
    ax.set_title(title, fontsize=9)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=6)


def _no_minor_labels(ax):
    from matplotlib.ticker import NullFormatter

    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.yaxis.set_minor_formatter(NullFormatter())


def plot_pareto(run, rung, path, stat="min"):
    plt = _plt()
    rows = [r for r in run.rows if r.get("rung") == rung and r.get("kind") == "solve"
            and (r.get("demand") or "normal") == "normal"]
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(12, 5))
    colors = method_colors(rows)
    _scatter(ax1, [r for r in rows if r.get("model") in ("pnlp", "pwl")], "bid_price_error", stat,
             "largest relative bid-price error vs exact PNLP", colors)
    ax1.set_ylabel("error (log)")
    # a DLP's gap is to its own LP, not to the PNLP: drawn (x), but kept off the PNLP front
    _scatter(ax2, rows, "gap", stat, "certified relative gap (front: PNLP and PWL cases; DLP gap is to its own LP)",
             colors, on_front=lambda r: r.get("model") != "dlp")
    n = rows[0].get("n_products") if rows else "?"
    fig.suptitle(f"Time against accuracy, rung {rung} ({n} products); zeros drawn at {LOG_FLOOR:g}")
    try:
        return _save(fig, pathlib.Path(path))
    finally:
        plt.close(fig)


def plot_lagrangian_gap(run, path):
    """Each dual method on the largest rung it ran (tightest tol), and Newton on every rung (dashed)."""
    rows = [r for r in run.rows if r.get("method") == "lagrangian" and r.get("history")
            and (r.get("demand") or "normal") == "normal"]
    if not rows:
        return None
    order = {r: i for i, r in enumerate(RUNG_ORDER)}

    def tol(r):
        return (r.get("knobs") or {}).get("tol", 1.0)

    chosen = {}
    for r in rows:
        key = r.get("label")
        cur = chosen.get(key)
        if cur is None or (order.get(r.get("rung"), -1), -tol(r)) > (order.get(cur.get("rung"), -1), -tol(cur)):
            chosen[key] = r
    plt = _plt()
    fig, ax = plt.subplots(figsize=(8, 5))

    def draw(r, style, lw, label):
        h = [x for x in r.get("history") if x.get("gap") is not None]
        if h:
            ax.plot([x["iteration"] for x in h], [max(float(x["gap"]), LOG_FLOOR) for x in h],
                    style, marker=".", lw=lw, label=label)

    for label, r in sorted(chosen.items()):
        draw(r, "-", 1.8, f"{label} {_knob_text(r)}, {r.get('rung')} ({r.get('n_products')} products)")
    newton = {}
    for r in rows:
        top = chosen.get("lagrangian-newton")
        if r.get("label") == "lagrangian-newton" and top is not None and r.get("rung") != top.get("rung"):
            if r.get("rung") not in newton or tol(r) < tol(newton[r.get("rung")]):
                newton[r.get("rung")] = r
    for rung in sorted(newton, key=lambda x: order.get(x, -1)):
        draw(newton[rung], "--", 0.9, f"newton {_knob_text(newton[rung])}, {rung}")
    ax.set_yscale("log")
    ax.set_xscale("symlog", linthresh=10)
    ax.set_xlabel("iteration (linear to 10, log beyond)")
    ax.set_ylabel("certified relative gap")
    ax.set_title("Lagrangian dual: certified gap against iteration")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=7)
    try:
        return _save(fig, pathlib.Path(path))
    finally:
        plt.close(fig)


def make_plots(run, out, stat="min") -> list:
    """Write every plot of ``run`` into ``out``; returns the paths written."""
    out = pathlib.Path(out)
    made = [plot_time_vs_products(run, out / "time_vs_products.png", stat)]
    rungs = [r for r in RUNG_ORDER if any(x.get("rung") == r and x.get("kind") == "solve" for x in run.rows)]
    for rung in rungs:
        made.append(plot_pareto(run, rung, out / f"pareto_{rung}.png", stat))
    g = plot_lagrangian_gap(run, out / "lagrangian_gap.png")
    if g is not None:
        made.append(g)
    return made
