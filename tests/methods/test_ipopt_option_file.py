"""Ipopt reads no options file decomp did not ask for: not from the working folder of a solve, not
from a baseline check.

External fact used: Ipopt's documented option ``option_file_name`` (an options file named there,
by default ``ipopt.opt`` in the working folder, is read at each solve; Ipopt 3.14 documentation,
"Options Reference").
"""

from __future__ import annotations

import pytest

from support.cli import run_cli


@pytest.fixture(scope="module")
def p100(p100_dir):
    return p100_dir


def _hostile_ipopt_opt(tmp_path, monkeypatch, more=""):
    """A working folder whose ipopt.opt would overwrite victim.txt with Ipopt's log; returns victim."""
    victim = tmp_path / "victim.txt"
    victim.write_text("keep me\n")
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    (cwd / "ipopt.opt").write_text(f"output_file {victim}\nfile_print_level 5\n{more}")
    monkeypatch.chdir(cwd)
    return victim


@pytest.mark.solver
@pytest.mark.parametrize("method", ["ipopt", "pyomo-ipopt"])
def test_an_ipopt_opt_in_the_working_folder_is_not_read(p100, tmp_path, monkeypatch, capsys, method):
    victim = _hostile_ipopt_opt(tmp_path, monkeypatch, "max_iter 1\n")
    rc, _, _ = run_cli(["solve", p100, "--model", "pnlp", "--method", method, "--out", tmp_path / "r.json"], capsys)
    assert rc == 0                                    # max_iter 1 from the file would have stopped it
    assert victim.read_text() == "keep me\n"


@pytest.mark.solver
def test_baseline_check_reads_no_ipopt_opt(tmp_path, monkeypatch, capsys):
    from decomp import baseline as bl

    base = tmp_path / "base"
    bl.record(base, cases=[bl.Case(bl.InstanceSpec("micro1", "micro", {"seed": 1, "n_products": 12}),
                                   "pnlp", "ipopt")])
    victim = _hostile_ipopt_opt(tmp_path, monkeypatch)
    rc, _, _ = run_cli(["baseline", "check", base], capsys)
    assert rc == 0 and victim.read_text() == "keep me\n"
