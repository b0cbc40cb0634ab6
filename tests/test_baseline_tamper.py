"""A baseline folder is data, not instructions (decomp.baseline.folder, decomp.baseline.replay).

Two kinds of change are tried on a recorded baseline:

* damage (bytes flipped, truncated, appended, files removed) without touching the
  manifest: every one must be refused, naming a file;
* tampering by someone who recomputes the manifest (its hash is unkeyed, so this is
  possible: the manifest detects damage, not malice): paths that leave the folder,
  solver options that write files, non-finite recorded numbers, every case removed.
  These must be refused too, and nothing may be written outside the folder.

The recorded answers come from a canned solver for the two-leg series network whose
optimal duals are worked out by hand in tests/test_baseline.py (LP duality); the option
tests run Ipopt itself, which is what would have written the file.
"""

from __future__ import annotations

import hashlib
import json
import os
import pathlib
import random
import tempfile

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from decomp import baseline as bl
from decomp.errors import ConfigError, InstanceError
from decomp.options import SolverOptions

from test_baseline import _canned_solver, _series

CASE = "cases/series-dlp-highs"


def _record(folder: pathlib.Path) -> pathlib.Path:
    out = folder / "base"
    bl.record(out, cases=[bl.Case(_series(), "dlp", "highs")], solve_fn=_canned_solver([100, 0]))
    return out


@pytest.fixture
def base(tmp_path):
    return _record(tmp_path)


def _rehash(folder: pathlib.Path, files: bool = True) -> None:
    """What a tamperer does after editing: recompute every size, sha256 and the manifest's own hash."""
    mpath = folder / "manifest.json"
    m = json.loads(mpath.read_text())
    for entry in m.get("files", []) if files else []:
        p = folder / str(entry.get("path"))
        if isinstance(entry.get("path"), str) and p.is_file() and not os.path.isabs(entry["path"]):
            data = p.read_bytes()
            entry["sha256"] = hashlib.sha256(data).hexdigest()
            entry["bytes"] = len(data)
    body = {k: v for k, v in m.items() if k != "manifest_sha256"}
    m["manifest_sha256"] = hashlib.sha256(json.dumps(body, sort_keys=True, separators=(",", ":")).encode()).hexdigest()
    mpath.write_text(json.dumps(m))


def _holder(rec, field):
    """The dict of a case's result.json that holds ``field``: the case's own facts (paths, wall time,
    replayed options) sit under ``context``, the result's fields at the top (the one result schema)."""
    return rec["context"] if field in rec["context"] else rec


def _edit_result(folder, change):
    p = folder / CASE / "result.json"
    rec = json.loads(p.read_text())
    change(rec)
    p.write_text(json.dumps(rec))
    _rehash(folder)


def _tree(root: pathlib.Path) -> dict:
    return {str(p.relative_to(root)): (p.stat().st_size, p.stat().st_mtime_ns)
            for p in root.rglob("*") if p.is_file()}


# ---------------------------------------------------------------------------- item 1: options and paths
@pytest.mark.solver
@pytest.mark.parametrize("option", ["output_file", "option_file_name"])
def test_recorded_ipopt_option_naming_a_file_is_refused(tmp_path, option):
    from decomp.cli import main

    out = tmp_path / "base"
    # a PNLP case solved by Ipopt itself, then its recorded options edited to name a file outside
    bl.record(out, cases=[bl.Case(_series(), "pnlp", "ipopt")])
    victim = tmp_path / "victim.txt"
    victim.write_text("precious\n")
    p = out / "cases/series-pnlp-ipopt/result.json"
    rec = json.loads(p.read_text())
    rec["context"]["solver_options"]["solver_options"] = {option: str(victim)}
    p.write_text(json.dumps(rec))
    _rehash(out)
    before = _tree(tmp_path)
    with pytest.raises(bl.BaselineError, match=option) as exc:
        bl.check(out)
    assert exc.value.file == str(p)
    assert main(["baseline", "check", str(out)]) == 2
    assert victim.read_text() == "precious\n" and _tree(tmp_path) == before


@pytest.mark.solver
def test_recorded_highs_log_file_is_refused(tmp_path):
    out = tmp_path / "base"
    bl.record(out, cases=[bl.Case(_series(), "dlp", "highs")])
    p = out / "cases/series-dlp-highs/result.json"
    rec = json.loads(p.read_text())
    rec["context"]["solver_options"]["solver_options"] = {"log_file": str(tmp_path / "new.log")}
    p.write_text(json.dumps(rec))
    _rehash(out)
    with pytest.raises(bl.BaselineError, match="log_file"):
        bl.check(out)
    assert not (tmp_path / "new.log").exists()
    # an allowed option with a path-like value is refused as well (values are numbers or keywords)
    rec["context"]["solver_options"]["solver_options"] = {"solver": "../../x"}
    p.write_text(json.dumps(rec))
    _rehash(out)
    with pytest.raises(bl.BaselineError, match="short keywords"):
        bl.check(out)


