"""A sweep of bad option combinations through every ``decomp`` command: each must end with exit 2
and a message naming the option (or the file) at fault, never a traceback, never silently accepted,
and before anything is written -- no output appears, in the folder named or in the working folder.

``sweep()`` prints the counts for the issue notes (``PYTHONPATH=tests python tests/cli/test_bad_option_sweep.py``).
"""

from __future__ import annotations

import contextlib
import io
import os
import pathlib
import sys
import tempfile

import pytest

from support.tiny import write_benchmark, write_tiny, write_tiny_markets

#: (command line with placeholders, the word the message must hold). Placeholders: {inst} a valid
#: instance folder, {mkt} one with markets (customer choice), {res} a result of it, {bench} a benchmark.json, {base} a baseline folder, {file}
#: a regular file, {own} a folder of someone's own files, {out} where an output would go (must stay
#: absent), {huge} a result JSON holding a 5,000-digit integer.
SOLVE = ["solve", "{inst}", "--model", "dlp", "--method", "highs", "--out", "{out}/r.json"]
RUN = ["run", "{inst}", "--out", "{out}/run", "--no-progress"]
SIM = ["simulate", "{inst}", "--policies", "fcfs", "--paths", "2", "--workers", "0", "--no-progress", "--out",
       "{out}/sim"]
TABLES = ["tables", "{inst}", "--static", "{res}", "--periods", "5", "--out", "{out}/t.parquet"]
DECIDE = ["decide", "{res}", "--legs", "L1", "--fare", "100"]
GEN = ["generate", "--products", "20", "--out", "{out}/g"]
RECORD = ["baseline", "record", "--suite", "micro", "--out", "{out}/b"]
CHECK = ["baseline", "check", "{base}"]
SIM_MKT = ["simulate", "{mkt}", "--paths", "2", "--workers", "0", "--no-progress", "--out", "{out}/sim"]
GEN_MKT = GEN + ["--markets"]
SIZE = ["size", "--bench", "{bench}", "--products", "100000", "--window", "1h", "--out", "{out}/sz"]


def _with(base, *extra, drop=()):
    """``base`` with the options in ``drop`` (and their value) removed and ``extra`` appended."""
    out, skip = [], False
    for a in base:
        if skip:
            skip = False
            continue
        if a in drop:
            skip = True
            continue
        out.append(a)
    return out + list(extra)


def _values(base, option, values, token=None):
    return [(_with(base, option, v, drop=(option,)), token or option) for v in values]


