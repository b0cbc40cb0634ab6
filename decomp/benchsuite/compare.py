"""Compare two benchmark runs case by case: time ratio and accuracy change, with regressions flagged.

A case regresses when

* its time (``stat``: min or median of rounds) grew by more than the threshold
  (new / old > 1 + threshold);
* an accuracy figure (certified gap, objective error, bid-price error, capacity
  violation) grew by more than the threshold *and* beyond an absolute floor
  (``accuracy_floor``, default 1e-9: changes among values below it are
  round-off, not regressions);
* it reached an optimal finish before and does not now, or it passed its
  accuracy checks before and fails them now;
* it is missing from the new run.

Cases only in the new run are listed, not flagged.
"""

from __future__ import annotations

import dataclasses

from .results import load_run

ACCURACY_FIELDS = ("gap", "objective_error", "bid_price_error", "max_violation_rel")


@dataclasses.dataclass(frozen=True)
class CaseComparison:
    case: str
    old_time: float | None
    new_time: float | None
    ratio: float | None
    accuracy: dict            # field -> (old, new)
    flags: tuple              # reasons this case regressed (empty: fine)

    @property
    def regressed(self) -> bool:
        return bool(self.flags)


@dataclasses.dataclass(frozen=True)
class Comparison:
    old: str
    new: str
    threshold: float
    stat: str
    cases: tuple
    only_new: tuple

    @property
    def regressions(self) -> list:
        return [c for c in self.cases if c.regressed]

    def to_dict(self) -> dict:
        return {"old": self.old, "new": self.new, "threshold": self.threshold, "stat": self.stat,
                "regressions": len(self.regressions), "only_new": list(self.only_new),
                "cases": [dataclasses.asdict(c) for c in self.cases]}


def parse_growth(text) -> float:
    """Allowed growth new/old as a fraction, written with its unit: '10%' -> 0.1, '1.1x' -> 0.1.

    The form ``bench compare --max-growth`` and ``baseline check --max-time-growth`` share. A
    bare number is refused: 10 read as a fraction is +1000%, read as a ratio 10x, and both
    commands once read it one way each.
    """
    from ..errors import ConfigError

    s = str(text).strip()
    if not (s.endswith("%") or s.lower().endswith("x")):
        try:
            float(s)
        except ValueError:
            pass
        else:
            raise ConfigError(f"allowed growth {text!r} has no unit: write a growth such as {s}% or a ratio "
                              f"such as {s}x (new / old)")
    return parse_threshold(s)


def parse_threshold(text) -> float:
    """Allowed growth: '10%' or '0.1' -> 0.1; a ratio new/old '1.1x' -> 0.1 (as ``baseline check
    --time-ratio 1.1``)."""
    from ..errors import ConfigError

    s = str(text).strip()
    try:
        if s.endswith("%"):
            v = float(s[:-1]) / 100.0
        elif s.lower().endswith("x"):
            v = float(s[:-1]) - 1.0
        else:
            v = float(s)
    except ValueError as exc:
        raise ConfigError(f"threshold must be a fraction, a percentage such as 10% or a ratio such as 1.1x, "
                          f"got {text!r}") from exc
    if not v > 0:
        raise ConfigError(f"threshold must be positive (a ratio above 1x), got {text!r}")
    return v


def parse_ratio(text) -> float:
    """An allowed ratio new/old (``baseline check --time-ratio``): '2x' or '100%' -> 2.0, through
    :func:`parse_threshold` (1 + the growth it reads); a bare number is the ratio itself ('2' -> 2.0),
    as the option has always read it, not a growth fraction as ``--threshold`` reads one."""
    from ..errors import ConfigError

    s = str(text).strip()
    if s.endswith("%") or s.lower().endswith("x"):
        return 1.0 + parse_threshold(s)
    try:
        v = float(s)
    except ValueError as exc:
        raise ConfigError(f"ratio must be a number such as 2, a ratio such as 2x or a growth such as 100%, "
                          f"got {text!r}") from exc
    if not v >= 1:
        raise ConfigError(f"ratio must be at least 1 (new no faster than old allowed), got {text!r}")
    return v


def _worse(old, new, threshold, floor) -> bool:
    if new is None:
        return old is not None
    if old is None:
        return False
    return new > floor and new > old * (1 + threshold) and new - old > floor