def test_override_and_record_apply_the_same_allow_list(base, tmp_path):
    with pytest.raises(ConfigError, match="output_file"):
        bl.check(base, options_override={"solver_options": {"output_file": str(tmp_path / "x")}},
                 solve_fn=_canned_solver([100, 0]))
    with pytest.raises(ConfigError, match="log_file"):
        bl.record(tmp_path / "other", cases=[bl.Case(_series(), "dlp", "highs",
                                                     SolverOptions(solver_options={"log_file": "x"}))],
                  solve_fn=_canned_solver([100, 0]))
    assert not (tmp_path / "other").exists() and not (tmp_path / "x").exists()


@pytest.mark.parametrize("field,value", [
    ("instance_dir", "../../outside"), ("instance_dir", "/etc"), ("instance_dir", "instances/../.."),
    ("instance_dir", "cases"), ("bid_prices_file", "../../../bid_prices.csv"),
    ("bid_prices_file", "/tmp/bid_prices.csv"), ("bid_prices_file", None)])
def test_recorded_paths_stay_inside_the_folder(base, field, value):
    _edit_result(base, lambda rec: _holder(rec, field).__setitem__(field, value))
    with pytest.raises(bl.BaselineError, match=field):
        bl.load(base)


def test_manifest_paths_stay_inside_the_folder(base, tmp_path):
    outside = tmp_path / "outside.txt"
    outside.write_text("x")
    mpath = base / "manifest.json"
    for bad in (str(outside), "../outside.txt", "cases/../../outside.txt", "", 7):
        m = json.loads(mpath.read_text())
        m["files"][0]["path"] = bad
        mpath.write_text(json.dumps(m))
        _rehash(base)
        with pytest.raises(bl.BaselineError, match="inside the baseline folder"):
            bl.load(base)
    # an instance file replaced by a symbolic link to a file outside: refused, not followed
    base2 = _record(tmp_path / "two")
    legs = base2 / "instances/series/legs.csv"
    outside.write_text(legs.read_text())
    legs.unlink()
    legs.symlink_to(outside)
    _rehash(base2)
    with pytest.raises(bl.BaselineError, match="symbolic link"):
        bl.load(base2)


def test_unlisted_file_in_instance_folder_is_refused(base):
    (base / "instances/series/products.parquet").write_bytes(b"PAR1")
    with pytest.raises(bl.BaselineError, match="not listed"):
        bl.load(base)


# ---------------------------------------------------------------------------- format versions
def _as_format_1(folder):
    """Rewrite a baseline as format 1 wrote it: a flat result.json, the header leg_id,bid_price."""
    rp = folder / CASE / "result.json"
    flat = bl.case_view(json.loads(rp.read_text()))
    for k in ("schema", "schema_version", "ok"):
        flat.pop(k)
    rp.write_text(json.dumps(flat))
    bp = folder / CASE / "bid_prices.csv"
    bp.write_text(bp.read_text().replace("leg,bid_price", "leg_id,bid_price", 1))
    m = json.loads((folder / "manifest.json").read_text())
    m["format_version"] = 1
    (folder / "manifest.json").write_text(json.dumps(m))
    _rehash(folder)


def test_format_1_baseline_is_still_checked(base):
    assert json.loads((base / "manifest.json").read_text())["format_version"] == bl.FORMAT_VERSION == 2
    _as_format_1(base)
    loaded = bl.load(base)
    assert loaded.cases[0]["options"]["tol"] == SolverOptions().tol
    assert bl.check(base, solve_fn=_canned_solver([100, 0])).cases[0].verdict == bl.PASS
    # and its hostile paths are refused the same way
    _edit_result(base, lambda rec: rec.__setitem__("bid_prices_file", "../../../bid_prices.csv"))
    with pytest.raises(bl.BaselineError, match="bid_prices_file"):
        bl.load(base)


def test_format_2_case_without_context_or_schema_is_refused(base):
    _edit_result(base, lambda rec: rec.pop("context"))
    with pytest.raises(bl.BaselineError, match="context"):
        bl.load(base)
    _edit_result(base, lambda rec: rec.__setitem__("schema_version", 99))
    with pytest.raises(bl.BaselineError, match="schema"):
        bl.load(base)


