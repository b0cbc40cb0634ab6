"""``check``: re-solve every recorded case and compare with what was recorded.

DLP bid prices need not be unique (a degenerate LP has many optimal duals). A
DLP case whose objective is unchanged but whose bid prices moved is checked
for dual feasibility (pi >= 0) and for the LP dual objective
c.pi + sum_j mean_j (f_j - a_j)^+ equal to the recorded optimum; when both
hold, the case is reported as ``alternative_duals`` (legs named), not as a
regression (LP duality: a dual-feasible point whose dual objective equals the
primal optimum is an optimal dual). The PWL model, an LP too, is treated the
same way with its own dual objective (both from :mod:`decomp.certify`), and so is a
PNLP whose every product has discrete or known demand (piecewise linear: an LP), with
the Lagrangian dual q(pi) (weak duality makes any pi >= 0 with q(pi) equal to the
optimum an optimal dual).
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import logging
import math
import time
from typing import Callable, Mapping, Sequence

import numpy as np

from ..certify import relative_gap
from ..errors import ConfigError
from ..instance import Instance
from ..options import SolverOptions
from .environment import environment, environment_changes
from .cases import unavailable_pairs
from .digests import SIG_DIGITS, optional_float, allocation_digest, instance_fingerprint
from .folder import load, read_case_instance
from .record import default_solve, timed_solve
from .replay import check_replayable
from .report import ALTERNATIVE_DUALS, PASS, CaseReport, CheckReport, format_value

log = logging.getLogger(__name__)

LP_MODELS = ("dlp", "pwl")

# --------------------------------------------------------------------------- thresholds
@dataclasses.dataclass(frozen=True)
class Thresholds:
    """What counts as a regression; None picks a default that fits the case's method and tolerance.

    objective_rtol: |obj_new - obj_old| / max(1, |obj_old|); default max(10 tol, 1e-9).
    bid_rtol, bid_atol: a leg's bid price regresses when |pi_new - pi_old| > bid_atol + bid_rtol |pi_old|;
        defaults: LP models (dlp, pwl) rtol 1e-7; PNLP rtol max(1e-6, 1e3 tol);
        bid_atol defaults to bid_rtol * max(1, max_i |pi_old_i|) (the case's bid-price scale).
    allocation_rtol: relative change of the allocation's sum, min or max (scale max(1, |old max|));
        default max(1e-5, 1e3 tol) for the PNLP; LP allocations may be non-unique and are only noted.
    gap_floor, violation_floor, kkt_floor, certificate_factor: a certificate measure regresses
        when new > max(certificate_factor * old, floor); gap_floor defaults to the recorded tol (the
        certified gap the case was asked for: an answer now less accurate than requested regresses).
    time_ratio, time_floor: the solve's time regresses when max(new, floor) / max(old, floor) > time_ratio
        (the floor keeps millisecond solves from tripping on timer noise). The time is CPU time of the
        solving process (a busy machine stretches wall time, far less CPU time); a baseline recorded
        before CPU times were kept is compared on wall time, and the report says so.
    """

    objective_rtol: float | None = None
    bid_rtol: float | None = None
    bid_atol: float | None = None
    allocation_rtol: float | None = None
    gap_floor: float | None = None
    violation_floor: float = 1e-6
    kkt_floor: float = 1e-6
    certificate_factor: float = 10.0
    time_ratio: float = 2.0
    time_floor: float = 0.5

    def __post_init__(self):
        for f in dataclasses.fields(self):
            v = getattr(self, f.name)
            if v is not None and not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ConfigError(f"threshold {f.name} must be a non-negative number, got {v!r}")
        if self.time_ratio < 1:
            raise ConfigError(f"time_ratio must be >= 1, got {self.time_ratio!r}")

    def for_case(self, model: str, tol: float, linear: bool = False) -> dict:
        """The thresholds of one case; ``linear``: a PNLP that is an LP (:func:`piecewise_linear_pnlp`),
        whose bid prices and allocation are as little unique as an LP model's."""
        lp = model in LP_MODELS or linear
        obj = self.objective_rtol if self.objective_rtol is not None else max(10 * tol, 1e-9)
        bid = self.bid_rtol if self.bid_rtol is not None else (1e-7 if lp else max(1e-6, 1e3 * tol))
        alloc = self.allocation_rtol if self.allocation_rtol is not None else (None if lp else max(1e-5, 1e3 * tol))
        gap = self.gap_floor if self.gap_floor is not None else tol
        return {"objective_rtol": obj, "bid_rtol": bid, "bid_atol": self.bid_atol, "allocation_rtol": alloc,
                "gap_floor": gap, "violation_floor": self.violation_floor, "kkt_floor": self.kkt_floor,
                "certificate_factor": self.certificate_factor, "time_ratio": self.time_ratio,
                "time_floor": self.time_floor}


def _rel(new, old) -> float | None:
    if new is None or old is None:
        return None
    new, old = float(new), float(old)
    if not (math.isfinite(new) and math.isfinite(old)):
        return math.inf if new != old else 0.0
    return abs(relative_gap(new, old))


def _legs_text(legs, limit=8) -> str:
    shown = ", ".join(str(l) for l in legs[:limit])
    return shown + (f" and {len(legs) - limit} more" if len(legs) > limit else "")


def _options_for(rec: Mapping, override: Mapping | None) -> SolverOptions:
    """The recorded options (checked by :func:`.folder.load`) with the caller's overrides; the
    result is checked against the replay allow-list again (an override is input too)."""
    d = dict(rec["options"])
    known = {f.name for f in dataclasses.fields(SolverOptions)}
    if override:
        bad = sorted(set(override) - known)
        if bad:
            raise ConfigError(f"options_override names unknown options {bad}; valid: {', '.join(sorted(known))}")
        d.update(override)
    check_replayable(d)
    return SolverOptions(**d)


def check(path, *, thresholds: Thresholds | None = None, options_override: Mapping | None = None,
          solve_fn: Callable | None = None, clock: Callable[[], float] = time.process_time, repeat: int = 1,
          warmup: bool = True, confirm_runs: int = 2, only: Sequence[str] | None = None,
          progress: Callable | None = None) -> CheckReport:
    """Re-solve every case of the baseline at ``path`` and compare with what was recorded.

    Test hooks: ``options_override`` (e.g. ``{"tol": 1e-3}``) changes the
    options of every case; ``solve_fn`` replaces :func:`decomp.registry.solve`
    (same keywords); ``clock`` replaces the timer (CPU time by default); ``repeat`` and ``warmup`` as
    in :func:`record`; a case over the time ratio is timed ``confirm_runs``
    more times and judged on the best run, the machine's load printed beside it. ``only`` restricts
    the check to the named case ids. ``progress(case_report)`` is called after each case.

    A check that compares nothing does not pass: when the baseline names a suite, every case the
    suite defines (for the methods available here) must be in it -- a case deleted from the folder
    and its manifest is a ``missing`` regression -- and a case recorded without an objective or bid
    prices to compare is a ``not_compared`` regression.
    """
    if int(repeat) < 1:
        raise ConfigError(f"repeat must be at least 1, got {repeat!r}")
    if int(confirm_runs) < 0:
        raise ConfigError(f"confirm_runs must be >= 0, got {confirm_runs!r}")
    base = load(path)
    thresholds = thresholds or Thresholds()
    solve_fn_given = solve_fn is not None
    solve_fn = solve_fn or default_solve()
    override = dict(options_override or {})
    known = {f.name for f in dataclasses.fields(SolverOptions)}
    bad = sorted(set(override) - known)
    if bad:
        raise ConfigError(f"options_override names unknown options {bad}; valid: {', '.join(sorted(known))}")
    env_new = environment()
    wanted = None if only is None else set(only)
    if wanted is not None:
        missing = sorted(wanted - {r["case"] for r in base.cases})
        if missing:
            raise ConfigError(f"no case {missing} in baseline {base.path}")
    instances: dict = {}
    warm: set = set()
    todo = [rec for rec in base.cases if wanted is None or rec["case"] in wanted]
    for rec in todo:        # the overrides are input too: refused before anything is solved
        _options_for(rec, override)
    # Availability first (as record's suites do): a missing solver is reported by name, and the
    # libraries are imported before any timed solve, as they were when the baseline was recorded.
    unavailable = {} if solve_fn_given else unavailable_pairs({(r["model"], r["method"]) for r in todo})
    reports = []
    if wanted is None:
        reports.extend(_missing_cases(base, unavailable, progress, solve_fn_given))
    for rec in todo:
        rep = CaseReport(rec["case"], rec["model"], rec["method"])
        rep.thresholds = thresholds.for_case(rec["model"], float(rec["options"]["tol"]))
        if (rec["model"], rec["method"]) in unavailable:
            rep.add("regression", "unavailable", f"method {rec['method']!r} for model {rec['model']!r} is not "
                                                 f"available here: {unavailable[(rec['model'], rec['method'])]}")
            reports.append(rep)
            if progress is not None:
                progress(rep)
            continue
        try:
            _check_case(base, rec, rep, instances, override, solve_fn, clock, repeat, warm if warmup else None,
                        confirm_runs, thresholds)
        except Exception as exc:  # noqa: BLE001 - a failing case is reported, the others still run
            log.debug("case %s failed", rec["case"], exc_info=True)
            rep.add("regression", "error", f"the check could not re-solve this case: {type(exc).__name__}: {exc}")
        reports.append(rep)
        if progress is not None:
            progress(rep)
    return CheckReport(
        baseline=str(base.path), suite=base.manifest.get("suite"),
        checked_utc=_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        environment_old=dict(base.environment), environment_new=env_new,
        environment_changes=environment_changes(base.environment, env_new), cases=reports,
        options_override=override)


def _missing_cases(base, unavailable, progress, solve_fn_given) -> list:
    """A regression per case the baseline's suite defines (for the methods available here) that the
    baseline does not hold: the manifest detects damage, not malice, so the suite's own definition is
    what a deleted case is found against."""
    from .cases import SUITES, suite_cases

    suite = base.manifest.get("suite")
    if solve_fn_given or suite not in SUITES:       # a custom case list (or a test's solver): nothing to match
        return []
    have = {r["case"] for r in base.cases}
    out = []
    for case in suite_cases(suite):
        if case.id in have or (case.model, case.method) in unavailable:
            continue
        rep = CaseReport(case.id, case.model, case.method)
        rep.add("regression", "missing", f"suite {suite!r} defines case {case.id}, but the baseline holds no record "
                                         f"of it (deleted from the folder and its manifest, or recorded where "
                                         f"{case.method} was unavailable): nothing to compare; re-record the "
                                         f"baseline")
        out.append(rep)
        if progress is not None:
            progress(rep)
    return out


def _check_case(base, rec, rep: CaseReport, instances, override, solve_fn, clock, repeat, warm,
                confirm_runs, thresholds) -> None:
    """Solve one recorded case again and add its findings to ``rep``: status, objective, bid prices,
    certificate, allocation, iterations and time, each against the record."""
    key = rec["instance_dir"]
    if key not in instances:
        instances[key] = read_case_instance(base, rec)
    inst = instances[key]
    if instance_fingerprint(inst) != rec["instance_fingerprint"]:
        rep.add("regression", "instance",
                f"the instance in {key} reads back differently now (fingerprint changed): decomp.io or the "
                f"instance files changed, so the answers cannot be compared")
        return
    if piecewise_linear_pnlp(inst, rec["model"]):
        rep.thresholds = thresholds.for_case(rec["model"], float(rec["options"]["tol"]), linear=True)
    options = _options_for(rec, override)
    if options.to_dict() != rec["options"]:
        changed = {k: (rec["options"].get(k), v) for k, v in options.to_dict().items()
                   if rec["options"].get(k) != v}
        rep.add("note", "options", "solved with changed options: " +
                ", ".join(f"{k} {o!r} -> {n!r}" for k, (o, n) in changed.items()))
    result, _, timed = timed_solve(solve_fn, clock, inst, rec["model"], rec["method"], options, repeat, warm)
    old_status = _compare_status(rep, rec, result)
    obj_old, objective_same = _compare_objective(rep, rec, result)
    _compare_bid_prices(rep, rec, result, inst, options, obj_old, objective_same)
    _compare_certificate(rep, rec, result)
    _compare_allocation(rep, rec, result)
    # a record that held nothing to compare (no objective, no bid prices) cannot pass
    if obj_old is None and not len(rec["bid_prices"][0]):
        rep.add("regression", "not_compared", f"the case was recorded {old_status} with no objective and no "
                                              f"bid prices: there is nothing to compare it with; re-record the "
                                              f"baseline")
    _compare_time(rep, rec, result, timed, lambda runs: timed_solve(
        solve_fn, clock, inst, rec["model"], rec["method"], options, runs)[2], repeat, confirm_runs)


def _compare_status(rep: CaseReport, rec, result) -> str:
    """A status that changed from optimal/optimal is a regression, any other change a note; the old
    status is returned."""
    old_st = f"{rec['termination']}/{rec['solution_status']}"
    new_st = f"{result.termination.value}/{result.solution_status.value}"
    rep.metrics["status_old"], rep.metrics["status_new"] = old_st, new_st
    was_ok = rec["termination"] == "optimal" and rec["solution_status"] == "optimal"
    if new_st != old_st:
        if was_ok:
            rep.add("regression", "status", f"status {old_st} -> {new_st}"
                                            + (f" ({result.message})" if result.message else ""))
        else:
            rep.add("note", "status", f"status {old_st} -> {new_st}")
    return old_st


def _compare_objective(rep: CaseReport, rec, result) -> tuple:
    """(recorded objective, whether the new one is within objective_rtol of it)."""
    th, m = rep.thresholds, rep.metrics
    obj_old, obj_new = optional_float(rec["objective"]), optional_float(result.objective)
    m["objective_old"], m["objective_new"] = obj_old, obj_new
    m["objective_rel_change"] = rel = _rel(obj_new, obj_old)
    objective_same = rel is not None and rel <= th["objective_rtol"]
    if obj_old is not None and obj_new is None:
        rep.add("regression", "objective", "no objective returned now")
    elif rel is not None and not objective_same:
        rep.add("regression", "objective", f"objective {obj_old!r} -> {obj_new!r}: relative change {rel:.3g} "
                                           f"> {th['objective_rtol']:.3g}")
    return obj_old, objective_same


def _compare_bid_prices(rep: CaseReport, rec, result, inst, options, obj_old, objective_same) -> None:
    """Bid prices moved beyond bid_rtol (relative) + bid_atol are a regression, unless the model is an
    LP (or a piecewise-linear PNLP) whose objective did not change and the new ones are optimal duals
    too."""
    th, m = rep.thresholds, rep.metrics
    legs_old, pi_old = rec["bid_prices"]
    legs_now = [str(x) for x in np.asarray(result.leg_ids).tolist()]
    pi_new = None if result.bid_price_array is None else np.asarray(result.bid_price_array, dtype=np.float64)
    if legs_old and legs_now != legs_old:
        rep.add("regression", "bid_prices", "the legs of the bid-price vector changed (ids or order)")
        return
    if len(legs_old) and pi_new is None:
        rep.add("regression", "bid_prices", "no bid prices returned now")
        return
    if not len(legs_old):
        return
    diff = np.abs(pi_new - pi_old)
    diff = np.where(np.isfinite(diff), diff, np.inf)   # a NaN or infinite bid price, old or new, has moved
    finite_old = np.abs(pi_old[np.isfinite(pi_old)])
    scale = max(1.0, float(np.max(finite_old)) if len(finite_old) else 1.0)
    atol = th["bid_atol"] if th["bid_atol"] is not None else th["bid_rtol"] * scale
    limit = atol + th["bid_rtol"] * np.where(np.isfinite(pi_old), np.abs(pi_old), 0.0)
    relc = diff / np.maximum(np.where(np.isfinite(pi_old), np.abs(pi_old), 1.0), 1.0)   # rel. to max(1, |old|)
    i_abs = int(np.argmax(diff))
    i_rel = int(np.argmax(relc))
    m.update(bid_max_abs_change=float(diff[i_abs]), bid_max_abs_leg=legs_old[i_abs],
             bid_max_rel_change=float(relc[i_rel]), bid_max_rel_leg=legs_old[i_rel], bid_atol_used=atol)
    moved = np.flatnonzero(diff > limit)
    order = moved[np.argsort(-diff[moved])]
    moved_legs = [legs_old[i] for i in order]
    m["bid_moved_legs"] = moved_legs
    if not moved_legs:
        return
    detail = (f"{len(moved_legs)} leg(s) beyond {th['bid_rtol']:.3g} rel + {atol:.3g} abs: "
              f"{_legs_text(moved_legs)}; largest {legs_old[i_abs]} {float(pi_old[i_abs])!r} -> "
              f"{float(pi_new[i_abs])!r}")
    if (rec["model"] in LP_MODELS or piecewise_linear_pnlp(inst, rec["model"])) and objective_same:
        _alternative_duals(rep, inst, rec["model"], options.segments, pi_new, obj_old, th, moved_legs, detail)
    else:
        rep.add("regression", "bid_prices", "bid prices moved: " + detail)


def _compare_certificate(rep: CaseReport, rec, result) -> None:
    """Each certificate figure may grow to certificate_factor times the old one, or its floor."""
    th, m = rep.thresholds, rep.metrics
    cert_old = rec.get("certificate") or {}
    cert_new = result.certificate.to_dict() if result.certificate is not None else {}
    for name, floor in (("gap", th["gap_floor"]), ("max_violation_rel", th["violation_floor"]),
                        ("kkt_residual", th["kkt_floor"])):
        o, n = optional_float(cert_old.get(name)), optional_float(cert_new.get(name))
        short = {"max_violation_rel": "violation", "kkt_residual": "kkt"}.get(name, name)
        m[f"{short}_old"], m[f"{short}_new"] = o, n
        if o is None and n is None:
            continue
        if n is None:
            rep.add("regression", "certificate", f"certificate {name} missing now (was {o:.3g})")
            continue
        o_abs = abs(o) if o is not None else 0.0
        if abs(n) > max(th["certificate_factor"] * o_abs, floor):
            rep.add("regression", "certificate", f"certificate {name} {format_value(o)} -> {n:.3g} "
                                                 f"(limit max({th['certificate_factor']:g} x old, {floor:.3g}))")


def _compare_allocation(rep: CaseReport, rec, result) -> None:
    """A changed allocation digest is a note (LP allocations may be non-unique), or a regression beyond
    allocation_rtol when one is set."""
    th, m = rep.thresholds, rep.metrics
    dig_old = rec.get("allocation") or {}
    dig_new = allocation_digest(result.allocation)
    m["allocation_digest_same"] = dig_old.get("sha256") == dig_new["sha256"]
    if m["allocation_digest_same"] or dig_old.get("sha256") is None:
        return
    scale = max(1.0, abs(dig_old.get("max") or 0.0))
    changes = {k: (abs((dig_new[k] or 0.0) - (dig_old[k] or 0.0)) / (max(1.0, abs(dig_old[k] or 0.0))
                   if k == "sum" else scale)) for k in ("sum", "min", "max")}
    m["allocation_changes"] = changes
    worst = max(changes.values())
    text = (f"allocation digest changed (at {SIG_DIGITS} significant digits); relative change of "
            f"sum {changes['sum']:.3g}, min {changes['min']:.3g}, max {changes['max']:.3g}")
    if th["allocation_rtol"] is not None and worst > th["allocation_rtol"]:
        rep.add("regression", "allocation", text + f" > {th['allocation_rtol']:.3g}")
    else:
        rep.add("note", "allocation", text + (" (LP allocations may be non-unique)"
                                              if th["allocation_rtol"] is None else " (within tolerance)"))


def _compare_time(rep: CaseReport, rec, result, timed: float, time_again, repeat, confirm_runs) -> None:
    """Iterations (a note) and time: beyond time_ratio times the recorded CPU time, timed again
    ``confirm_runs`` more times (``time_again(runs)``: the best time of that many solves) before it is
    a regression, reported with the machine's load."""
    th, m = rep.thresholds, rep.metrics
    m["iterations_old"], m["iterations_new"] = rec.get("iterations"), result.iterations
    if rec.get("iterations") != result.iterations:
        rep.add("note", "iterations", f"iterations {rec.get('iterations')} -> {result.iterations}")
    cpu_old = rec.get("cpu_seconds")
    clock_name = "CPU time"
    if cpu_old is None:
        clock_name = "wall time against CPU time"
        rep.add("note", "time", "the baseline was recorded before CPU times were kept: its wall time is "
                                "compared with CPU time now; re-record for a like-for-like comparison")
    t_old, t_new = float(rec["wall_seconds"] if cpu_old is None else cpu_old), float(timed)
    floor = th["time_floor"]

    def ratio_of(t):
        return max(t, floor) / max(t_old, floor) if max(t_old, t, floor) > 0 else 1.0

    ratio = ratio_of(t_new)
    runs = max(1, int(repeat))
    if ratio > th["time_ratio"] and confirm_runs > 0:
        # one slow run on a shared machine is noise more often than not
        t_new, runs = min(t_new, time_again(confirm_runs)), runs + confirm_runs
        ratio = ratio_of(t_new)
    m.update(time_old=t_old, time_new=t_new, time_ratio=ratio, time_runs=runs, time_clock=clock_name)
    if ratio > th["time_ratio"]:
        load = machine_load()
        m["machine_load"] = load
        rep.add("regression", "time", f"{clock_name} {t_old:.3g} s -> {t_new:.3g} s (best of {runs} runs): ratio "
                                      f"{ratio:.2f} > {th['time_ratio']:g} (times below {floor:g} s count as "
                                      f"{floor:g} s); {load_text(load)}")


def machine_load() -> dict:
    """The load average (1, 5, 15 minutes) and the CPUs it is shared by, to print beside a slow time."""
    import os

    try:
        one, five, fifteen = os.getloadavg()
    except (OSError, AttributeError):
        return {"load_1m": None, "load_5m": None, "load_15m": None, "cpus": os.cpu_count()}
    return {"load_1m": one, "load_5m": five, "load_15m": fifteen, "cpus": os.cpu_count()}


def load_text(load: Mapping) -> str:
    if load.get("load_1m") is None:
        return "machine load unknown"
    return (f"machine load {load['load_1m']:.2f} / {load['load_5m']:.2f} / {load['load_15m']:.2f} "
            f"(1 / 5 / 15 min) on {load['cpus']} CPUs")


def _alternative_duals(rep, inst, model, segments, pi_new, obj_old, th, moved_legs, detail) -> None:
    """An LP (DLP, PWL, a piecewise-linear PNLP) with the same objective and moved bid prices: optimal
    duals again, or a regression."""
    m = rep.metrics
    min_pi = float(pi_new.min()) if len(pi_new) else 0.0
    dual_obj = lp_dual_objective(inst, model, np.maximum(pi_new, 0.0), segments)
    dual_gap = relative_gap(dual_obj, obj_old)
    m.update(alt_dual_objective=dual_obj, alt_dual_rel_gap=dual_gap, alt_min_bid_price=min_pi)
    feasible = min_pi >= -th["bid_rtol"] * max(1.0, float(np.max(np.abs(pi_new))))
    optimal = abs(dual_gap) <= th["objective_rtol"]
    if feasible and optimal:
        rep.add("note", "alternative_duals",
                f"objective unchanged, bid prices moved but remain optimal duals (pi >= 0; LP dual objective "
                f"{dual_obj!r} equals the recorded optimum {obj_old!r} within {th['objective_rtol']:.3g}, "
                f"relative difference {dual_gap:.3g}): {detail}")
        if rep.verdict == PASS:
            rep.verdict = ALTERNATIVE_DUALS
    else:
        why = []
        if not feasible:
            why.append(f"a bid price is negative ({min_pi:.3g})")
        if not optimal:
            why.append(f"LP dual objective {dual_obj!r} differs from the recorded optimum {obj_old!r} "
                       f"(relative {dual_gap:.3g} > {th['objective_rtol']:.3g})")
        rep.add("regression", "bid_prices", "bid prices moved and are not optimal duals (" + "; ".join(why)
                + "): " + detail)


def piecewise_linear_pnlp(inst: Instance, model: str) -> bool:
    """A PNLP whose every product has Poisson, negative-binomial or known demand (std 0): its
    expected sales are piecewise linear, so it is an LP too, with duals as little unique as
    the DLP's (the Lagrangian method solves its restricted problems by HiGHS's simplex, whose
    choice among optimal vertices may change with HiGHS). Its moved bid prices are checked as
    the LP models' are, with the Lagrangian dual q(pi) as the dual objective."""
    if model != "pnlp":
        return False
    names = np.asarray(inst.distributions(), dtype=object).astype(str)
    return bool(np.all(np.isin(names, ("poisson", "negbin")) | (np.asarray(inst.std, dtype=np.float64) == 0.0)))


def lp_dual_objective(inst: Instance, model: str, pi, segments: int = 16) -> float:
    """LP dual objective of the DLP or PWL model (or a piecewise-linear PNLP: the Lagrangian dual
    q(pi)) at bid prices ``pi`` (from :mod:`decomp.certify`).

    DLP: max f.x s.t. A x <= c, 0 <= x <= mean has the dual min c.pi + mean.s
    s.t. A^T pi + s >= f, pi, s >= 0, whose best s at given pi is (f - A^T pi)^+,
    so the dual objective is c.pi + sum_j mean_j (f_j - a_j)^+; the PWL model's
    is c.pi + sum_j sum_k w_jk (f_j s_jk - a_j)^+ over its segments.
    """
    from .. import certify

    pi = np.asarray(pi, dtype=np.float64)
    cert = certify.certify(inst, model, np.zeros(inst.n_products), pi, segments=segments)
    return float(cert.dual_value)
