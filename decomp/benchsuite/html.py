"""The benchmark history as one static HTML page: ``decomp bench history --html OUT``.

The page opens from a file, with no server and no network: the charts are SVG drawn by
matplotlib and written into the page, the page is laid out by a Jinja2 template (escaping
every text from the store), and a few lines of inline JavaScript filter the cases. Nothing
is loaded from anywhere else.

It shows, per demand family and per case, the solve time (the ``stat`` of the timed rounds)
and the accuracy figures (certified gap, bid-price and objective errors) across the runs of the
store. The x axis is the runs in the order they were added; a run whose versions (decomp, its
commit, Python, numpy, scipy, Pyomo, HiGHS, Ipopt) differ from the run before is marked on
the axis with what changed. A point is flagged as a regression by the rules of
``decomp bench compare`` (:func:`.compare.case_flags`) against the previous run that holds the
same case; the flagged points are listed at the top and drawn in red.
"""

from __future__ import annotations

import dataclasses
import io
import math
import re

from .compare import case_flags
from .history import DEFAULT_DEMAND, VERSION_COLUMNS

#: Drawn values below this are drawn at it on the logarithmic accuracy axis (0 has no logarithm).
LOG_FLOOR = 1e-16
#: Families in this order first (the ladder's own, then the integrator's families); others after, by name.
FAMILY_ORDER = (DEFAULT_DEMAND, "lowcv", "gamma", "poisson", "negbin", "mix")
#: Kinds of run in the order the page shows them, with what their cases are called there.
KIND_ORDER = ("bench", "baseline-check")
KIND_TITLES = {"bench": "benchmark cases (decomp bench)", "baseline-check": "baseline cases (decomp baseline check)"}
_ACCURACY_LABELS = {"gap": "certified gap", "bid_price_error": "bid-price error",
                    "objective_error": "objective error", "max_violation_rel": "capacity violation"}
#: A baseline check measures bid prices and objective against the recorded answer, not a reference solve.
_CHECK_LABELS = {**_ACCURACY_LABELS, "bid_price_error": "bid-price change vs baseline",
                 "objective_error": "objective change vs baseline"}
_VERSION_LABELS = {"decomp": "decomp", "git_commit": "commit", "python": "Python", "numpy": "numpy",
                   "scipy": "scipy", "pyomo": "Pyomo", "highs": "HiGHS", "ipopt": "Ipopt"}


@dataclasses.dataclass(frozen=True)
class Point:
    """One case in one run, with the reasons it regressed against the previous run holding the case."""

    run_id: int
    x: int                      # position of the run on the axis
    row: object                 # results.Row
    flags: tuple
    against: int | None         # run id it was compared with


@dataclasses.dataclass(frozen=True)
class Series:
    """One case across the runs (a case name within one kind of run: bench or baseline check)."""

    case: str
    kind: str
    demand: str
    points: tuple

    @property
    def anchor(self) -> str:
        return "case-" + re.sub(r"[^A-Za-z0-9_-]+", "_", f"{self.kind}-{self.case}")

    @property
    def n_regressions(self) -> int:
        return sum(1 for p in self.points if p.flags)


