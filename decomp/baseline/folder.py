"""The baseline folder: its layout, its manifest, and reading it back verified.

Everything :func:`load` returns was read from a file listed in the manifest,
inside the folder, whose size and sha256 match. The manifest's own hash is
unkeyed: it detects damage (truncation, a stray edit, a lost file), not malice
-- whoever can edit the folder can recompute it. So nothing read from a
baseline is trusted to choose a path or a solver option: paths must be
relative, stay inside the folder and be listed; recorded options are replayed
only through the allow-list of :mod:`.replay`.
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as _dt
import io as _io
import json
import math
import pathlib
import re
from typing import Mapping

import numpy as np

from .. import atomic
from ..errors import InstanceError
from ..instance import Instance
from ..paths import MARKER
from ..result import SCHEMA, SCHEMA_VERSION
from ..tables import BID_PRICE_COLUMNS
from ..atomic import file_sha256
from .digests import _sha256_bytes

FORMAT = "decomp-baseline"
#: 2: each case's result.json is the one result schema (``decomp.result``), the case's own facts under
#: ``context``; bid_prices.csv has the header ``leg,bid_price``. 1: the flat case record before it,
#: header ``leg_id,bid_price``. Both are read.
FORMAT_VERSION = 2
READABLE_VERSIONS = (1, 2)
MANIFEST = "manifest.json"
ENVIRONMENT = "environment.json"
SUMMARY = "summary.csv"
BID_PRICES = "bid_prices.csv"
MODELS = ("dlp", "pnlp", "pwl")

#: One component of a path inside a baseline: what ``cases._safe_name`` makes (no '.', '..', '/').
_PART = re.compile(r"[A-Za-z0-9_-][A-Za-z0-9._-]{0,254}")
_SHA256 = re.compile(r"[0-9a-f]{64}")


class BaselineError(InstanceError):
    """A baseline folder is missing, incomplete, truncated, edited by hand, or asks for what a
    baseline may not (a path outside the folder, a solver option that writes a file).

    A subclass of :class:`~decomp.errors.InstanceError` (the baseline is input
    to ``decomp baseline check``), so it carries the file and the command line
    exits with code 2.
    """


# --------------------------------------------------------------------------- bid-price CSV
def _bid_prices_csv(leg_ids, pi) -> str:
    buf = _io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(BID_PRICE_COLUMNS))
    if pi is not None:
        for lid, v in zip(leg_ids, np.asarray(pi, dtype=np.float64).tolist()):
            w.writerow([lid, repr(float(v))])
    return buf.getvalue()


def read_bid_prices_csv(path, *, finite: bool = False) -> tuple:
    """(leg ids, bid prices) from a baseline's bid_prices.csv, with errors naming row and column.

    ``finite``: a NaN or infinite bid price is an error (a case recorded optimal has none).
    """
    path = pathlib.Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise BaselineError("baseline file is missing", file=path) from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise BaselineError(f"cannot read the file ({exc})", file=path) from exc
    try:
        rows = list(csv.reader(_io.StringIO(text)))
    except csv.Error as exc:
        raise BaselineError(f"not a readable CSV file ({exc})", file=path) from exc
    if not rows or rows[0] not in (list(BID_PRICE_COLUMNS), ["leg_id", "bid_price"]):   # leg_id: version 1
        raise BaselineError("expected the header 'leg,bid_price'", file=path, row=0)
    legs, vals = [], []
    for k, row in enumerate(rows[1:], start=1):
        if len(row) != 2:
            raise BaselineError(f"expected 2 fields, found {len(row)}", file=path, row=k)
        try:
            v = float(row[1])
        except ValueError as exc:
            raise BaselineError("bid price is not a number", file=path, row=k, column="bid_price",
                                value=_short(row[1])) from exc
        if finite and not math.isfinite(v):
            raise BaselineError("bid price is NaN or infinite in a case recorded optimal", file=path, row=k,
                                column="bid_price", value=row[1])
        legs.append(row[0])
        vals.append(v)
    return legs, np.array(vals, dtype=np.float64)


def _short(v, limit: int = 200):
    s = str(v)
    return s if len(s) <= limit else s[:limit] + f"... ({len(s)} characters)"


# --------------------------------------------------------------------------- manifest
def _manifest_self_hash(manifest: Mapping) -> str:
    """sha256 of the manifest without this field. Unkeyed: it detects damage, not malice."""
    body = {k: v for k, v in manifest.items() if k != "manifest_sha256"}
    return _sha256_bytes(json.dumps(body, sort_keys=True, separators=(",", ":")).encode())


def _write_manifest(folder: pathlib.Path, suite, case_ids) -> None:
    files = []
    for p in sorted(folder.rglob("*")):
        if p.is_file() and p.name != MANIFEST and not p.name.startswith("."):
            rel = p.relative_to(folder).as_posix()
            files.append({"path": rel, "sha256": file_sha256(p), "bytes": p.stat().st_size})
    manifest = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "suite": suite,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "cases": list(case_ids),
        "files": files,
    }
    manifest["manifest_sha256"] = _manifest_self_hash(manifest)
    atomic.write_json(folder / MANIFEST, manifest)


# --------------------------------------------------------------------------- paths inside the folder
def inside(base: pathlib.Path, rel, *, file, what: str) -> pathlib.Path:
    """``base / rel`` after checking that ``rel`` is a relative path of plain components and that
    no component on the way is a symbolic link (so the path cannot leave ``base``)."""
    if not isinstance(rel, str) or not rel:
        raise BaselineError(f"{what} must be a relative path inside the baseline folder", file=file,
                            value=_short(rel))
    parts = rel.split("/")
    if len(rel) > 1024 or not all(_PART.fullmatch(p) for p in parts):
        raise BaselineError(f"{what} must be a relative path inside the baseline folder (plain names "
                            f"separated by '/', no '..', no absolute path)", file=file, value=_short(rel))
    p = base
    for part in parts:
        p = p / part
        if p.is_symlink():
            raise BaselineError(f"{what} passes through a symbolic link; a baseline holds plain files only",
                                file=p)
    return p


# --------------------------------------------------------------------------- load and verify
def _read_json(path: pathlib.Path):
    """The JSON in a baseline file; a missing, unreadable or malformed one is a BaselineError (an
    integer of 4,300 digits and a key listed twice included: see :mod:`decomp.jsonfile`)."""
    from .. import jsonfile

    value = jsonfile.read(path, error=BaselineError, missing="baseline file is missing")
    return value


@dataclasses.dataclass(frozen=True)
class Baseline:
    path: pathlib.Path
    manifest: Mapping
    environment: Mapping
    cases: tuple      # case records (:func:`case_view` of each result.json), in recorded order, each with
                      # 'bid_prices' (legs, array) read from its bid_prices.csv


def load(path) -> Baseline:
    """Read a baseline folder after checking every file against the manifest.

    Raises :class:`BaselineError` naming the file when the folder is not a
    baseline, when a listed file is missing, when its size or sha256 differs
    from the manifest (truncated or edited after recording), when the manifest
    or a case record is malformed, names a path outside the folder, records no
    case, a non-finite number where an optimal case needs a finite one, or a
    solver option that may not be replayed (:mod:`.replay`).
    """
    path = pathlib.Path(path)
    if not path.is_dir():
        raise BaselineError("baseline folder not found; record one with 'decomp baseline record'", file=path)
    mpath = path / MANIFEST
    if not mpath.exists():
        raise BaselineError("no manifest.json: not a baseline folder (record one with 'decomp baseline record')",
                            file=mpath)
    if mpath.is_symlink() or not mpath.is_file():
        raise BaselineError("manifest.json must be a plain file", file=mpath)
    manifest = _read_json(mpath)
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        raise BaselineError(f"not a {FORMAT} manifest", file=mpath, column="format")
    version = manifest.get("format_version")
    if isinstance(version, bool) or version not in READABLE_VERSIONS:
        raise BaselineError(f"format_version {_short(version)!r} is not supported "
                            f"(this decomp reads {', '.join(map(str, READABLE_VERSIONS))}); re-record the baseline",
                            file=mpath, column="format_version")
    if manifest.get("manifest_sha256") != _manifest_self_hash(manifest):
        raise BaselineError("manifest.json was edited after recording (its manifest_sha256 does not match "
                            "its content); re-record the baseline", file=mpath, column="manifest_sha256")
    listed = _verify_files(path, mpath, manifest.get("files"))
    if ENVIRONMENT not in listed:
        raise BaselineError(f"{ENVIRONMENT} is not listed in manifest.json", file=mpath, column="files")
    env = _read_json(listed[ENVIRONMENT])
    if not isinstance(env, dict):
        raise BaselineError("environment.json must hold a JSON object", file=listed[ENVIRONMENT])
    case_ids = manifest.get("cases")
    if not isinstance(case_ids, list) or not all(isinstance(c, str) and _PART.fullmatch(c) for c in case_ids):
        raise BaselineError("'cases' must be a list of case ids (plain names)", file=mpath, column="cases")
    if len(set(case_ids)) != len(case_ids):
        raise BaselineError("a case id is listed twice", file=mpath, column="cases")
    if not case_ids:
        raise BaselineError("the baseline records no case: there is nothing to check against", file=mpath,
                            column="cases")
    cases = [_load_case(path, listed, cid, version) for cid in case_ids]
    return Baseline(path, manifest, env, tuple(cases))


def _verify_files(path: pathlib.Path, mpath: pathlib.Path, files) -> dict:
    """{relative path: absolute path} of the manifest's files, each checked (inside, size, sha256)."""
    if not isinstance(files, list):
        raise BaselineError("'files' must be a list", file=mpath, column="files")
    listed = {}
    for k, entry in enumerate(files, start=1):
        if not isinstance(entry, dict):
            raise BaselineError(f"files entry {k} is not an object", file=mpath, column="files")
        rel, digest_rec, size_rec = entry.get("path"), entry.get("sha256"), entry.get("bytes")
        fpath = inside(path, rel, file=mpath, what=f"files entry {k} 'path'")
        if not (isinstance(digest_rec, str) and _SHA256.fullmatch(digest_rec)):
            raise BaselineError(f"files entry {k} needs 'sha256' (64 hex digits)", file=mpath, column="files")
        if not (isinstance(size_rec, int) and not isinstance(size_rec, bool) and size_rec >= 0):
            raise BaselineError(f"files entry {k} needs 'bytes' (a whole number >= 0)", file=mpath,
                                column="files")
        if rel in listed or rel == MANIFEST:
            raise BaselineError(f"files entry {k} lists {rel!r} again", file=mpath, column="files")
        if not fpath.is_file():
            raise BaselineError("baseline file listed in manifest.json is missing", file=fpath)
        size = fpath.stat().st_size
        if size != size_rec:
            raise BaselineError(f"baseline file has {size} bytes, manifest.json recorded {size_rec}: "
                                f"truncated or edited after recording; re-record the baseline", file=fpath)
        digest = file_sha256(fpath)
        if digest != digest_rec:
            raise BaselineError(f"baseline file's sha256 {digest[:12]}... differs from manifest.json's "
                                f"{digest_rec[:12]}...: edited after recording; re-record the baseline",
                                file=fpath)
        listed[rel] = fpath
    return listed


