"""Solver-upgrade regression checks: record what an environment answers, check another against it.

Before Ipopt, HiGHS, Pyomo, numpy or scipy is upgraded, :func:`record` solves a
*suite* of cases (instance x model x method x options) and writes a baseline
folder; after the upgrade, :func:`check` re-solves every case with the recorded
options and compares.

* :mod:`.cases`       what a case is, the tiny seeded networks, the named suites;
* :mod:`.environment` library, solver and source versions, CPU, platform;
* :mod:`.digests`     the allocation digest at fixed significant digits, the instance fingerprint;
* :mod:`.folder`      the folder layout, the manifest, and :func:`load` (verify, then read);
* :mod:`.replay`      the allow-list of solver options a check may replay;
* :mod:`.record`      solve a suite and write the folder (built aside, renamed into place);
* :mod:`.check`       re-solve and compare, thresholds, alternative optimal LP duals;
* :mod:`.report`      verdicts and findings as JSON and Markdown.

Baseline folder (plain files a person can diff)::

    manifest.json            format, suite, every file below with its sha256 and size
    environment.json         Python, numpy, scipy, pyomo, highspy, cyipopt, Ipopt, HiGHS, CPU, platform
    summary.csv              one row per case: status, objective, iterations, seconds
    instances/<name>/...     the instances, as decomp.io writes them (the check re-reads these,
                             so a changed generator or random stream cannot move the inputs)
    cases/<case>/result.json the result in the one output schema (decomp.result: status, objective,
                             certificate, iterations, times, bid prices); under ``context`` the case,
                             instance, fingerprint, wall time, allocation digest, replayed options
    cases/<case>/bid_prices.csv   leg,bid_price (full float precision; what the check compares)

Format version 2 (above); version 1 baselines (a flat result.json, ``leg_id,bid_price``) are
still read.

The whole folder is written into a temporary sibling and renamed into place,
so an interrupted record leaves no half-written baseline; every file is
checked against the manifest before a check starts, and a missing, truncated
or edited file raises :class:`BaselineError` naming the file.

The manifest detects damage, not malice: its hash is unkeyed, so whoever can
edit the folder can recompute it. A baseline is therefore read as data, never
as instructions: every path stays inside the folder and is listed in the
manifest, recorded numbers must be finite where an optimal case needs them,
and only solver options that name no file are replayed (:mod:`.replay`).
"""

from .cases import SUITES, Case, InstanceSpec, micro_instance, suite_cases
from .check import LP_MODELS, Thresholds, check, lp_dual_objective
from .digests import SIG_DIGITS, ZERO_SEATS, allocation_digest, instance_fingerprint, round_significant
from .environment import SOLVER_KEYS, environment, environment_changes, library_versions
from .folder import (ENVIRONMENT, FORMAT, FORMAT_VERSION, MANIFEST, SUMMARY, Baseline, BaselineError, case_view,
                     load, read_bid_prices_csv)
from .record import RecordSummary, record
from .replay import REPLAYABLE, check_replayable
from .report import ALTERNATIVE_DUALS, PASS, REGRESSION, CaseReport, CheckReport, write_report

__all__ = ["SUITES", "Case", "InstanceSpec", "micro_instance", "suite_cases", "LP_MODELS", "Thresholds", "check",
           "lp_dual_objective", "SIG_DIGITS", "ZERO_SEATS", "allocation_digest", "instance_fingerprint",
           "round_significant", "SOLVER_KEYS", "environment", "environment_changes", "library_versions",
           "ENVIRONMENT", "FORMAT", "FORMAT_VERSION", "MANIFEST", "SUMMARY", "Baseline", "BaselineError", "case_view",
           "load",
           "read_bid_prices_csv", "RecordSummary", "record", "REPLAYABLE", "check_replayable",
           "ALTERNATIVE_DUALS", "PASS", "REGRESSION", "CaseReport", "CheckReport", "write_report"]