def build(runs, points, threshold: float = 0.10, stat: str = "min", accuracy_floor: float = 1e-9) -> dict:
    """What the page shows: runs with their version changes, series by family, regressions."""
    pos = {r.run_id: i for i, r in enumerate(runs)}
    kind_of = {r.run_id: r.kind for r in runs}
    grouped: dict = {}
    for p in points:
        key = (kind_of.get(p.run_id, "bench"), p.demand, p.row.case)
        grouped.setdefault(key, []).append(p)
    series = []
    for (kind, demand, case), pts in grouped.items():
        pts = sorted(pts, key=lambda p: pos[p.run_id])
        out, prev = [], None
        for p in pts:
            flags = () if prev is None else tuple(case_flags(prev.row, p.row, threshold, stat, accuracy_floor))
            out.append(Point(p.run_id, pos[p.run_id], p.row, flags, None if prev is None else prev.run_id))
            prev = p
        series.append(Series(case, kind, demand, tuple(out)))
    order = {f: i for i, f in enumerate(FAMILY_ORDER)}
    kinds = {k: i for i, k in enumerate(KIND_ORDER)}
    families = {}               # demand -> kind -> series: a bench run's and a check's figures are not alike
    for s in sorted(series, key=lambda s: (order.get(s.demand, len(order)), s.demand,
                                           kinds.get(s.kind, len(kinds)), s.case)):
        families.setdefault(s.demand, {}).setdefault(s.kind, []).append(s)
    regressions = [{"run_id": p.run_id, "against": p.against, "case": s.case, "kind": s.kind, "demand": s.demand,
                    "anchor": s.anchor, "flags": p.flags}
                   for s in series for p in s.points if p.flags]
    regressions.sort(key=lambda r: (-r["run_id"], r["demand"], r["case"]))
    return {"runs": runs, "changes": version_changes(runs), "families": families, "regressions": regressions,
            "threshold": threshold, "stat": stat, "accuracy_floor": accuracy_floor}


def version_changes(runs) -> dict:
    """{axis position: ["HiGHS 1.16.0 -> 1.17.0", ...]} for each run whose versions differ from the run before."""
    out = {}
    for i in range(1, len(runs)):
        a, b = runs[i - 1].versions(), runs[i].versions()
        diff = [f"{_VERSION_LABELS[k]} {_short(k, a[k])} -> {_short(k, b[k])}" for k in VERSION_COLUMNS
                if a[k] != b[k]]
        if diff:
            out[i] = diff
    return out


def _short(key, v):
    if v is None:
        return "?"
    return str(v)[:8] + ("+dirty" if str(v).endswith("+dirty") else "") if key == "git_commit" else str(v)


# -- charts ---------------------------------------------------------------------------------------

def _svg(fig, prefix: str) -> str:
    """The figure as an inline <svg> element: text kept as text, no XML prologue, no metadata, and its
    element ids prefixed (many charts share one page, and ids must be unique in it)."""
    import matplotlib.pyplot as plt

    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None, "Format": None, "Type": None})
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.S)
    text = re.sub(r'\bid="([^"]+)"', rf'id="{prefix}-\1"', text)
    return re.sub(r'(url\(#|href="#)([^)"]+)', rf"\g<1>{prefix}-\2", text)


def _axis(ax, runs, changes):
    """Run ids on the x axis, and the version changes as dashed lines with their text."""
    n = len(runs)
    step = max(1, math.ceil(n / 16))
    ticks = [i for i in range(n) if i % step == 0 or i == n - 1 or i in changes]
    ax.set_xticks(ticks)
    ax.set_xticklabels([f"#{runs[i].run_id}\n{runs[i].started_utc[5:10]}" for i in ticks], fontsize=7)
    ax.set_xlim(-0.5, n - 0.5)


def _mark_changes(ax, changes):
    for i, diff in changes.items():
        ax.text(i - 0.45, 0.98, "\n".join(diff), transform=ax.get_xaxis_transform(), fontsize=6.5,
                va="top", ha="left", color="#7a5c00")


def _matplotlib():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plt.rcParams["svg.fonttype"] = "none"          # text stays text in the page (searchable, checkable)
    plt.rcParams["svg.hashsalt"] = "decomp"        # the same page for the same store
    return plt


