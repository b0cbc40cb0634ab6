"""The Markdown report of a benchmark run: machine, per-rung tables, fitted slopes, speed-ups."""

from __future__ import annotations

from .cases import RUNG_ORDER
from .plots import FIT_MIN_N, knob_parts, slopes

#: Methods the speed-up columns compare against, measured in the same run.
BASELINES = ("ipopt", "pyomo-ipopt")


def _g(v, fmt="{:.3g}"):
    if v is None:
        return "-"
    if isinstance(v, (int, float)):
        return fmt.format(v)
    return str(v)


def _knobs(row) -> str:
    return ", ".join(knob_parts(row, limits=True)) or "-"


def baseline_row(rows, method: str):
    """The baseline case of a rung: ``method`` at tol 1e-9 if measured, else at its tightest tol."""
    cand = [r for r in rows if r.get("method") == method and r.get("kind") == "solve"]
    if not cand:
        return None
    exact = [r for r in cand if (r.get("knobs") or {}).get("tol") == 1e-9]
    return exact[0] if exact else min(cand, key=lambda r: (r.get("knobs") or {}).get("tol", 1.0))


def _demand(row) -> str:
    return row.get("demand") or "normal"


def speedups(run, stat: str = "min") -> dict:
    """case -> {baseline method: baseline time / case time} within each rung (and demand model)."""
    out = {}
    keys = sorted({(r.get("rung"), _demand(r)) for r in run.rows}, key=str)
    for rung, demand in keys:
        rows = [r for r in run.rows if r.get("rung") == rung and _demand(r) == demand]
        bases = {m: baseline_row(rows, m) for m in BASELINES}
        for r in rows:
            if r.get("kind") != "solve":
                continue
            out[r.case] = {m: (None if b is None or r.time(stat) <= 0 else b.time(stat) / r.time(stat))
                           for m, b in bases.items()}
    return out


def demand_tables(run, sp, stat: str = "min") -> list:
    """Markdown lines: per demand model, time against accuracy on each rung, with the time of
    the same method and knobs on the ladder's normal demand in this run for scale."""
    demands = sorted({_demand(r) for r in run.rows} - {"normal"})
    if not demands:
        return []
    normal = {(r.get("rung"), r.get("label"), _knobs(r)): r for r in run.rows
              if _demand(r) == "normal" and r.get("kind") == "solve"}
    out = ["## Demand models", "",
           "The same networks (legs, products, fares, means) with another demand model "
           "(decomp.demand_mix); `time s` is the whole call, `build s` and `solve s` its phases (the "
           "certificate is the rest); `x normal` = this case's time over the same method's on the "
           "ladder's normal demand in this run.", "",
           "| demand | rung | method | knobs | time s | build s | solve s | iterations | gap | objective err | "
           "peak RSS MiB | status | x normal | x ipopt |",
           "|---|---|---|---|---:|---:|---:|---:|---:|---:|---:|---|---:|---:|"]
    order = {r: i for i, r in enumerate(RUNG_ORDER)}
    rows = [r for r in run.rows if _demand(r) in demands and r.get("kind") == "solve"]
    for r in sorted(rows, key=lambda r: (_demand(r), order.get(r.get("rung"), 99), str(r.get("label")))):
        base = normal.get((r.get("rung"), r.get("label"), _knobs(r)))
        ratio = None if base is None or not base.time(stat) else r.time(stat) / base.time(stat)
        status = r.get("termination") or "-"
        if r.get("accuracy_failures"):
            status += " (FAILED check)"
        ph = r.get("phase_seconds") or {}
        out.append("| " + " | ".join([
            _demand(r), str(r.get("rung")), str(r.get("label")), _knobs(r), _g(r.time(stat), "{:.4g}"),
            _g(ph.get("build"), "{:.3g}"), _g(ph.get("solve"), "{:.4g}"),
            _g(r.get("iterations"), "{}"), _g(r.get("gap"), "{:.2e}"), _g(r.get("objective_error"), "{:.2e}"),
            _g(r.get("peak_rss_mib"), "{:.0f}"), status, _g(ratio, "{:.3g}"),
            _g(sp.get(r.case, {}).get("ipopt"), "{:.3g}")]) + " |")
    out.append("")
    return out


