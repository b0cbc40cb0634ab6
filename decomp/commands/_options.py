"""Option types the commands share: argparse refuses a value outside its domain at once, naming
the option (``argument --workers: must be at least 1, got 0``), exit 2, before any work starts."""

from __future__ import annotations

import argparse
import math
import pathlib


def whole(minimum: int | None = None, maximum: int | None = None, what: str = ""):
    """An integer within [minimum, maximum]."""
    def parse(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
        if minimum is not None and v < minimum:
            raise argparse.ArgumentTypeError(f"must be at least {minimum}{what}, got {v}")
        if maximum is not None and v > maximum:
            raise argparse.ArgumentTypeError(f"must be at most {maximum}{what}, got {v}")
        return v
    parse.__name__ = "whole number"
    return parse


def number(minimum: float | None = None, *, above: bool = False, maximum: float | None = None,
           below: bool = False):
    """A finite float, >= minimum (> with ``above``) and <= maximum (< with ``below``)."""
    def parse(text: str) -> float:
        try:
            v = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
        if not math.isfinite(v):
            raise argparse.ArgumentTypeError(f"must be a finite number, got {text!r}")
        if minimum is not None and (v <= minimum if above else v < minimum):
            raise argparse.ArgumentTypeError(f"must be {'>' if above else '>='} {minimum:g}, got {v:g}")
        if maximum is not None and (v >= maximum if below else v > maximum):
            raise argparse.ArgumentTypeError(f"must be {'<' if below else '<='} {maximum:g}, got {v:g}")
        return v
    parse.__name__ = "number"
    return parse


#: A TCP port (0: any free port).
port = whole(0, 65535, " (a TCP port; 0 picks a free one)")
#: At least one.
positive = whole(1)
#: Zero or more.
count = whole(0)
#: A tolerance, a time limit: a finite number > 0.
positive_number = number(0.0, above=True)


def existing_folder(text: str, option: str) -> str:
    """A folder that exists (read from, never written); ConfigError naming ``option`` otherwise."""
    from ..errors import ConfigError

    p = pathlib.Path(text)
    if not text.strip() or not p.exists():
        raise ConfigError(f"{option} {text!r}: no such folder")
    if not p.is_dir():
        raise ConfigError(f"{option} {text!r}: not a folder")
    return text


def duration(text: str) -> float:
    """Seconds in a duration with its unit, such as 2h, 90m, 1h30m or 45s (a bare number is refused;
    see decomp.production.durations)."""
    from ..errors import ConfigError
    from ..production.durations import parse_duration

    try:
        return parse_duration(text, None)
    except ConfigError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def method_or_default(method: str | None, model: str) -> str:
    """``--method`` as given, or the model's default (:data:`decomp.registry.DEFAULT_METHOD`) when it
    is left out; an empty name is kept, for :func:`check_method` to refuse."""
    from ..registry import DEFAULT_METHOD

    return DEFAULT_METHOD[model] if method is None else method


def check_method(method: str, model: str, option: str = "--method") -> None:
    """An UnknownMethodError naming the option when ``method`` does not solve ``model``."""
    from ..errors import UnknownMethodError
    from ..registry import get_method

    try:
        get_method(method, model)
    except UnknownMethodError as exc:
        raise UnknownMethodError(f"{option} {method!r}: {exc}") from None


def demand_mix(text: str) -> str:
    """A demand model (:mod:`decomp.demand_mix`: a mix's text or a named mix), checked when the
    command line is read; the text as given."""
    from ..demand_mix import DemandMix
    from ..errors import ConfigError

    try:
        DemandMix.parse(text)
    except ConfigError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    return text