def case_chart(series: Series, runs, changes, stat: str) -> str:
    """Solve time (top) and accuracy (bottom) of one case across the runs; regressions in red."""
    plt = _matplotlib()
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(7.6, 3.6), sharex=True, gridspec_kw={"hspace": 0.12})
    xs = [p.x for p in series.points]
    times = [p.row.time(stat) for p in series.points]
    top.plot(xs, times, marker="o", ms=3.5, lw=1.2, color="#1f5fa8", label=f"{stat} of rounds")
    if stat != "median":
        top.plot(xs, [p.row.median for p in series.points], lw=0.8, ls=":", color="#1f5fa8", label="median")
    bad = [(p.x, p.row.time(stat)) for p in series.points if p.flags]
    if bad:
        top.plot(*zip(*bad), ls="none", marker="o", ms=8, mfc="none", mec="#c0151b", mew=1.6, label="regression")
    positive = [t for t in times if t and t > 0 and math.isfinite(t)]
    if positive and max(positive) / min(positive) > 20:
        top.set_yscale("log")
    else:
        top.set_ylim(bottom=0, top=max(positive or [1.0]) * 1.25)
    top.set_ylabel("seconds", fontsize=8)
    top.tick_params(labelsize=7)
    top.legend(fontsize=6.5, loc="lower left", frameon=False, ncol=3)
    _mark_changes(top, changes)
    drawn = False
    labels = _CHECK_LABELS if series.kind == "baseline-check" else _ACCURACY_LABELS
    for f, color in zip(("gap", "bid_price_error", "objective_error", "max_violation_rel"),
                        ("#2b8a3e", "#c05a00", "#6741a8", "#7b7b7b")):
        vals = [(p.x, p.row.get(f)) for p in series.points if isinstance(p.row.get(f), (int, float))
                and math.isfinite(p.row.get(f))]
        if not vals:
            continue
        drawn = True
        bottom.plot([x for x, _ in vals], [max(v, LOG_FLOOR) for _, v in vals], marker="s", ms=2.8, lw=1.0,
                    color=color, label=labels[f])
        flagged = [(p.x, max(p.row.get(f), LOG_FLOOR)) for p in series.points
                   if p.flags and any(f in fl for fl in p.flags) and isinstance(p.row.get(f), (int, float))]
        if flagged:
            bottom.plot(*zip(*flagged), ls="none", marker="o", ms=8, mfc="none", mec="#c0151b", mew=1.6)
    if drawn:
        bottom.set_yscale("log")
        bottom.legend(fontsize=6.5, loc="upper left", frameon=False, ncol=4)
        bottom.set_ylabel("relative", fontsize=8)
    else:
        bottom.text(0.5, 0.5, "no accuracy figures for this case (a build or table case)", ha="center",
                    va="center", transform=bottom.transAxes, fontsize=8, color="#555")
        bottom.set_yticks([])
    bottom.tick_params(labelsize=7)
    _axis(bottom, runs, changes)
    for ax in (top, bottom):
        ax.grid(True, alpha=0.25)
        for i in changes:
            ax.axvline(i - 0.5, color="#7a5c00", ls="--", lw=0.8)
    fig.subplots_adjust(left=0.09, right=0.99, top=0.97, bottom=0.17)
    return _svg(fig, series.anchor)


