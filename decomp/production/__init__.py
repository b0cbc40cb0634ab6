"""Production runs: the nightly batch of departure dates, run on Dask, and its sizing.

* :mod:`.batch`   what a batch is (a folder of instances, or base networks times
  a date range with a deterministic per-date demand variation) and how a
  worker builds one task's instance;
* :mod:`.runner`  the Dask run: one task per instance, atomic per-task output,
  skipping verified finished tasks, retries, warm starts from an earlier run;
* :mod:`.outputs` a task's files and the check that a finished task is finished
  (checksum, one bid price per leg);
* :mod:`.fallback` the robust method that re-solves a task its method left non-optimal;
* :mod:`.lock`    one run per output folder;
* :mod:`.signals` SIGTERM handled like Ctrl-C;
* :mod:`.summary` the end-of-run summary (JSON and Markdown);
* :mod:`.sizing`  fitting time = a * products^b to benchmark data and projecting
  the run's wall time on W workers against the optimization window.
"""

from .durations import format_duration, parse_duration

__all__ = ["format_duration", "parse_duration"]
