"""The option vocabulary the subcommands share, and the old names of renamed options.

One name means one thing in every command: ``--out`` is always what a command
writes, ``--legs`` and ``--products`` are always inputs (an itinerary, a count),
``--dates`` is N dates or FIRST:LAST wherever dates are asked for, allowed
growth is written ``1.1x`` or ``10%`` (never a bare number), and a duration
carries its unit (``90m``). Options renamed to get there keep their old names
for one release: the old name still works, with its old meaning, and prints a
warning naming the new one (:class:`OldOptionName`). :data:`RENAMED` lists them
(the README's table of renamed options is checked against it).
"""

from __future__ import annotations

import argparse
import warnings

#: (command, new option, old option, what changed) for every renamed option.
RENAMED = (
    ("solve", "--leg-table FILE", "--legs FILE", "--legs is an itinerary everywhere else (decide)"),
    ("solve", "--product-table FILE", "--products FILE, --allocation FILE",
     "--products is a count everywhere else (generate, size)"),
    ("run", "--dates N", "--days N", "--dates takes N or FIRST:LAST, as in size"),
    ("run", "--warm-start DIR", "--warm-start-from DIR", "the name solve uses"),
    ("bench compare", "--max-growth 10%", "--threshold X",
     "10% or 1.1x; a bare number was a growth fraction (10 = +1000%)"),
    ("bench compare", "--out FILE.json", "--json FILE", "--json prints JSON elsewhere; --out writes"),
    ("baseline check", "--max-time-growth 2x", "--time-ratio X",
     "2x or 100%; a bare number was the ratio (2 = 2x); the two commands now read growth the same way"),
)


class OldOptionName(FutureWarning):
    """An option was given by the name it had before it was renamed (accepted until the next release)."""


class _OldName(argparse.Action):
    def __init__(self, option_strings, dest, new: str, **kw):
        self.new = new
        super().__init__(option_strings, dest, **kw)

    def __call__(self, parser, namespace, values, option_string=None):
        warnings.warn(f"{option_string} is the old name of {self.new} (accepted until the next release); "
                      f"use {self.new}", OldOptionName, stacklevel=2)
        setattr(namespace, self.dest, values)


def old_name(parser, *flags: str, new: str, dest: str, note: str = "", **kw) -> None:
    """Accept ``flags``, the old names of option ``new``, into ``dest`` with a warning.

    Nothing is stored when the old name is not given (``argparse.SUPPRESS``), so the new
    option's default stands and a command can tell which name was used.
    """
    parser.add_argument(*flags, dest=dest, action=_OldName, new=new, default=argparse.SUPPRESS,
                        help=f"old name of {new}, accepted until the next release{note}", **kw)