def test_schema_options_are_not_replayed(base, tmp_path):
    # the schema's own "options" (what the method reported) are data: only context.solver_options replay
    _edit_result(base, lambda rec: rec.__setitem__("options", {"solver_options": {"log_file": str(tmp_path / "x")}}))
    assert bl.check(base, solve_fn=_canned_solver([100, 0])).cases[0].verdict == bl.PASS
    assert not (tmp_path / "x").exists()


# ---------------------------------------------------------------------------- item 2: values that must not pass
@pytest.mark.parametrize("value", ["nan", "inf", "-inf"])
def test_non_finite_recorded_bid_price_is_refused(base, value):
    p = base / CASE / "bid_prices.csv"
    p.write_text(p.read_text().replace("100.0", value))
    _rehash(base)
    with pytest.raises(bl.BaselineError, match="NaN or infinite") as exc:
        bl.check(base, solve_fn=_canned_solver([100, 0]))
    assert exc.value.row == 1 and exc.value.column == "bid_price"


@pytest.mark.parametrize("field", ["objective", "wall_seconds"])
def test_non_finite_recorded_number_is_refused(base, field):
    _edit_result(base, lambda rec: _holder(rec, field).__setitem__(field, "nan"))
    with pytest.raises(bl.BaselineError, match="NaN or infinite"):
        bl.load(base)


def test_non_finite_bid_price_of_a_non_optimal_case_never_passes(tmp_path):
    # A case recorded at its iteration limit may carry a NaN bid price; it is kept, and a leg whose
    # recorded bid price is not finite always counts as moved (NaN compares false with any limit).
    out = tmp_path / "base"
    from decomp.result import Termination

    bl.record(out, cases=[bl.Case(_series(), "dlp", "highs")],
              solve_fn=_canned_solver([float("nan"), 0], termination=Termination.ITERATION_LIMIT))
    rep = bl.check(out, solve_fn=_canned_solver([100, 0]))
    assert rep.cases[0].metrics["bid_moved_legs"] == ["QAAQHX"]


def test_every_case_removed_is_refused(base):
    m = json.loads((base / "manifest.json").read_text())
    m["cases"] = []
    m["files"] = [f for f in m["files"] if not f["path"].startswith("cases/")]
    (base / "manifest.json").write_text(json.dumps(m))
    _rehash(base)
    with pytest.raises(bl.BaselineError, match="records no case"):
        bl.check(base, solve_fn=_canned_solver([100, 0]))


@pytest.mark.parametrize("key", ["path", "sha256", "bytes"])
def test_manifest_entry_without_a_field_is_an_error_not_a_traceback(base, key, capsys):
    from decomp.cli import main

    m = json.loads((base / "manifest.json").read_text())
    del m["files"][0][key]
    (base / "manifest.json").write_text(json.dumps(m))
    _rehash(base, files=False)
    with pytest.raises(bl.BaselineError):
        bl.load(base)
    assert main(["baseline", "check", str(base)]) == 2
    assert "manifest.json" in capsys.readouterr().err


# ---------------------------------------------------------------------------- property: random corruption
def _damage(folder: pathlib.Path, rnd: random.Random) -> str:
    """One random damage to a file of the folder, manifest untouched; returns what was done.
    (decomp's .decomp markers are left alone: they only say who may replace the folder, and no answer
    is read from them.)"""
    files = sorted(p for p in folder.rglob("*") if p.is_file() and p.name != ".decomp")
    p = rnd.choice(files)
    data = bytearray(p.read_bytes())
    kind = rnd.choice(["flip", "truncate", "append", "delete", "zero", "swap"])
    if kind == "flip" and data:
        i = rnd.randrange(len(data))
        data[i] ^= 1 << rnd.randrange(8)
    elif kind == "truncate":
        data = data[:rnd.randrange(len(data) + 1) if data else 0]
        if len(data) == p.stat().st_size:
            data = data[:-1]
    elif kind == "append":
        data += bytes(rnd.randrange(256) for _ in range(rnd.randint(1, 20)))
    elif kind == "delete":
        p.unlink()
        return f"delete {p.name}"
    elif kind == "zero":
        data = bytearray(len(data))
        if not data or p.read_bytes() == bytes(len(data)):
            data += b"\0"
    elif kind == "swap":
        # another file's content (a newline appended to manifest.json would change no JSON value, and
        # the manifest is checked by its content's hash, not its bytes: not damage)
        other = rnd.choice([f for f in files if f != p])
        if other.read_bytes() == bytes(data):
            data += b"\n"
        else:
            data = bytearray(other.read_bytes())
    if kind == "flip" and not data:
        data = bytearray(b"x")
    p.write_bytes(bytes(data))
    return f"{kind} {p.relative_to(folder)}"


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 3))
def test_random_damage_never_passes_and_writes_nothing(seed, n):
    rnd = random.Random(seed)
    with tempfile.TemporaryDirectory() as d:
        root = pathlib.Path(d)
        out = _record(root)
        done = [_damage(out, rnd) for _ in range(n)]
        before = _tree(root)
        with pytest.raises(InstanceError):           # BaselineError or an instance error naming a file
            bl.check(out, solve_fn=_canned_solver([100, 0]))
        assert _tree(root) == before, done