def _machine(run) -> list:
    mi = run.machine_info or {}
    cpu = mi.get("cpu") or {}
    d = mi.get("decomp") or {}
    ver = d.get("versions") or {}
    lines = [
        f"- date (UTC): {run.datetime or '-'}",
        f"- machine: {mi.get('node', '-')}, {cpu.get('brand_raw', mi.get('processor', '-'))}, "
        f"{d.get('logical_cpus', '-')} logical CPUs ({d.get('physical_cores', '-')} physical), "
        f"{d.get('memory_total_gib', '-')} GiB RAM, {mi.get('system', '')} {mi.get('release', '')}".rstrip(),
        f"- load average (1, 5, 15 min) at start: {_load(d.get('load_average_at_start'))}; "
        f"at end: {_load(run.decomp.get('load_average_at_end'))} (the machine is shared: timings are noisy)",
        "- versions: " + ", ".join(f"{k} {v}" for k, v in ver.items() if v),
    ]
    return lines


def _load(v):
    return "-" if not v else ", ".join(f"{x:.2f}" for x in v)


def _paragraph(out: list, label: str, items: list) -> None:
    """``label: item; item; ...`` and a blank line, when there are items."""
    if items:
        out.append(f"{label}: " + "; ".join(items))
        out.append("")


def render(run, plots=(), stat: str = "min") -> str:
    """The report as Markdown: how the run was made, failed cases, a table per rung, the demand
    families, the fitted scaling, the notes on the columns and the plots."""
    d = run.decomp or {}
    sp = speedups(run, stat)
    out = _header(run, d, stat) + _failed_cases(run, d.get("run") or {})
    for rung in RUNG_ORDER:
        out += _rung_table(run, rung, sp)
    out += demand_tables(run, sp, stat)
    out += _fitted_scaling(run, stat)
    out += _notes(d)
    if plots:
        out.append("## Plots")
        out += [f"![{p}]({p})" for p in plots]
        out.append("")
    return "\n".join(out)


def _header(run, d: dict, stat: str) -> list:
    """The title, the machine, how the run was made and timed, what it left out and measured against."""
    rn = d.get("run") or {}
    out = [f"# Benchmark report: suite `{d.get('suite', rn.get('suite', '?'))}`", ""]
    out += _machine(run)
    if rn:
        out.append(f"- wall time of the run: {rn.get('wall_seconds', 0):.1f} s "
                   f"({rn.get('cases_run', len(run.rows))} cases; pytest exit code {rn.get('pytest_exit_code')})")
        out.append(f"- command: `{rn.get('command', '-')}`")
    out.append(f"- times: {stat} over rounds of one call each (instance loading, incidence "
               "matrices, references and a warm-up call are untimed); Pyomo method times include "
               "building the model (the `build` phase column shows its share)")
    out.append(f"- memory: {d.get('memory_note', 'peak resident-set growth during the solve')}")
    out.append("")
    _paragraph(out, "Methods not in this run (no case generated)",
               [f"{e['model']}/{e['method']}: {e['reason']}" for e in d.get("excluded_methods") or []])
    _paragraph(out, "Instances", [f"{k} = {v.get('source')} ({v.get('n_products')} products, {v.get('n_legs')} legs)"
                                  for k, v in (d.get("rungs") or {}).items()])
    _paragraph(out, "Reference solves (errors are measured against them)",
               [f"{k}: {v.get('method')} {v.get('options') or ''} status {v.get('status')}, gap {_g(v.get('gap'))}"
                for k, v in (d.get("references") or {}).items()])
    return out


def _failed_cases(run, rn: dict) -> list:
    """Cases that failed an accuracy check, and cases that failed without timing data."""
    failed = [r for r in run.rows if r.get("accuracy_failures")]
    crashed = [c for c in rn.get("failed_cases", []) if not any(c.endswith(f"[{r.name.split('[', 1)[-1]}")
                                                                  for r in failed)]
    if not (failed or crashed):
        return []
    out = ["## Failed cases"]
    for r in failed:
        out.append(f"- `{r.case}`: " + "; ".join(r.get("accuracy_failures")))
    for c in crashed:
        out.append(f"- `{c}`: failed without timing data (see pytest.log)")
    out.append("")
    return out


