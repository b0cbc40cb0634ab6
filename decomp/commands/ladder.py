"""``decomp ladder``: list the instance ladder, or (re)build rungs.

Without options: each rung's size, seed, where it lives and whether it is
present and matches the manifest. ``--build`` writes the rungs named (default:
every generated rung that is missing or stale) from the manifest.
"""

from __future__ import annotations

import time


def register(sub):
    p = sub.add_parser("ladder", help="list the instance ladder, or rebuild rungs from the manifest",
                       description=__doc__)
    p.add_argument("--build", nargs="*", metavar="RUNG",
                   help="write these rungs from the manifest (no names: generated rungs missing or stale; "
                        "default: list the rungs, write nothing)")
    p.set_defaults(func=run)


def run(args) -> int:
    from .. import ladder

    rungs = ladder.rungs()
    if args.build is not None:
        names = args.build or [n for n, r in rungs.items() if not r.committed and ladder.rung_state(n) != "ok"]
        for name in names:
            t0 = time.perf_counter()
            path = ladder.write_rung(name)
            print(f"built {name} into {path} in {time.perf_counter() - t0:.2f} s")
        if not names:
            print("every generated rung is present and up to date")
        return 0
    root = ladder.instances_dir()
    print(f"{'rung':<7} {'products':>10} {'seed':>5} {'kind':<10} {'state':<8} path")
    for name, r in rungs.items():
        kind = "committed" if r.committed else "generated"
        path = ladder.rung_path(name)
        try:
            shown = path.relative_to(root.parent)
        except ValueError:
            shown = path
        print(f"{name:<7} {r.products:>10,} {r.seed:>5} {kind:<10} {ladder.rung_state(name):<8} {shown}")
    return 0
