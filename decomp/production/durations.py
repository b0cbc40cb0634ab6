"""Durations on the command line: ``2h``, ``90m``, ``1h30m``, ``45s``.

A duration written as text carries its unit: ``--window 2`` could be two hours
as easily as two seconds, so a bare number is refused (a number passed from
Python is seconds).
"""

from __future__ import annotations

import math
import re

from ..errors import ConfigError

_PART = re.compile(r"(\d+(?:\.\d*)?|\.\d+)\s*([hms]?)")
_UNIT = {"h": 3600.0, "m": 60.0, "s": 1.0}


def parse_duration(text, what: str | None = "a duration") -> float:
    """Seconds in ``text``: parts with units such as ``2h``, ``1h30m``, ``90s``, or a number (seconds)
    passed from Python. Text without a unit is refused (``what`` names the option in the message;
    None leaves it out, for argparse, which names the option itself)."""
    lead = f"{what}: " if what else ""
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
    else:
        s = str(text).strip().lower().replace(" ", "")
        pos, value, parts = 0, 0.0, 0
        while pos < len(s):
            m = _PART.match(s, pos)
            if m is None:
                raise ConfigError(f"{lead}not a duration: {text!r} (use e.g. 2h, 90m, 1h30m or 45s)")
            if m.group(2) == "":
                raise ConfigError(f"{lead}{text!r} has no unit; write it with one, e.g. {m.group(1)}h, "
                                  f"{m.group(1)}m or {m.group(1)}s")
            value += float(m.group(1)) * _UNIT[m.group(2)]
            pos, parts = m.end(), parts + 1
        if parts == 0:
            raise ConfigError(f"{lead}not a duration: {text!r} (use e.g. 2h, 90m, 1h30m or 45s)")
    if not (math.isfinite(value) and value > 0):
        raise ConfigError(f"{what + ' ' if what else ''}must be positive, got {text!r}")
    return value


def format_duration(seconds) -> str:
    """``1h02m03s`` / ``4m05s`` / ``6.2s`` for reports."""
    if seconds is None or not math.isfinite(seconds):
        return "-"
    if seconds < 60:
        return f"{seconds:.1f}s"
    s = int(round(seconds))
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{h}h{m:02d}m{sec:02d}s" if h else f"{m}m{sec:02d}s"
