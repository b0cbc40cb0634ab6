"""What the answers may depend on: library and solver versions, the decomp source, CPU, platform."""

from __future__ import annotations

import hashlib
import os
import pathlib
import platform
from typing import Mapping

import numpy as np

# --------------------------------------------------------------------------- environment
def _dist_version(*names) -> str | None:
    import importlib.metadata as md

    for n in names:
        try:
            return md.version(n)
        except md.PackageNotFoundError:
            continue
    return None


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.lower().startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def _source_digest() -> str:
    """sha256 over the decomp package's and the Pyomo models' Python sources (path and content),
    so that a code change without a version bump (or uncommitted) shows in the environment."""
    root = pathlib.Path(__file__).resolve().parent.parent
    h = hashlib.sha256()
    for folder in (root, root.parent / "models"):
        if not folder.is_dir():
            continue
        for p in sorted(folder.rglob("*.py")):
            h.update(p.relative_to(root.parent).as_posix().encode() + b"\0")
            h.update(p.read_bytes() + b"\0")
    return h.hexdigest()


def _git_commit() -> str | None:
    """The checkout's commit (with '+dirty' when files differ), or None outside a git checkout."""
    import subprocess

    cwd = pathlib.Path(__file__).resolve().parent.parent.parent
    try:
        head = subprocess.run(["git", "rev-parse", "HEAD"], cwd=cwd, capture_output=True, text=True, timeout=10)
        if head.returncode != 0:
            return None
        dirty = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no", "--", "decomp", "models"],
                               cwd=cwd, capture_output=True, text=True, timeout=10)
    except (OSError, subprocess.SubprocessError):
        return None
    return head.stdout.strip() + ("+dirty" if dirty.stdout.strip() else "")


def environment() -> dict:
    """What the answers may depend on: library and solver versions, CPU, platform."""
    env: dict = {
        "python": platform.python_version(),
        "python_implementation": platform.python_implementation(),
        "platform": platform.platform(),
        "machine": platform.machine(),
        "cpu_model": _cpu_model(),
        "cpu_count_logical": os.cpu_count(),
    }
    try:
        import psutil

        env["cpu_count_physical"] = psutil.cpu_count(logical=False)
    except ImportError:
        env["cpu_count_physical"] = None
    if hasattr(os, "sched_getaffinity"):
        env["cpu_count_usable"] = len(os.sched_getaffinity(0))
    env["decomp"] = _dist_version("decomp")
    env["decomp_source_sha256"] = _source_digest()
    env["decomp_git_commit"] = _git_commit()
    env.update(library_versions())
    return env


def library_versions(ipopt: bool = True) -> dict:
    """Versions of the libraries and solvers the answers depend on (no solver object is built).

    ``ipopt=False`` leaves out the linked Ipopt library's version, which only
    importing cyipopt (a slow import) can tell; ``decomp solve`` asks for it when Ipopt ran.
    """
    env: dict = {"python": platform.python_version()}
    env["numpy"] = np.__version__
    try:
        blas = np.show_config(mode="dicts")["Build Dependencies"]["blas"]
        env["numpy_blas"] = f"{blas.get('name')} {blas.get('version')}"
    except (TypeError, KeyError, AttributeError):   # numpy < 2 has no dict mode; informative only
        env["numpy_blas"] = None
    for mod, dists in (("scipy", ("scipy",)), ("pyomo", ("pyomo", "Pyomo")),
                       ("highspy", ("highspy",)), ("cyipopt", ("cyipopt", "cyipopt-wheels"))):
        env[mod] = _dist_version(*dists)
    # HiGHS library version: the compile-time constants of highspy's bundled library
    # (reading them does not construct a Highs object, which prints a banner).
    try:
        import highspy

        env["highs_library"] = "{}.{}.{}".format(highspy.HIGHS_VERSION_MAJOR, highspy.HIGHS_VERSION_MINOR,
                                                 highspy.HIGHS_VERSION_PATCH)
    except (ImportError, AttributeError):
        env["highs_library"] = None
    # Ipopt library version: cyipopt exposes the linked Ipopt's version as a tuple.
    if not ipopt:
        return env
    try:
        import cyipopt

        env["ipopt_library"] = ".".join(str(v) for v in cyipopt.IPOPT_VERSION)
    except (ImportError, AttributeError):
        env["ipopt_library"] = None
    return env


#: Environment keys that change the answers (a difference is listed first in the report).
SOLVER_KEYS = ("highs_library", "ipopt_library", "highspy", "cyipopt", "pyomo", "numpy", "numpy_blas",
               "scipy", "python", "decomp", "decomp_source_sha256", "decomp_git_commit")


def environment_changes(old: Mapping, new: Mapping) -> list:
    """[(key, old, new)] for every environment entry that differs, solver-relevant keys first."""
    keys = [k for k in SOLVER_KEYS if k in old or k in new]
    keys += sorted((set(old) | set(new)) - set(keys))
    return [(k, old.get(k), new.get(k)) for k in keys if old.get(k) != new.get(k)]