CASES = [
    # solve
    *_values(SOLVE, "--tol", ["-1", "0", "nan", "inf", "abc"]),
    *_values(SOLVE, "--time-limit", ["-1", "0", "nan", "x"]),
    *_values(SOLVE, "--iteration-limit", ["0", "-5", "1.5", "x"]),
    *_values(_with(SOLVE, "--model", "pwl", drop=("--model",)), "--segments", ["0", "-1"]),
    (_with(SOLVE, "--segments", "4"), "--segments"),
    *_values(SOLVE, "--method", ["nosuch", "ipopt", ""]),
    (_with(SOLVE, "--model", "xyz", drop=("--model",)), "--model"),
    (_with(SOLVE, "--model", "pnlp", "--method", "lagrangian", "--warm-start", "/no/such.json",
           drop=("--model", "--method")), "/no/such.json"),
    (_with(SOLVE, "--warm-start", "{res}"), "--warm-start"),
    (_with(SOLVE, "--model", "pnlp", "--method", "lagrangian", "--warm-start", "{huge}",
           drop=("--model", "--method")), "huge.json"),
    (_with(SOLVE, "--model", "sblp", drop=("--model",)), "sblp"),       # a network without markets
    (["solve", "{mkt}", "--model", "sblp", "--method", "ipopt", "--out", "{out}/r.json"], "--method"),
    *_values(SOLVE, "--out", ["", "{dir}", "{file}/x.json", "/dev/null"]),
    *_values(SOLVE, "--leg-table", ["{out}/t.txt", "{dir}", "{out}/r.json"]),
    *_values(SOLVE, "--product-table", ["{out}/p.xlsx", "{file}/p.csv"]),
    (_with(SOLVE, "--leg-table", "{out}/t.csv", "--product-table", "{out}/t.csv"), "--product-table"),
    (["solve", "", "--model", "dlp", "--method", "highs", "--out", "{out}/r.json"], "INSTANCE"),
    (["solve", "/no/such", "--model", "dlp", "--method", "highs", "--out", "{out}/r.json"], "/no/such"),
    # run
    *_values(RUN, "--workers", ["0", "-1", "x"]),
    *_values(RUN, "--retries", ["-1"]),
    *_values(RUN, "--dashboard", ["-1", "70000"]),
    *_values(RUN, "--warm-start", ["/no/such/dir", "{file}"]),
    *_values(RUN, "--out", ["", "{file}", "{file}/r", "/dev/null"]),
    *_values(RUN, "--tol", ["-1", "nan"]),
    *_values(RUN, "--time-limit", ["-1"]),
    *_values(RUN, "--iteration-limit", ["0"]),
    *_values(RUN, "--dates", ["0", "-3", "2027-01-05:2027-01-01", "garbage"]),
    (_with(RUN, "--dates", "2027-01-01:2027-01-02", "--days", "2"), "--dates"),
    (_with(RUN, "--dates", "1", "--start", "notadate"), "--start"),
    *_values(RUN, "--variation-sigma", ["-1", "nan"]),
    *_values(RUN, "--seasonal", ["1", "-0.5"]),
    *_values(RUN, "--fallback", ["nosuch", "lagrangian:foo"]),
    *_values(RUN, "--method", ["nosuch"]),
    (_with(RUN, "--model", "dlp", "--method", "ipopt"), "--method"),
    *_values(RUN, "--window", ["5 parsecs", "0"]),
    *_values(RUN, "--scheduler", ["", "tls://127.0.0.1:1"]),
    *_values(RUN, "--demand", ["poisson 0.7", "nosuch 1"]),
    (_with(RUN, "--demand", "gamma"), "--demand"),                  # a demand model of a folder's instance
    (["run", "/no/such", "--out", "{out}/run", "--no-progress"], "/no/such"),
    (["run", "gen:abc", "--out", "{out}/run", "--no-progress"], "gen:abc"),
    # simulate
    *_values(SIM, "--paths", ["0", "-1"]),
    *_values(SIM, "--horizon", ["0", "-5", "nan"]),
    *_values(SIM, "--reoptimize-every", ["0", "x", ""]),
    *_values(SIM, "--forecast-bias", ["-1", "-2", "x"]),
    *_values(SIM, "--sigma-factor", ["-1"]),
    *_values(SIM, "--bias-spread", ["-1"]),
    *_values(SIM, "--periods", ["0"]),
    *_values(SIM, "--seed", ["-1"]),
    *_values(SIM, "--chunk", ["0"]),
    *_values(SIM, "--workers", ["-1"]),
    *_values(SIM, "--policies", ["nosuch", "", "dlp:nosuch", "pnlp:lagrangian:2", "emsrb"]),
    *_values(SIM, "--fallback", ["nosuch"]),
    *_values(SIM, "--target-halfwidth", ["0", "-1"]),
    *_values(SIM, "--out", ["", "{file}", "/dev/null"]),
    (_with(SIM, "--scheduler", "tls://127.0.0.1:1", drop=("--workers",)), "--scheduler"),
    *_values(SIM, "--reestimate", ["-1", "x", "2"]),                # 2: only on a network with markets
    # simulate, a network with markets (customer choice)
    *_values(SIM_MKT, "--policies", ["nosuch", "", "sblp:nosuch", "dlp:ipopt", "emsrb", "dynamic:dlp"]),
    *_values(SIM_MKT, "--reestimate", ["-1", "x"]),
    *_values(SIM_MKT, "--paths", ["1", "0"]),
    *_values(SIM_MKT, "--forecast-bias", ["0.2", "-2"]),
    *_values(SIM_MKT, "--sigma-factor", ["1.5"]),
    *_values(SIM_MKT, "--periods", ["5"]),
    *_values(SIM_MKT, "--target-halfwidth", ["10"]),
    *_values(SIM_MKT, "--workers", ["2"]),
    *_values(SIM_MKT, "--reoptimize-every", ["7,14", "0"]),
    *_values(SIM_MKT, "--fallback", ["nosuch"]),
    *_values(SIM_MKT, "--horizon", ["0"]),
    *_values(SIM_MKT, "--out", ["", "{file}", "/dev/null"]),
    (_with(SIM_MKT, "--scheduler", "tls://127.0.0.1:1", drop=("--workers",)), "--scheduler"),
    # tables
    *_values(TABLES, "--periods", ["0", "-1"]),
    *_values(TABLES, "--threads", ["0"]),
    (_with(TABLES, "--static", "/no/such.json", drop=("--static",)), "/no/such.json"),
    *_values(TABLES, "--out", ["{dir}", "{file}/t.parquet", ""]),
    (_with(TABLES, "--model", "dlp", "--method", "nosuch", drop=("--static",)), "--method"),
    (_with(TABLES, "--method", "highs"), "--method"),
    # decide
    *_values(DECIDE, "--fare", ["-1", "nan", "inf", "abc"]),
    *_values(DECIDE, "--legs", ["", "L1 L1", "L9"], token="legs"),
    (["decide", "/no/such.json", "--legs", "L1", "--fare", "1"], "/no/such.json"),
    # generate
    *_values(GEN, "--products", ["0", "-5", "9", "2000000"]),
    *_values(GEN, "--seed", ["-1"]),
    *_values(GEN, "--hubs", ["0"]),
    *_values(GEN, "--spokes", ["1"]),
    *_values(GEN, "--banks", ["0"]),
    *_values(GEN, "--fare-classes", ["0"]),
    *_values(GEN, "--fare-ratio", ["0", "1.5"]),
    (_with(GEN, "--demand-factor", "2", "1"), "--demand-factor"),
    (_with(GEN, "--demand-factor", "-1", "1"), "--demand-factor"),
    (_with(GEN, "--cv", "-1", "0.5"), "--cv"),
    (_with(GEN, "--cv", "0.6", "0.2"), "--cv"),
    *_values(GEN, "--format", ["xlsx"]),
    *_values(GEN, "--demand", ["poisson 0.7", "nosuch 1", ""]),
    *_values(GEN, "--out", ["", "{file}", "{own}"]),
    *_values(GEN_MKT, "--weight-slope", ["-1", "nan", "x"]),
    *_values(GEN_MKT, "--strong-buy-down-share", ["-0.1", "1.5", "inf"]),
    (_with(GEN, "--weight-slope", "1"), "--markets"),
    (_with(GEN, "--strong-buy-down-share", "0.5"), "--markets"),
    (_with(GEN_MKT, "--demand", "gamma"), "--demand"),
    *_values(GEN_MKT, "--out", ["{file}", "{own}"]),
    # baseline record
    *_values(RECORD, "--repeat", ["0", "-1"]),
    *_values(RECORD, "--suite", ["nosuch"]),
    (["baseline", "record", "--suite", "micro"], "--out"),
    *_values(RECORD, "--out", ["{file}", "{own}"]),
    (_with(RECORD, "--force", "--out", "{own}", drop=("--out",)), "--out"),
    (_with(RECORD, "--force", "--out", "{file}", drop=("--out",)), "--out"),
    # baseline check
    *_values(CHECK, "--repeat", ["0"]),
    *_values(CHECK, "--confirm-runs", ["-1"]),
    *_values(CHECK, "--max-time-growth", ["0.5x", "abc", "2"]),
    *_values(CHECK, "--time-floor", ["-1"]),
    *_values(CHECK, "--rtol-objective", ["-1"]),
    *_values(CHECK, "--rtol-bid", ["nan"]),
    *_values(CHECK, "--certificate-factor", ["-1"]),
    *_values(CHECK, "--override", ["nonsense", "output_file=x"]),
    *_values(CHECK, "--case", ["nosuch"]),
    *_values(CHECK, "--out", ["{file}", "/dev/null"]),
    *_values(CHECK, "--history", ["{dir}", "{file}/h.sqlite"]),
    (["baseline", "check", "/no/such"], "/no/such"),
    # bench
    (["bench", "--revenue-paths", "-1", "--out", "{out}/bench"], "--revenue-paths"),
    (["bench", "--suite", "nosuch", "--out", "{out}/bench"], "--suite"),
    (["bench", "--suite", "micro", "--out", "{file}"], "--out"),
    (["bench", "--suite", "micro", "--out", "{out}/bench", "--history", "{dir}"], "--history"),
    (["bench", "--suite", "micro", "--out", "{out}/bench", "--history", "{file}/h.sqlite"], "--history"),
    (["bench", "compare", "{bench}", "{bench}", "--max-growth", "abc"], "--max-growth"),
    (["bench", "compare", "{bench}", "{bench}", "--max-growth=-10%"], "--max-growth"),
    (["bench", "compare", "{bench}", "{bench}", "--max-growth", "10"], "--max-growth"),
    (["bench", "compare", "{bench}", "{bench}", "--out", "{dir}"], "--out"),
    (["bench", "compare", "{bench}", "{bench}", "--out", "{file}/x.json"], "--out"),
    (["bench", "compare", "{bench}", "{bench}", "--stat", "nosuch"], "--stat"),
    (["bench", "compare", "{bench}", "{bench}", "--accuracy-floor", "-1"], "--accuracy-floor"),
    (["bench", "report", "{bench}", "--out", "{file}"], "--out"),
    (["bench", "report", "/no/such.json"], "/no/such.json"),
    (["bench", "history", "--html", "{dir}"], "--html"),
    (["bench", "history", "--html", "{file}/h.html"], "--html"),
    (["bench", "history", "--max-growth", "abc"], "--max-growth"),
    (["bench", "history", "--accuracy-floor", "-1"], "--accuracy-floor"),
    (["bench", "history", "--add", "{bench}", "--store", "{file}/h.sqlite"], "--store"),
    # size
    *_values(SIZE, "--workers", ["0", "-1"]),
    *_values(SIZE, "--products", ["0"]),
    *_values(SIZE, "--networks", ["0"]),
    *_values(SIZE, "--tol", ["-1"]),
    *_values(SIZE, "--window", ["abc"]),
    *_values(SIZE, "--overhead", ["-1"]),
    *_values(SIZE, "--startup", ["-1"]),
    *_values(SIZE, "--revenue-loss", ["-1", "0"]),
    *_values(SIZE, "--fit-min-products", ["-1"]),
    *_values(SIZE, "--dates", ["0"]),
    *_values(SIZE, "--out", ["{file}", "/dev/null"]),
    # inspect, validate, ladder
    (["inspect", "{inst}", "--top", "0"], "--top"),
    (["inspect", "{inst}", "--top", "-1"], "--top"),
    (["validate", "/no/such"], "/no/such"),
    (["ladder", "--build", "nosuch"], "nosuch"),
]