def family_chart(demand: str, kind: str, series: list, runs, changes, stat: str) -> str:
    """A family's cases of one kind at a glance: each case's time relative to its first run (median
    bold), and their largest certified gap and bid-price error in each run."""
    import numpy as np

    plt = _matplotlib()
    n = len(runs)
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(7.6, 3.4), sharex=True, gridspec_kw={"hspace": 0.12})
    rel = np.full((len(series), n), np.nan)
    worst = {f: np.full(n, np.nan) for f in ("gap", "bid_price_error")}
    for k, s in enumerate(series):
        base = next((p.row.time(stat) for p in s.points if p.row.time(stat) > 0), None)
        for p in s.points:
            if base:
                rel[k, p.x] = p.row.time(stat) / base
            for f in worst:
                v = p.row.get(f)
                if isinstance(v, (int, float)) and math.isfinite(v):
                    worst[f][p.x] = np.fmax(worst[f][p.x], max(v, LOG_FLOOR))
        ok = ~np.isnan(rel[k])
        top.plot(np.flatnonzero(ok), rel[k][ok], lw=0.6, color="#9db4d3")
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)          # a run without cases of the family
            med = np.nanmedian(rel, axis=0) if len(series) else np.full(n, np.nan)
    ok = ~np.isnan(med)
    top.plot(np.flatnonzero(ok), med[ok], lw=2.0, marker="o", ms=3.5, color="#1f5fa8",
             label=f"median over {len(series)} case(s)")
    top.axhline(1.0, color="#555", lw=0.6)
    seen = rel[~np.isnan(rel)]
    if seen.size:                  # at least 0.8 to 1.2: a 1 % wobble should look like one
        top.set_ylim(min(0.8, float(seen.min()) * 0.95), max(1.2, float(seen.max()) * 1.05))
    top.set_ylabel("time / first run", fontsize=8)
    top.legend(fontsize=6.5, loc="lower left", frameon=False)
    _mark_changes(top, changes)
    drawn = False
    for f, color in (("gap", "#2b8a3e"), ("bid_price_error", "#c05a00")):
        ok = ~np.isnan(worst[f])
        if ok.any():
            drawn = True
            labels = _CHECK_LABELS if kind == "baseline-check" else _ACCURACY_LABELS
            bottom.plot(np.flatnonzero(ok), worst[f][ok], marker="s", ms=2.8, color=color,
                        label=f"largest {labels[f]}")
    if drawn:
        bottom.set_yscale("log")
        bottom.legend(fontsize=6.5, loc="upper left", frameon=False, ncol=2)
    else:
        bottom.set_yticks([])
    for ax in (top, bottom):
        ax.grid(True, alpha=0.25)
        ax.tick_params(labelsize=7)
        for i in changes:
            ax.axvline(i - 0.5, color="#7a5c00", ls="--", lw=0.8)
    _axis(bottom, runs, changes)
    fig.subplots_adjust(left=0.09, right=0.99, top=0.97, bottom=0.18)
    return _svg(fig, "family-chart-" + re.sub(r"[^A-Za-z0-9_-]+", "_", f"{demand}-{kind}"))


# -- the page -------------------------------------------------------------------------------------

