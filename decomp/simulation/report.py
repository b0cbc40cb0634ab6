"""Simulation reports: a text table, Markdown, JSON (atomic) and PNG plots."""

from __future__ import annotations

import math
import pathlib

from .. import atomic


def _pm(ci: dict, scale: float = 1.0, digits: int = 0) -> str:
    m, h = ci["mean"] * scale, ci["halfwidth"] * scale
    if math.isnan(m):
        return "-"
    if math.isnan(h):
        return f"{m:,.{digits}f}"
    return f"{m:,.{digits}f} ± {h:,.{digits}f}"


def _non_optimal_note(r: dict) -> str:
    """' (3 not optimal: 2 rescued by the fallback, 1 PRICED NON-OPTIMAL)', or '' when all were optimal."""
    if not r["non_optimal"]:
        return ""
    parts = [f"{r['rescued_by_fallback']} rescued by the fallback"]
    if r["priced_non_optimal"]:
        parts.append(f"{r['priced_non_optimal']} PRICED NON-OPTIMAL")
    kept = r["non_optimal"] - r["rescued_by_fallback"] - r["priced_non_optimal"]
    if kept:
        parts.append(f"{kept} kept the previous controls")
    return f" ({r['non_optimal']} not optimal: {', '.join(parts)})"


def reoptimization_totals(summary: dict) -> dict:
    """Per policy label, its re-optimization counts summed over the scenarios."""
    out = {}
    for sc in summary["scenarios"]:
        for p in sc["policies"]:
            r = p.get("reoptimizations")
            if r is None:
                continue
            t = out.setdefault(p["policy"], dict.fromkeys(r, 0))
            for k, v in r.items():
                t[k] += v
    return out


def reoptimization_lines(summary: dict) -> list:
    """What the re-optimizations that ended non-optimal priced with, policy by policy (loud when non-optimal)."""
    fallback = {p["label"]: p.get("fallback") for p in summary["config"]["policies"]}
    lines = []
    for label, t in reoptimization_totals(summary).items():
        if t["priced_non_optimal"]:
            lines.append(f"WARNING: {label}: {t['priced_non_optimal']} of {t['solves']} re-optimizations "
                         f"PRICED WITH A NON-OPTIMAL ANSWER (fallback {fallback.get(label) or 'none'}; "
                         f"see solve_statuses in simulation.json)")
        if t["rescued_by_fallback"]:
            lines.append(f"{label}: {t['rescued_by_fallback']} of {t['solves']} re-optimizations ended "
                         f"non-optimal and were rescued by the fallback ({fallback.get(label)}), "
                         f"which priced with its optimal answer")
    return lines


def rows(summary: dict) -> list:
    """One row per (scenario, policy): the cells of the tables."""
    out = []
    for sc in summary["scenarios"]:
        paired = {d["policy"]: d for d in sc["paired"]}
        for p in sc["policies"]:
            d = paired.get(p["policy"])
            diff = "reference" if d is None else (
                f"{d['mean']:+,.0f} ± {d['halfwidth']:,.0f} (unpaired ± {d['unpaired_halfwidth']:,.0f})")
            solves = f"{p['solves']}" + _non_optimal_note(p.get("reoptimizations") or {
                "non_optimal": p["failed_solves"], "rescued_by_fallback": 0, "priced_non_optimal": 0})
            out.append({
                "re-opt every (days)": f"{sc['reoptimize_every']:g}", "forecast": sc["forecast_error_label"],
                "policy": p["policy"],
                "revenue": _pm(p["revenue"]), "load factor %": _pm(p["load_factor"], 100, 1),
                "share of bound %": _pm(p["share_of_bound"], 100, 2),
                **({} if p.get("share_of_network_bound") is None else
                   {"of network bound %": _pm(p["share_of_network_bound"], 100, 2)}),
                "vs reference (paired)": diff,
                "re-opt s": f"{p['reopt_seconds']:.1f}", "solves": solves,
                "s/solve": f"{p['reopt_seconds'] / p['solves']:.3f}" if p["solves"] else "-",
            })
    return out


def text_table(summary: dict) -> str:
    rs = rows(summary)
    if not rs:
        return "(no results)"
    cols = list(rs[0])
    width = {c: max(len(c), *(len(r[c]) for r in rs)) for c in cols}
    line = lambda r: "  ".join(str(r[c]).ljust(width[c]) for c in cols)  # noqa: E731
    head = line({c: c for c in cols})
    return "\n".join([head, "-" * len(head)] + [line(r) for r in rs])


