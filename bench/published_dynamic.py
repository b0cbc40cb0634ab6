"""The published-problem table of the dynamic policies (a script, not a pytest case).

    PYTHONPATH=. .venv/bin/python bench/published_dynamic.py --paths 1000 --out DIR

For each of the 24 published hub-and-spoke problems (read in place from
../shared/external/hub-spoke-2009): the DLP value (HiGHS) beside the published
one, the Lagrangian bound (Topaloglu 2009) and the bound at the DLP duals, the
simulated revenue of the static DLP bid-price policy, of the decomposition's
tables (from the DLP's and from the PNLP's bid prices) and of the relaxation's tables on the same requests (95% t intervals;
paired differences against the static policy), and the solve times. Writes
DIR/published_dynamic.md and DIR/published_dynamic.json; records the load
average before and after.
"""

from __future__ import annotations

import argparse
import json
import os
import pathlib
import sys
import time

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from support.hubspoke import PUBLISHED           # noqa: E402  tests/support/hubspoke.py
from support.published_dynamic import run        # noqa: E402  tests/support/published_dynamic.py

EXTERNAL = ROOT.parent / "shared" / "external" / "hub-spoke-2009"


def _ci(c):
    return f"{c['mean']:,.0f} ± {c['halfwidth']:,.0f}"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--paths", type=int, default=1000)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--out", required=True)
    ap.add_argument("--only", default=None, help="comma-separated problem names (default: all 24)")
    args = ap.parse_args(argv)
    if not EXTERNAL.is_dir():
        print(f"published problems not found at {EXTERNAL}", file=sys.stderr)
        return 2
    out_dir = pathlib.Path(args.out)
    out_dir.mkdir(parents=True, exist_ok=True)
    names = sorted(PUBLISHED) if not args.only else args.only.split(",")
    load0 = os.getloadavg()
    rows, records = [], []
    for name in names:
        t0 = time.perf_counter()
        r = run(EXTERNAL / f"{name}.txt", paths=args.paths, seed=args.seed)
        sc = r["summary"]["scenarios"][0]
        pol = {p["policy"]: p for p in sc["policies"]}
        paired = {d["policy"]: d for d in sc["paired"]}
        rel, secs = r["relaxation"], r["seconds"]
        bound = rel.bound
        static, dyn, lag = pol["bid dlp:highs"], pol["dynamic:dlp:highs"], pol["relaxed:dlp:highs"]
        dpn = pol["dynamic:pnlp:ipopt"]
        rec = {"name": name, "published_dlp": PUBLISHED[name], "dlp": r["dlp"].objective, "bound": bound,
               "bound_at_dlp_duals": rel.start_bound, "relaxation_termination": rel.termination,
               "relaxation_iterations": rel.iterations,
               "static": static["revenue"], "dynamic": dyn["revenue"], "relaxed": lag["revenue"],
               "fcfs": pol["fcfs"]["revenue"], "dynamic_pnlp": dpn["revenue"],
               "dynamic_pnlp_vs_static": paired["dynamic:pnlp:ipopt"],
               "dynamic_vs_static": paired["dynamic:dlp:highs"], "relaxed_vs_static": paired["relaxed:dlp:highs"],
               "seconds": secs, "paths": args.paths, "wall": time.perf_counter() - t0,
               "all_below_bound": all(p["revenue"]["low"] <= bound for p in sc["policies"])}
        records.append(rec)
        dv, lv, pv = rec["dynamic_vs_static"], rec["relaxed_vs_static"], rec["dynamic_pnlp_vs_static"]
        rows.append(f"| {name} | {PUBLISHED[name]:,} | {r['dlp'].objective:,.1f} | {bound:,.1f} | "
                    f"{_ci(static['revenue'])} | {_ci(dyn['revenue'])} | {dv['mean']:+,.0f} ± {dv['halfwidth']:,.0f} | "
                    f"{_ci(lag['revenue'])} | {lv['mean']:+,.0f} ± {lv['halfwidth']:,.0f} | "
                    f"{_ci(dpn['revenue'])} | {pv['mean']:+,.0f} ± {pv['halfwidth']:,.0f} | "
                    f"{secs['dlp']:.3f} | {secs['decomposition']:.3f} | {secs['relaxation']:.2f} ({rel.iterations}, {rel.termination}) |")
        print(rows[-1], flush=True)
    load1 = os.getloadavg()
    head = ("| problem | DLP (published) | DLP (HiGHS) | Lagrangian bound | static DLP bid prices | "
            "decomposition tables (DLP) | vs static (paired) | relaxation tables | vs static (paired) | "
            "decomposition tables (PNLP) | vs static (paired) | "
            "DLP s | decomposition s | relaxation s (iterations, stop) |\n|" + "---|" * 14)
    text = (f"# Dynamic policies on the published hub-and-spoke problems\n\n"
            f"{args.paths} sample paths per problem (seed {args.seed}), requests drawn period by period from the "
            f"published probabilities; revenues are means with 95% t intervals; 'vs static' is the paired difference "
            f"against the static DLP bid-price policy (one DLP solve at time 0). Load average "
            f"{load0[0]:.2f} before, {load1[0]:.2f} after, on {os.cpu_count()} CPUs.\n\n" + head + "\n" + "\n".join(rows) + "\n")
    (out_dir / "published_dynamic.md").write_text(text)
    (out_dir / "published_dynamic.json").write_text(json.dumps({"load": [load0, load1], "rows": records}, indent=1,
                                                               default=float))
    print(f"wrote {out_dir / 'published_dynamic.md'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
