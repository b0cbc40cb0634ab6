"""Running ``decomp`` in the test's own process."""

from __future__ import annotations

from decomp.cli import main


def run_cli(args, capsys) -> tuple:
    """(exit code, stdout, stderr) of ``decomp ARGS`` (paths may be given as Path objects)."""
    rc = main([str(a) for a in args])
    cap = capsys.readouterr()
    return rc, cap.out, cap.err