def header_lines(summary: dict) -> list:
    inst, cfg = summary["instance"], summary["config"]
    b, q = summary["hindsight_bound"], summary["requests_per_path"]
    return [
        f"instance {inst['name']}: {inst['n_legs']} legs, {inst['n_products']} products, {inst['capacity']:,.0f} seats",
        f"{summary['paths']} sample paths (seed {cfg['seed']}), horizon {cfg['horizon']:g} days, "
        f"{q['mean']:,.0f} requests per path on average",
        f"hindsight bound (DLP on realized demand): {_pm(b)} per path; intervals are 95% t intervals",
        *([] if not summary.get("network_bounds") else [
            "network bounds on the optimal expected revenue (time 0, true forecast): " + ", ".join(
                f"{k} {v:,.1f}" for k, v in sorted(summary["network_bounds"].items(), key=lambda kv: kv[1]))
            + f"; 'of network bound %' is against the lowest ({summary['network_bound']['name']})"]),
        *reoptimization_lines(summary),
        f"wall time {summary['wall_seconds']:.1f} s; CPU time in the path tasks "
        f"{summary['phase_seconds'].get('task_cpu', float('nan')):.1f} s (sampling, hindsight LPs, policies and re-optimizations)",
    ]


def markdown(summary: dict) -> str:
    rs = rows(summary)
    lines = ["# Booking simulation", ""] + [f"- {h}" for h in header_lines(summary)] + [""]
    if rs:
        cols = list(rs[0])
        lines.append("| " + " | ".join(cols) + " |")
        lines.append("|" + "|".join("---" for _ in cols) + "|")
        for r in rs:
            lines.append("| " + " | ".join(str(r[c]) for c in cols) + " |")
    if summary.get("rounds") and len(summary["rounds"]) > 1:
        lines += ["", "Sequential rounds (paths, widest paired half-width): " + ", ".join(
            f"{r['paths']} ({r['max_paired_halfwidth']:,.1f})" for r in summary["rounds"]
            if r["max_paired_halfwidth"] is not None)]
    return "\n".join(lines) + "\n"


def _forecast_axis(cfg: dict):
    fes = cfg["forecast_errors"]
    for key, label in (("bias", "forecast bias (mean x (1 + bias))"), ("sigma_factor", "factor on std"),
                       ("spread", "per-product bias spread")):
        vals = [f[key] for f in fes]
        if len(set(vals)) > 1:
            return vals, label
    return list(range(len(fes))), "forecast error case"


def plots(summary: dict, out_dir) -> list:
    """PNG plots of revenue against re-optimization interval and against forecast error (when varied)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    cfg = summary["config"]
    out_dir = pathlib.Path(out_dir)
    scen = summary["scenarios"]
    policies = [p["label"] for p in cfg["policies"]]
    n_fe, every = len(cfg["forecast_errors"]), cfg["reoptimize_every"]
    written = []

    def cell(fe_i, r_i, p):
        return scen[fe_i * len(every) + r_i]["policies"][p]["revenue"]

    # fares carry no currency in an instance: the unit is the fare's own (meta "currency" when given)
    unit = str(summary["instance"].get("currency") or "fare units")

    def draw(name, xs, xlabel, panels, get, panel_title):
        # at most two panels a row, so that the text stays readable at the saved size
        ncols = min(2, len(panels))
        nrows = math.ceil(len(panels) / ncols)
        fig, grid = plt.subplots(nrows, ncols, figsize=(6.4 * ncols, 4.8 * nrows), squeeze=False)
        axes = [list(grid.ravel())]
        for ax in axes[0][len(panels):]:
            ax.set_visible(False)
        for ax, panel in zip(axes[0], panels):
            for p, label in enumerate(policies):
                cis = [get(panel, i, p) for i in range(len(xs))]
                ax.errorbar(xs, [c["mean"] for c in cis],
                            yerr=[0 if math.isnan(c["halfwidth"]) else c["halfwidth"] for c in cis],
                            marker="o", capsize=3, label=label)
            ax.set_xlabel(xlabel, fontsize=11)
            ax.set_ylabel(f"mean revenue per path, {unit} (95% CI)", fontsize=11)
            ax.set_title(panel_title(panel), fontsize=12)
            ax.tick_params(labelsize=10)
            ax.grid(alpha=0.3)
        axes[0][0].legend(fontsize=9)
        fig.suptitle(f"{summary['instance']['name']}: {summary['paths']} paths", fontsize=12)
        fig.tight_layout()
        path = out_dir / name
        with atomic.atomic_path(path) as tmp:
            fig.savefig(tmp, format="png", dpi=110)
        plt.close(fig)
        written.append(path)

    if len(every) > 1:
        draw("revenue_vs_reoptimization.png", every, "re-optimization interval (days)", list(range(n_fe)),
             lambda fe_i, r_i, p: cell(fe_i, r_i, p), lambda fe_i: scen[fe_i * len(every)]["forecast_error_label"])
    if n_fe > 1:
        xs, xlabel = _forecast_axis(cfg)
        draw("revenue_vs_forecast_error.png", xs, xlabel, list(range(len(every))),
             lambda r_i, fe_i, p: cell(fe_i, r_i, p), lambda r_i: f"re-optimize every {every[r_i]:g} days")
    return written


def write(summary: dict, out_dir) -> list:
    """simulation.json, simulation.md and the plots, each written atomically."""
    out_dir = pathlib.Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    atomic.write_json(out_dir / "simulation.json", _jsonable(summary))
    atomic.write_text(out_dir / "simulation.md", markdown(summary))
    return [out_dir / "simulation.json", out_dir / "simulation.md"] + plots(summary, out_dir)


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if hasattr(obj, "item"):
        return _jsonable(obj.item())
    return obj