def _fixtures(root: pathlib.Path) -> dict:
    """The files the command lines refer to, made once (a tiny instance solved by HiGHS)."""
    from decomp import baseline as bl
    from decomp.cli import main
    from decomp.instance import Instance

    inst = write_tiny(root / "inst")
    mkt = write_tiny_markets(root / "mkt")
    res = root / "res.json"
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["solve", str(inst), "--model", "dlp", "--method", "highs", "--out", str(res)]) == 0
    huge = root / "huge.json"
    huge.write_text('{"model": "dlp", "method": "highs", "termination": "optimal", "solution_status": "optimal", '
                    '"bid_prices": {"L1": ' + "1" * 5000 + "}}")
    bench = write_benchmark(root / "benchmark.json")
    base = root / "base"
    tiny = Instance.from_lists([("QAAQHX", "QAA", "QHX", 10.0)], [("p", ["QAAQHX"], 100.0, 20.0, 4.0)],
                               meta={"name": "one"})
    bl.record(base, cases=[bl.Case(tiny, "dlp", "highs")])
    f = root / "file"
    f.write_text("keep\n")
    own = root / "own"
    own.mkdir()
    (own / "notes.txt").write_text("mine\n")
    return {"inst": inst, "mkt": mkt, "res": res, "huge": huge, "bench": bench, "base": base, "file": f, "own": own}


