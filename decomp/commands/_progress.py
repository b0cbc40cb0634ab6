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


#: distributed's loggers that report every worker start and stop at INFO.
DASK_LOGGERS = ("distributed", "distributed.nanny", "distributed.scheduler", "distributed.core",
                "distributed.batched", "distributed.worker", "distributed.diskutils", "distributed.http.proxy")


def quiet_dask_logs(verbose: bool) -> None:
    """Keep the terminal for the bar and the summary: distributed's loggers at ERROR unless -v.
    distributed is imported first, since importing it sets its loggers' levels from its config."""
    import logging

    import distributed  # noqa: F401

    for name in DASK_LOGGERS:
        logging.getLogger(name).setLevel(logging.INFO if verbose else logging.ERROR)