def case_flags(ro, rn, threshold: float, stat: str = "min", accuracy_floor: float = 1e-9) -> list:
    """Why case ``rn`` (new) regressed against ``ro`` (old), by the rules of the module docstring.

    ``ro`` and ``rn`` are :class:`~.results.Row` objects (a benchmark file's, or the history
    store's); an empty list means no regression.
    """
    t0, t1 = ro.time(stat), rn.time(stat)
    ratio = t1 / t0 if t0 > 0 else None
    flags = []
    if ratio is not None and ratio > 1 + threshold:
        flags.append(f"slower: x{ratio:.2f} ({stat} {t0:.4g} s -> {t1:.4g} s)")
    for f in ACCURACY_FIELDS:
        a, b = ro.get(f), rn.get(f)
        if _worse(a, b, threshold, accuracy_floor):
            flags.append(f"less accurate: {f} {a if a is None else f'{a:.3g}'} -> "
                         f"{b if b is None else f'{b:.3g}'}")
    if ro.get("termination") == "optimal" and rn.get("termination") not in (None, "optimal"):
        flags.append(f"termination optimal -> {rn.get('termination')}")
    if not ro.get("accuracy_failures") and rn.get("accuracy_failures"):
        flags.append("accuracy checks now fail: " + "; ".join(rn.get("accuracy_failures")))
    return flags


def compare_cases(o: dict, n: dict, threshold: float = 0.10, stat: str = "min",
                  accuracy_floor: float = 1e-9) -> tuple:
    """(case comparisons, cases only in the new run) for rows by case name, old ``o`` and new ``n``."""
    if stat not in ("min", "median", "mean"):
        from ..errors import ConfigError

        raise ConfigError(f"stat must be min, median or mean, got {stat!r}")
    cases = []
    for case, ro in o.items():
        rn = n.get(case)
        if rn is None:
            cases.append(CaseComparison(case, ro.time(stat), None, None, {}, ("missing in new run",)))
            continue
        t0, t1 = ro.time(stat), rn.time(stat)
        acc = {f: (ro.get(f), rn.get(f)) for f in ACCURACY_FIELDS}
        cases.append(CaseComparison(case, t0, t1, t1 / t0 if t0 > 0 else None, acc,
                                    tuple(case_flags(ro, rn, threshold, stat, accuracy_floor))))
    return tuple(cases), tuple(sorted(set(n) - set(o)))


def compare_runs(old_path, new_path, threshold: float = 0.10, stat: str = "min",
                 accuracy_floor: float = 1e-9) -> Comparison:
    old, new = load_run(old_path), load_run(new_path)
    cases, only_new = compare_cases(old.by_case(), new.by_case(), threshold, stat, accuracy_floor)
    return Comparison(str(old.path), str(new.path), threshold, stat, cases, only_new)


def render(cmp: Comparison) -> str:
    """A plain-text table for the terminal (Markdown-compatible)."""
    lines = [f"old: {cmp.old}", f"new: {cmp.new}",
             f"threshold {cmp.threshold:.0%} on time ({cmp.stat} of rounds) and on accuracy", "",
             "| case | old s | new s | ratio | gap old->new | bid-price err old->new | result |",
             "|---|---:|---:|---:|---|---|---|"]

    def pair(p):
        if not p:
            return "-"
        a, b = p
        fa = "-" if a is None else f"{a:.2e}"
        fb = "-" if b is None else f"{b:.2e}"
        return f"{fa} -> {fb}"

    for c in cmp.cases:
        lines.append(f"| {c.case} | {'-' if c.old_time is None else f'{c.old_time:.4g}'} | "
                     f"{'-' if c.new_time is None else f'{c.new_time:.4g}'} | "
                     f"{'-' if c.ratio is None else f'{c.ratio:.2f}'} | {pair(c.accuracy.get('gap'))} | "
                     f"{pair(c.accuracy.get('bid_price_error'))} | "
                     f"{'REGRESSION: ' + '; '.join(c.flags) if c.flags else 'ok'} |")
    if cmp.only_new:
        lines += ["", "only in the new run: " + ", ".join(cmp.only_new)]
    lines += ["", f"{len(cmp.regressions)} regression(s) in {len(cmp.cases)} case(s)"]
    return "\n".join(lines)
