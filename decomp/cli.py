"""The ``decomp`` command line.

Each module in :mod:`decomp.commands` defines ``register(subparsers)``, which
adds its subcommand with ``set_defaults(func=...)``; ``func(args)`` returns the
exit code. Exit codes: 0 ok, 2 bad input, 1 anything else (including a solve
that did not reach an optimal, certified answer).
"""

from __future__ import annotations

import argparse
import importlib
import logging
import pkgutil
import sys
import warnings

from . import commands
from .errors import ConfigError, EnvironmentRefusedError, InstanceError, OutputPathError, UnknownMethodError

EXIT_OK, EXIT_FAIL, EXIT_BAD_INPUT = 0, 1, 2


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="decomp",
        description="Network bid prices: DLP and PNLP models, direct solvers and "
                    "Lagrangian decomposition, with certificates, benchmarks and production runs.")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress to stderr")
    parser.add_argument("--version", action="version", version=f"decomp {_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda m: m.name):
        if info.name.startswith("_"):
            continue
        module = importlib.import_module(f"{commands.__name__}.{info.name}")
        module.register(sub)
    _accept_common_options(parser)
    return parser


def _version() -> str:
    from . import __version__

    return __version__


def _accept_common_options(parser: argparse.ArgumentParser) -> None:
    """Let every subcommand, nested ones included, take -v after its name too
    (``decomp solve ... -v``, ``decomp baseline record ... -v``)."""
    for action in parser._actions:
        if not isinstance(action, argparse._SubParsersAction):
            continue
        for sp in action.choices.values():
            if "-v" not in sp._option_string_actions:
                sp.add_argument("-v", "--verbose", action="store_true", default=argparse.SUPPRESS,
                                help="log progress to stderr")
            _accept_common_options(sp)


def _format_warning(where: dict):
    """Warnings as one line on stderr (not the source line Python shows by default);
    ``where["command"]`` names the subcommand once the command line is parsed. Only the format
    is replaced, so warnings still go where Python sends them (and tests can record them)."""
    def fmt(message, category, filename, lineno, line=None):
        command = where.get("command")
        return f"decomp{' ' + command if command else ''}: warning: {message}\n"

    return fmt


def main(argv=None) -> int:
    parser = build_parser()
    where = {"command": None}
    warnings.formatwarning = _format_warning(where)      # old option names warn while parsing
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:      # argparse refused an option (2, message printed) or printed --help (0)
        return exc.code if isinstance(exc.code, int) else EXIT_BAD_INPUT
    if args.command is None:
        parser.print_help()
        return EXIT_BAD_INPUT
    where["command"] = args.command
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(levelname)s %(name)s: %(message)s")
    try:
        return int(args.func(args) or 0)
    except (InstanceError, UnknownMethodError, ConfigError, OutputPathError) as exc:
        print(f"decomp {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:
        # output piped into a reader that stopped early (e.g. `head`)
        sys.stderr.close()
        return EXIT_FAIL
    except EnvironmentRefusedError as exc:
        # a full disk or a read-only folder: the cause once, naming the path, no traceback (writes are atomic)
        print(f"decomp {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_FAIL
    except OSError as exc:
        from .paths import is_refused

        if not is_refused(exc):
            raise
        # a refused write not wrapped where it happened: name what the system named
        print(f"decomp {args.command}: error: cannot write {exc.filename or '(the system named no path)'}: "
              f"{exc.strerror} [Errno {exc.errno}]", file=sys.stderr)
        return EXIT_FAIL
    except KeyboardInterrupt:
        print(f"decomp {args.command}: interrupted", file=sys.stderr)
        return EXIT_FAIL


if __name__ == "__main__":
    sys.exit(main())
