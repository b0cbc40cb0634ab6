"""When a command shows a progress bar: on a terminal, unless ``--no-progress`` says not to.

A bar redraws itself with carriage returns: in a redirected log file that is
hundreds of lines of noise, so output that is not a terminal gets no bar
(the run's summary lines are printed either way; ``-v`` logs progress as lines).
"""

from __future__ import annotations

import sys

#: The help text of --no-progress, the same in every command.
HELP = "no progress bar (default: a bar on stderr when it is a terminal, none when it is redirected)"


def wanted(args=None, stream=None) -> bool:
    """True when a progress bar should be drawn on ``stream`` (stderr by default)."""
    if args is not None and getattr(args, "no_progress", False):
        return False
    stream = sys.stderr if stream is None else stream
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):       # no isatty, or a closed stream
        return False
