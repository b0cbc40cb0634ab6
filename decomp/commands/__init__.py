"""Subcommands of ``decomp``: one module each, discovered by decomp.cli."""
