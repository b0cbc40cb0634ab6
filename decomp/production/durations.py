"""Durations on the command line: ``2h``, ``90m``, ``1h30m``, ``45s``, ``3600``."""

from __future__ import annotations

import math
import re

from ..errors import ConfigError

_PART = re.compile(r"(\d+(?:\.\d*)?|\.\d+)\s*([hms]?)")
_UNIT = {"h": 3600.0, "m": 60.0, "s": 1.0, "": 1.0}


def parse_duration(text) -> float:
    """Seconds in ``text``: a number (seconds) or parts such as ``2h``, ``1h30m``, ``90s``."""
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        s = str(text).strip().lower().replace(" ", "")
        pos, value, parts = 0, 0.0, 0
        while pos < len(s):
            m = _PART.match(s, pos)
            if m is None or (m.group(2) == "" and m.end() != len(s)):
                raise ConfigError(f"not a duration: {text!r} (use e.g. 2h, 90m, 1h30m, 45s or seconds)")
            value += float(m.group(1)) * _UNIT[m.group(2)]
            pos, parts = m.end(), parts + 1
        if parts == 0:
            raise ConfigError(f"not a duration: {text!r} (use e.g. 2h, 90m, 1h30m, 45s or seconds)")
    if not (math.isfinite(value) and value > 0):
        raise ConfigError(f"a duration must be positive, got {text!r}")
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