_TEMPLATE = r"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>decomp benchmark history</title>
<style>
body { font: 14px/1.45 system-ui, sans-serif; margin: 1.2em auto; max-width: 1180px; color: #1b1b1b; padding: 0 1em; }
h1 { font-size: 1.5em; margin-bottom: .2em; } h2 { margin-top: 1.6em; border-bottom: 1px solid #ccc; }
h3 { font-size: 1.02em; margin: .2em 0; font-family: ui-monospace, monospace; }
h3.kind { font-family: inherit; font-size: 1.1em; margin-top: 1em; color: #333; }
table { border-collapse: collapse; font-size: 12px; margin: .5em 0; }
th, td { border: 1px solid #ddd; padding: 2px 6px; text-align: left; vertical-align: top; }
th { background: #f3f3f3; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
.flag { color: #fff; background: #c0151b; border-radius: 3px; padding: 0 5px; font-size: 12px; font-weight: 600; }
.ok { color: #2b6a2b; } .changed { background: #fff3cd; }
nav { position: sticky; top: 0; background: #fff; padding: .4em 0; border-bottom: 1px solid #eee; z-index: 1; }
nav a { margin-right: .9em; }
article.case { border: 1px solid #e4e4e4; border-radius: 4px; padding: .4em .6em; margin: .8em 0; }
article.case.regressed { border-color: #c0151b; }
ul.reasons { margin: .2em 0 .2em 1.2em; padding: 0; font-size: 12px; color: #8a0f13; }
svg { width: 100%; height: auto; }
.muted { color: #666; font-size: 12px; }
</style>
</head>
<body data-filter="all">
<h1>decomp benchmark history</h1>
<p class="muted">Store <code>{{ store }}</code>: {{ runs|length }} run(s){% if runs %}, #{{ runs[0].run_id }}
({{ runs[0].started_utc }}) to #{{ runs[-1].run_id }} ({{ runs[-1].started_utc }}){% endif %}. Written {{ written }}.
A point is a regression, by the rules of <code>decomp bench compare</code>, when against the previous run holding
the same case its time ({{ stat }} of the timed rounds) or an accuracy figure (certified gap, objective error,
bid-price error, capacity violation; changes below {{ "%g"|format(accuracy_floor) }} are round-off) grew by more
than {{ "%g"|format(threshold * 100) }}%, an optimal finish became another, or accuracy checks began to fail.
Dashed lines on the axes mark runs whose versions differ from the run before, with what changed.
Accuracy axes are logarithmic: values below {{ "%g"|format(log_floor) }}, 0 included, are drawn at {{ "%g"|format(log_floor) }}.</p>
<nav>
{% for demand, by_kind in families.items() %}<a href="#family-{{ demand }}">{{ demand }} ({{ by_kind.values()|map("length")|sum }})</a>{% endfor %}
<a href="#runs">runs</a> <a href="#regressions">regressions ({{ regressions|length }})</a>
<label><input type="checkbox" id="only-regressions"> only cases with a regression</label>
<span class="muted" id="shown-count"></span>
</nav>

<h2 id="regressions">Regressions ({{ regressions|length }})</h2>
{% if regressions %}
<table>
<tr><th>run</th><th>against run</th><th>family</th><th>case</th><th>why</th></tr>
{% for r in regressions %}
<tr class="regression"><td class="num">#{{ r.run_id }}</td><td class="num">#{{ r.against }}</td><td>{{ r.demand }}</td>
<td><a href="#{{ r.anchor }}">{{ r.case }}</a>{% if r.kind != "bench" %} ({{ r.kind }}){% endif %}</td>
<td>{{ r.flags|join("; ") }}</td></tr>
{% endfor %}
</table>
{% else %}<p class="ok">None: no case regressed against the run before it.</p>{% endif %}

<h2 id="runs">Runs</h2>
<table>
<tr><th>run</th><th>started (UTC)</th><th>kind</th><th>suite</th><th>cases</th><th>failed</th><th>exit</th>
{% for c in env_columns %}<th>{{ env_labels[c] }}</th>{% endfor %}<th>host</th><th>CPU</th><th>load start / end</th></tr>
{% for r in runs %}
<tr id="run-{{ r.run_id }}"><td class="num">#{{ r.run_id }}</td><td>{{ r.started_utc }}</td><td>{{ r.kind }}</td>
<td>{{ r.suite or "-" }}{% if r.selection %} ({{ r.selection }}){% endif %}</td><td class="num">{{ r.n_cases }}</td>
<td class="num">{{ r.n_failed }}</td><td class="num">{{ "-" if r.exit_code is none else r.exit_code }}</td>
{% for c in env_columns %}<td{% if changed(c, r) %} class="changed"{% endif %}>{{ short(c, r.env[c]) }}</td>{% endfor %}
<td>{{ r.env.host or "-" }}</td><td>{{ r.env.cpu or "-" }}{% if r.env.logical_cpus %} x {{ r.env.logical_cpus }}{% endif %}</td>
<td class="num">{{ load(r.env.load_start) }} / {{ load(r.env.load_end) }}</td></tr>
{% endfor %}
</table>

{% for demand, by_kind in families.items() %}
{% set n_cases = by_kind.values()|map("length")|sum %}
<section class="family" id="family-{{ demand }}" data-family="{{ demand }}">
<h2>Demand family: {{ demand }} <span class="muted">({{ n_cases }} case(s), <span class="shown">{{ n_cases }}</span> shown)</span></h2>
{% for kind, series in by_kind.items() %}
<h3 class="kind">{{ kind_titles.get(kind, kind) }}: {{ series|length }}</h3>
<figure>{{ family_svg[(demand, kind)] }}</figure>
{% for s in series %}
<article class="case{% if s.n_regressions %} regressed{% endif %}" id="{{ s.anchor }}" data-case="{{ s.case }}"
 data-family="{{ demand }}" data-regressions="{{ s.n_regressions }}">
<h3>{{ s.case }}{% if s.kind != "bench" %} <span class="muted">({{ s.kind }})</span>{% endif %}
{% if s.n_regressions %} <span class="flag">REGRESSION x{{ s.n_regressions }}</span>{% endif %}</h3>
{% set last = s.points[-1].row %}
<div class="muted">{{ s.points|length }} run(s); latest #{{ s.points[-1].run_id }}: {{ "%.4g"|format(last.time(stat)) }} s
({{ stat }}), gap {{ num(last.get("gap")) }}, bid-price error {{ num(last.get("bid_price_error")) }},
termination {{ last.get("termination") or "-" }}</div>
{% for p in s.points if p.flags %}
<ul class="reasons"><li>run #{{ p.run_id }} against #{{ p.against }}: {{ p.flags|join("; ") }}</li></ul>
{% endfor %}
{{ case_svg[s.anchor] }}
</article>
{% endfor %}
{% endfor %}
</section>
{% endfor %}
<script>
(function () {
  var box = document.getElementById("only-regressions");
  function apply() {
    var only = box.checked, shown = 0;
    document.querySelectorAll("article.case").forEach(function (a) {
      a.hidden = only && a.dataset.regressions === "0";
      if (!a.hidden) { shown += 1; }
    });
    document.querySelectorAll("section.family").forEach(function (s) {
      var n = s.querySelectorAll("article.case:not([hidden])").length;
      s.querySelector(".shown").textContent = n;
      s.hidden = only && n === 0;
    });
    document.body.dataset.filter = only ? "regressions" : "all";
    document.getElementById("shown-count").textContent = shown + " case(s) shown";
  }
  box.addEventListener("change", apply);
  if (location.hash === "#only-regressions") { box.checked = true; }
  apply();
}());
</script>
</body>
</html>
"""


def render(store_path, runs, points, *, threshold: float = 0.10, stat: str = "min",
           accuracy_floor: float = 1e-9, written: str = "") -> str:
    """The page as text (see the module docstring)."""
    import jinja2
    from markupsafe import Markup

    data = build(runs, points, threshold, stat, accuracy_floor)
    changes = data["changes"]
    case_svg = {s.anchor: Markup(case_chart(s, runs, changes, stat))
                for by_kind in data["families"].values() for series in by_kind.values() for s in series}
    family_svg = {(d, k): Markup(family_chart(d, k, series, runs, changes, stat))
                  for d, by_kind in data["families"].items() for k, series in by_kind.items()}
    env = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined)
    pos = {r.run_id: i for i, r in enumerate(runs)}

    def changed(col, run):
        k = pos[run.run_id]
        return k > 0 and runs[k - 1].env.get(col) != run.env.get(col)

    return env.from_string(_TEMPLATE).render(
        store=str(store_path), written=written, env_columns=VERSION_COLUMNS, env_labels=_VERSION_LABELS,
        changed=changed, short=_short, case_svg=case_svg, family_svg=family_svg,
        load=lambda v: "-" if v is None else f"{v:.2f}", log_floor=LOG_FLOOR, kind_titles=KIND_TITLES,
        num=lambda v: "-" if not isinstance(v, (int, float)) or not math.isfinite(v) else f"{v:.2e}",
        **data)


def write(path, store_path, runs, points, **kw) -> None:
    """Write the page atomically."""
    import datetime as dt

    from .. import atomic

    written = dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")
    atomic.write_text(path, render(store_path, runs, points, written=written, **kw))