def _rung_table(run, rung, sp) -> list:
    """The normal-demand cases of one rung: times, accuracy, memory, status and speedups."""
    rows = [r for r in run.rows if r.get("rung") == rung and _demand(r) == "normal"]
    if not rows:
        return []
    n, L = rows[0].get("n_products"), rows[0].get("n_legs")
    has_rev = any(r.get("revenue_loss_rel") is not None for r in rows)
    out = [f"## Rung {rung}: {n} products, {L} legs", "",
           "| model | method | knobs | time s | median s | rounds | build s | iterations | gap | "
           "objective err | bid-price err | " + ("revenue loss | " if has_rev else "")
           + "violation (rel) | mem growth MiB | peak RSS MiB | status | x ipopt | x pyomo-ipopt |",
           "|---|---|---|---:|---:|---:|---:|---:|---:|---:|---:|" + ("---:|" if has_rev else "")
           + "---:|---:|---:|---|---:|---:|"]
    for r in sorted(rows, key=lambda r: (r.get("kind") != "solve", str(r.get("model")),
                                         str(r.get("label")), _knobs(r))):
        ph = r.get("phase_seconds") or {}
        s = sp.get(r.case, {})
        status = r.get("termination") or ("built" if r.get("kind") == "build" else "-")
        if r.get("accuracy_failures"):
            status += " (FAILED check)"
        out.append("| " + " | ".join([
            str(r.get("model")), str(r.get("label")), _knobs(r),
            _g(r.min, "{:.4g}"), _g(r.median, "{:.4g}"), str(r.rounds), _g(ph.get("build"), "{:.3g}"),
            _g(r.get("iterations"), "{}"), _g(r.get("gap"), "{:.2e}"), _g(r.get("objective_error"), "{:.2e}"),
            _g(r.get("bid_price_error"), "{:.2e}"),
            *([_g(r.get("revenue_loss_rel"), "{:.2e}")] if has_rev else []),
            _g(r.get("max_violation_rel"), "{:.1e}"),
            _g(r.get("peak_memory_mib"), "{:.0f}"), _g(r.get("peak_rss_mib"), "{:.0f}"), status,
            _g(s.get("ipopt"), "{:.3g}"), _g(s.get("pyomo-ipopt"), "{:.3g}")]) + " |")
    out.append("")
    return out


def _fitted_scaling(run, stat: str) -> list:
    """t = a n^b per model and method, from the rungs of FIT_MIN_N products on."""
    fits = slopes(run, stat, min_n=FIT_MIN_N)
    if not fits:
        return []
    out = ["## Fitted scaling t = a n^b (rungs from 1,000 products, headline knob)", "",
           "| model | method | b | stderr of b | a | sizes |", "|---|---|---:|---:|---:|---|"]
    for (model, label), f in sorted(fits.items(), key=lambda kv: (str(kv[0][0]), str(kv[0][1]))):
        se = f.stderr.get("b")
        out.append(f"| {model} | {label} | {f.b:.3f} | {_g(se, '{:.3f}')} | {f.a:.3g} | "
                   f"{int(f.stderr['n_min'])}..{int(f.stderr['n_max'])} ({f.stderr['n_points']}) |")
    out.append("")
    return out


def _notes(d: dict) -> list:
    """What the columns mean, and how the revenue loss is measured."""
    out = ["Columns: `x ipopt` = time of `ipopt` (tol 1e-9, or its tightest tol) on the same rung in this "
           "run divided by this case's time (> 1: faster than ipopt); same for `x pyomo-ipopt`. "
           "Errors are relative, against the reference solve; bid-price error over legs whose reference "
           "bid price is >= 1e-3 of the largest. DLP bid prices need not be unique (degenerate LPs), so "
           "their bid-price error is informative only.", ""]
    rev = d.get("revenue") or {}
    if rev.get("paths"):
        out += [f"Revenue loss: (reference revenue - case revenue) / reference revenue, the case's bid "
                f"prices and the reference's held fixed and priced on the same {rev['paths']} seeded booking "
                "sample paths per rung (a point estimate of the mean; negative: the case earned more on "
                "these paths). Reference revenue per rung/model: " + "; ".join(
                    f"{k} {_g((v or {}).get('mean'), '{:.6g}')}" for k, v in (rev.get("references") or {}).items())
                + ".", ""]
    return out
