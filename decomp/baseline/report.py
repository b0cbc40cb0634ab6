"""What a check found: per-case verdicts and findings, as JSON and Markdown."""

from __future__ import annotations

import dataclasses
import json
import math
import pathlib

import numpy as np

from .. import atomic

# Verdicts of a checked case.
PASS, ALTERNATIVE_DUALS, REGRESSION = "pass", "alternative_duals", "regression"

# --------------------------------------------------------------------------- check
@dataclasses.dataclass
class CaseReport:
    case: str
    model: str
    method: str
    verdict: str = PASS
    findings: list = dataclasses.field(default_factory=list)   # {severity, kind, message}
    metrics: dict = dataclasses.field(default_factory=dict)
    thresholds: dict = dataclasses.field(default_factory=dict)

    def add(self, severity: str, kind: str, message: str) -> None:
        self.findings.append({"severity": severity, "kind": kind, "message": message})
        if severity == "regression":
            self.verdict = REGRESSION

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


@dataclasses.dataclass
class CheckReport:
    baseline: str
    suite: str | None
    checked_utc: str
    environment_old: dict
    environment_new: dict
    environment_changes: list
    cases: list
    options_override: dict

    @property
    def regression(self) -> bool:
        return any(c.verdict == REGRESSION for c in self.cases)

    def counts(self) -> dict:
        out = {PASS: 0, ALTERNATIVE_DUALS: 0, REGRESSION: 0}
        for c in self.cases:
            out[c.verdict] = out.get(c.verdict, 0) + 1
        return out

    def to_dict(self) -> dict:
        return {
            "format": "decomp-baseline-check", "baseline": self.baseline, "suite": self.suite,
            "checked_utc": self.checked_utc, "regression": self.regression, "counts": self.counts(),
            "options_override": self.options_override,
            "environment_changes": [{"key": k, "old": o, "new": n} for k, o, n in self.environment_changes],
            "environment_old": self.environment_old, "environment_new": self.environment_new,
            "cases": [c.to_dict() for c in self.cases],
        }

    def to_markdown(self) -> str:
        lines = [f"# Baseline check: {self.baseline}", "",
                 f"Checked {self.checked_utc}; suite {self.suite or '(custom)'}; "
                 f"verdict: **{'REGRESSION' if self.regression else 'no regression'}** "
                 f"({', '.join(f'{v} {k}' for k, v in self.counts().items())}).", ""]
        if self.options_override:
            lines += [f"Options overridden for every case: `{json.dumps(self.options_override)}`", ""]
        lines += ["## Environment changes", ""]
        if self.environment_changes:
            lines += ["| key | recorded | now |", "|---|---|---|"]
            lines += [f"| {k} | {o} | {n} |" for k, o, n in self.environment_changes]
        else:
            lines.append("None.")
        lines += ["", "## Cases", "",
                  "| case | verdict | status | objective rel. change | largest bid-price change (leg) | "
                  "gap old -> new | seconds old -> new (ratio) |", "|---|---|---|---|---|---|---|"]
        for c in self.cases:
            m = c.metrics
            st = m.get("status_old", "?")
            if m.get("status_new") != m.get("status_old"):
                st = f"{m.get('status_old')} -> {m.get('status_new')}"
            bp = m.get("bid_max_abs_change")
            bp_s = "-" if bp is None else f"{bp:.3g} ({m.get('bid_max_abs_leg')}; rel {m.get('bid_max_rel_change'):.3g})"
            lines.append(f"| {c.case} | {c.verdict} | {st} | {format_value(m.get('objective_rel_change'))} | {bp_s} | "
                         f"{format_value(m.get('gap_old'))} -> {format_value(m.get('gap_new'))} | {format_value(m.get('time_old'))} -> "
                         f"{format_value(m.get('time_new'))} ({format_value(m.get('time_ratio'), '.2f')}) |")
        detailed = [c for c in self.cases if c.findings]
        if detailed:
            lines += ["", "## Findings", ""]
            for c in detailed:
                lines.append(f"### {c.case} ({c.verdict})")
                lines.append("")
                lines += [f"- **{f['severity']}** {f['kind']}: {f['message']}" for f in c.findings]
                lines.append("")
        return "\n".join(lines).rstrip() + "\n"


def format_value(v, spec=".3g") -> str:
    if v is None:
        return "-"
    if isinstance(v, str):
        return v
    return format(v, spec)


def write_report(report: CheckReport, out) -> tuple:
    """Write ``check.json`` and ``check.md`` into folder ``out`` atomically; returns their paths."""
    out = pathlib.Path(out)
    jpath, mpath = out / "check.json", out / "check.md"
    atomic.write_text(jpath, json.dumps(_clean(report.to_dict()), indent=2, default=_json_default,
                                        allow_nan=False) + "\n")
    atomic.write_text(mpath, report.to_markdown())
    return jpath, mpath


def _clean(v):
    """Non-finite floats as strings, so the JSON report is strict JSON."""
    if isinstance(v, float):
        return v if math.isfinite(v) else str(v)
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    return v


def _json_default(v):
    if isinstance(v, (np.floating, np.integer)):
        return v.item()
    if isinstance(v, np.ndarray):
        return v.tolist()
    raise TypeError(f"not JSON serializable: {type(v).__name__}")