def _number(rec, key, rpath, *, finite: bool, nullable: bool = True):
    """A recorded number: None, a float, or 'inf'/'-inf'/'nan' (see ``digests._num``); ``finite``
    refuses the non-finite ones."""
    v = rec.get(key)
    if v is None and nullable:
        return None
    if isinstance(v, bool) or not isinstance(v, (int, float, str)):
        raise BaselineError("not a number", file=rpath, column=key, value=_short(v))
    try:
        x = float(v)
    except ValueError:
        raise BaselineError("not a number", file=rpath, column=key, value=_short(v)) from None
    if isinstance(v, str) and v not in ("inf", "-inf", "nan"):
        raise BaselineError("not a number", file=rpath, column=key, value=_short(v))
    if finite and not math.isfinite(x):
        raise BaselineError("NaN or infinite value in a case recorded optimal", file=rpath, column=key,
                            value=v)
    return x


def case_view(data: Mapping) -> dict:
    """A case's result.json (format 2: the one result schema) as the flat record the check reads.

    The schema's fields stay (model, method, termination, objective, certificate, ...); the case's
    own facts come up from ``context`` (case, instance, instance_fingerprint, instance_dir,
    wall_seconds, bid_prices_file); ``options`` are the recorded case's ``solver_options`` (what a
    check replays; the schema's ``options`` are what the method reports, and may hold keys
    :class:`~decomp.options.SolverOptions` refuses) and ``allocation`` its ``allocation_digest``.
    """
    ctx = data.get("context")
    ctx = ctx if isinstance(ctx, Mapping) else {}
    view = {k: v for k, v in data.items() if k not in ("context", "options", "bid_prices", "history")}
    view.update(ctx)
    view.pop("solver_options", None)
    view.pop("allocation_digest", None)
    view["options"] = ctx.get("solver_options")
    view["allocation"] = ctx.get("allocation_digest")
    return view