_HOSTILE = ["/etc/passwd", "../x", "../../x", "cases/../../x", "instances/..", "", "a\0b", "/", ".",
            "instances/series/../../../x", "~/x", "C:\\x", 12, None, ["instances/series"], {"p": 1}]
_OPTION_KEYS = ["output_file", "log_file", "option_file_name", "solution_file", "write_model_file",
                "tol", "max_iter", "presolve", "print_level"]
_OPTION_VALUES = ["/tmp/x", "../x", "yes", 3, 1e-8, float("inf"), None, [1], "a" * 200]


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_random_tampering_is_refused_or_regresses_and_writes_nothing_outside(data):
    """Edits with a recomputed manifest: hostile paths and options are refused; edited answers do not
    pass; nothing is ever written outside the folder (the folder's parent is compared file by file)."""
    kind = data.draw(st.sampled_from(["path", "option", "number", "bid_price", "drop_key"]))
    with tempfile.TemporaryDirectory() as d:
        root = pathlib.Path(d)
        out = _record(root)
        rp = out / CASE / "result.json"
        rec = json.loads(rp.read_text())
        must_refuse = True
        if kind == "path":
            field = data.draw(st.sampled_from(["instance_dir", "bid_prices_file", "manifest"]))
            value = data.draw(st.sampled_from(_HOSTILE))
            if field == "manifest":
                m = json.loads((out / "manifest.json").read_text())
                m["files"][data.draw(st.integers(0, len(m["files"]) - 1))]["path"] = value
                (out / "manifest.json").write_text(json.dumps(m))
            else:
                _holder(rec, field)[field] = value
        elif kind == "option":
            key = data.draw(st.sampled_from(_OPTION_KEYS))
            value = data.draw(st.sampled_from(_OPTION_VALUES))
            rec["context"]["solver_options"]["solver_options"] = {key: value}
            plain = (isinstance(value, (int, float)) and value != float("inf")) or value == "yes"
            must_refuse = key in ("output_file", "log_file", "option_file_name", "solution_file",
                                  "write_model_file") or not plain
        elif kind == "number":
            field = data.draw(st.sampled_from(["objective", "wall_seconds"]))
            _holder(rec, field)[field] = data.draw(st.sampled_from(["nan", "inf", "-inf", "text", None, [], -1.0]))
            must_refuse = _holder(rec, field)[field] != -1.0       # -1 is a number: an objective regresses, a time is refused
        elif kind == "bid_price":
            value = data.draw(st.sampled_from(["nan", "inf", "-1e308", "-5.0", "1e308", "99.0", "abc", ""]))
            bp = out / CASE / "bid_prices.csv"
            bp.write_text(bp.read_text().replace("100.0", value))
            must_refuse = value in ("nan", "inf", "abc", "", "-1e308", "-5.0")   # bid prices are >= 0
        else:
            key = data.draw(st.sampled_from(["case", "model", "solver_options", "instance_dir", "termination",
                                             "instance_fingerprint", "wall_seconds"]))
            _holder(rec, key).pop(key)
        if kind != "bid_price":
            rp.write_text(json.dumps(rec))
        _rehash(out)
        before = {k: v for k, v in _tree(root).items() if not k.startswith("base")}
        try:
            rep = bl.check(out, solve_fn=_canned_solver([100, 0]))
        except (InstanceError, ConfigError):
            refused = True
        else:
            refused = False
            if kind == "number":                  # an edited recorded objective is a regression
                assert rep.regression, rep.to_markdown()
            if kind == "bid_price":
                # An edited recorded bid price never passes unnoticed: the leg is reported as moved, and
                # the verdict is a regression, or (an LP) alternative_duals when the new bid prices are
                # verified optimal duals (LP duality) -- the check judges the new answer, and that one
                # is right whatever the edited file says.
                assert rep.cases[0].verdict in (bl.REGRESSION, bl.ALTERNATIVE_DUALS), rep.to_markdown()
                assert rep.cases[0].metrics["bid_moved_legs"] == ["QAAQHX"]
        assert refused or not must_refuse, (kind, rec)
        after = {k: v for k, v in _tree(root).items() if not k.startswith("base")}
        assert after == before