def classify(argv, fx: dict, work: pathlib.Path) -> tuple:
    """('clear' | 'unclear' | 'crash' | 'accepted', message) of one command line, run in ``work``."""
    from decomp.cli import main

    out = work / "out"
    words = {**{k: str(v) for k, v in fx.items()}, "out": str(out), "dir": str(work)}
    args = [a.format(**words) for a in argv[0]]
    token = argv[1].format(**words)
    before = {p.name for p in work.iterdir()}
    err = io.StringIO()
    cwd = os.getcwd()
    os.chdir(work)
    try:
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            rc = main(args)
    except BaseException as exc:  # noqa: BLE001 - a traceback is what the sweep looks for
        return "crash", f"{type(exc).__name__}: {str(exc)[:300]}"
    finally:
        os.chdir(cwd)
    text = err.getvalue()
    if rc == 0:
        return "accepted", text[:300]
    untouched = not out.exists() and {p.name for p in work.iterdir()} == before
    ok = rc == 2 and token in text and "Traceback" not in text and untouched and len(text) < 4000
    return ("clear" if ok else "unclear"), f"rc {rc}, untouched {untouched}: {text[-400:]}"


@pytest.fixture(scope="module")
def fixtures(tmp_path_factory):
    return _fixtures(tmp_path_factory.mktemp("fx"))


def _id(case):
    return " ".join(case[0])[:90]


def test_the_sweep_has_at_least_120_combinations():
    assert len({tuple(c[0]) for c in CASES}) == len(CASES) >= 120


@pytest.mark.solver
@pytest.mark.parametrize("case", CASES, ids=[_id(c) for c in CASES])
def test_bad_option_is_refused_clearly(case, fixtures, tmp_path):
    work = tmp_path / "work"
    work.mkdir()
    verdict, text = classify(case, fixtures, work)
    assert verdict == "clear", (verdict, text)


def sweep() -> dict:
    with tempfile.TemporaryDirectory() as d:
        fx = _fixtures(pathlib.Path(d))
        out = {}
        for k, case in enumerate(CASES):
            work = pathlib.Path(d) / f"w{k}"
            work.mkdir()
            out[_id(case)] = classify(case, fx, work)
    return out


if __name__ == "__main__":
    res = sweep()
    counts: dict = {}
    for name, (verdict, text) in res.items():
        counts[verdict] = counts.get(verdict, 0) + 1
        if verdict != "clear":
            print(f"{verdict:9s} {name}: {text}", file=sys.stderr)
    print(f"{len(res)} bad option combinations: {counts} (crash = traceback, accepted = silently accepted)")