def _load_case(path: pathlib.Path, listed: Mapping, cid: str, version: int = FORMAT_VERSION) -> dict:
    from .replay import check_recorded_options

    rel = f"cases/{cid}/result.json"
    rpath = path / rel
    if rel not in listed:
        raise BaselineError(f"case {cid!r} has no result.json listed in manifest.json", file=rpath)
    rec = _read_json(rpath)
    if not isinstance(rec, dict):
        raise BaselineError("result.json must hold a JSON object", file=rpath)
    if version >= 2:
        if rec.get("schema") != SCHEMA or rec.get("schema_version") != SCHEMA_VERSION:
            raise BaselineError(f"result.json is not in the result schema {SCHEMA!r} version {SCHEMA_VERSION}",
                                file=rpath, column="schema_version", value=_short(rec.get("schema_version")))
        if not isinstance(rec.get("context"), dict):
            raise BaselineError("result.json has no 'context' object (the case's own facts)", file=rpath,
                                column="context")
        rec = case_view(rec)
    if rec.get("case") != cid:
        raise BaselineError(f"result.json is for case {_short(rec.get('case'))!r}, not {cid!r}", file=rpath,
                            column="case")
    for key in ("model", "method", "termination", "solution_status", "instance_fingerprint"):
        if not isinstance(rec.get(key), str):
            raise BaselineError("missing or not text", file=rpath, column=key, value=_short(rec.get(key)))
    if rec["model"] not in MODELS:
        raise BaselineError(f"unknown model; known: {', '.join(MODELS)}", file=rpath, column="model",
                            value=_short(rec["model"]))
    optimal = rec["termination"] == "optimal" and rec["solution_status"] == "optimal"
    for key in ("objective", "bound", "gap"):
        _number(rec, key, rpath, finite=optimal and key == "objective",
                nullable=not (optimal and key == "objective"))
    for key, nullable in (("wall_seconds", False), ("cpu_seconds", True)):   # cpu_seconds: from issue 24 on
        t = _number(rec, key, rpath, finite=True, nullable=nullable)
        if t is not None and t < 0:
            raise BaselineError(f"{key} must be >= 0", file=rpath, column=key, value=t)
    cert = rec.get("certificate")
    if cert is not None:
        if not isinstance(cert, dict):
            raise BaselineError("certificate must be an object or null", file=rpath, column="certificate")
        for key in ("gap", "max_violation_rel", "kkt_residual"):
            _number(cert, key, rpath, finite=optimal and key == "gap")
    rec["options"] = check_recorded_options(rec.get("options"), rpath)
    # the instance: a folder under instances/ whose every file is listed (read_instance reads the folder)
    idir = rec.get("instance_dir")
    folder = inside(path, idir, file=rpath, what="instance_dir")
    if not (isinstance(idir, str) and idir.startswith("instances/") and idir.count("/") == 1):
        raise BaselineError("instance_dir must be instances/<name>", file=rpath, column="instance_dir",
                            value=_short(idir))
    if not folder.is_dir():
        raise BaselineError("the case's instance folder is missing", file=folder)
    for p in folder.iterdir():
        if p.name == MARKER and not p.is_symlink():
            continue                       # decomp's marker: never read as instance data
        if f"{idir}/{p.name}" not in listed or p.is_symlink():
            raise BaselineError("a file in the instance folder is not listed in manifest.json (an instance "
                                "is read from verified files only)", file=p)
    name = rec.get("bid_prices_file", BID_PRICES)
    bpath = inside(path, f"cases/{cid}/{name}" if isinstance(name, str) and "/" not in name else None,
                   file=rpath, what="bid_prices_file")
    if f"cases/{cid}/{name}" not in listed:
        raise BaselineError("the case's bid-price file is not listed in manifest.json", file=bpath)
    legs, pi = read_bid_prices_csv(bpath, finite=optimal)
    n_legs = rec.get("n_legs")
    if optimal and not len(pi):
        raise BaselineError("a case recorded optimal has no bid prices (the file holds its header only): it "
                            "was cut or edited after recording, and the check would compare nothing; "
                            "re-record the baseline", file=bpath)
    if optimal and isinstance(n_legs, int) and not isinstance(n_legs, bool) and len(pi) != n_legs:
        raise BaselineError(f"{len(pi)} bid prices for a case recorded optimal on {n_legs} legs: the file was "
                            f"cut or edited after recording; re-record the baseline", file=bpath)
    if len(set(legs)) < len(legs):
        dup = next(l for k, l in enumerate(legs) if l in legs[:k])
        raise BaselineError(f"leg '{_short(dup)}' is listed twice", file=bpath, row=legs.index(dup, legs.index(dup) + 1) + 1,
                            column="leg")
    if optimal and len(pi):
        floor = -1e-6 * max(1.0, float(np.max(np.abs(pi))))
        if pi.min() < floor:
            k = int(np.argmin(pi))
            raise BaselineError("negative bid price in a case recorded optimal (bid prices are >= 0)",
                                file=bpath, row=k + 1, column="bid_price", value=float(pi[k]))
    rec["bid_prices"] = (legs, pi)
    rec["instance_path"] = folder
    return rec


def read_case_instance(base: Baseline, rec: Mapping) -> Instance:
    """The case's instance, read from its verified folder inside the baseline."""
    from .. import io as dio

    return dio.read_instance(rec["instance_path"])
