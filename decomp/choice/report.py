"""The choice simulation's report: a Markdown table per policy and per re-estimation cycle, and a JSON file."""

from __future__ import annotations

import json
import pathlib

from ..atomic import write_text


def _ci(c, digits=0) -> str:
    if c is None:
        return "-"
    return f"{c['mean']:,.{digits}f} ± {c['halfwidth']:,.{digits}f}"


def _pct(c) -> str:
    return "-" if c is None else f"{100 * c['mean']:.2f}% ± {100 * c['halfwidth']:.2f}"


def policy_table(summary: dict) -> str:
    """Revenue, share of the sales LP's bound, paired difference against the first policy, by market group."""
    groups = sorted({g for p in summary["policies"] for g in p["by_market_group"]})
    head = ["policy", "revenue (95% CI)", "share of the bound", f"vs {summary['first_policy']} (paired 95%)",
            "seats sold"] + [f"revenue in {g} buy-down markets" for g in groups] + ["solves", "non-optimal"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for p in summary["policies"]:
        vs = p.get("vs_first")
        r = p["reoptimizations"]
        cells = [p["policy"], _ci(p["revenue"]), _pct(p["share_of_bound"]),
                 "(reference)" if vs is None else f"{vs['mean']:+,.0f} ± {vs['halfwidth']:,.0f}",
                 f"{p['seats']['mean']:,.0f}"] + [_ci(p["by_market_group"].get(g)) for g in groups] + \
                [str(r["solves"]), str(r["non_optimal"])]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def cycle_table(label: str, cycles: list) -> str:
    head = ["cycle", f"{label} revenue (95% CI)", "vs cycle 0 (paired 95%)", "share of the bound",
            "forecast of the top fares", "top-fare sales", "mean bid price"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for c in cycles:
        vs = c.get("vs_first")
        lines.append("| " + " | ".join([
            str(c["cycle"]), _ci(c["revenue"]),
            "(reference)" if vs is None else f"{vs['mean']:+,.0f} ± {vs['halfwidth']:,.0f}",
            _pct(c["share_of_bound"]), f"{c['forecast_top']:,.1f}", f"{c['sales_top']:,.1f}",
            f"{c['mean_bid_price']:,.2f}"]) + " |")
    return "\n".join(lines)


def text(summary: dict, spirals: dict | None = None) -> str:
    b = summary["bound"]
    out = [f"# Booking simulation with customer choice: {summary['instance']}", "",
           f"{summary['paths']} paths (seed {summary['seed']}), {summary['customers_per_path']['mean']:,.0f} "
           f"customers per path, horizon {summary['horizon_days']:g} days, re-optimization "
           + ("none (bid prices of time 0)" if summary["reoptimize_every_days"] is None
              else f"every {summary['reoptimize_every_days']:g} days")
           + f"; bound: {b['name']} {b['value']:,.2f} ({b['method']}, gap {b['gap']:.1e}).", "",
           policy_table(summary)]
    for label, cycles in (spirals or {}).items():
        out += ["", f"## Re-estimating the {label} forecast from its own sales", "", cycle_table(label, cycles)]
    return "\n".join(out) + "\n"


def write(folder, summary: dict, spirals: dict | None = None) -> list:
    """OUT/simulation.json and OUT/simulation.md (each written atomically)."""
    folder = pathlib.Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    data = {"schema": "decomp.choice-simulation", "schema_version": 1, **summary, "reestimation": spirals or {}}
    write_text(folder / "simulation.json", json.dumps(data, indent=2, default=float) + "\n")
    write_text(folder / "simulation.md", text(summary, spirals))
    return [folder / "simulation.json", folder / "simulation.md"]
