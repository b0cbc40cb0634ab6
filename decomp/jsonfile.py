"""Reading JSON that decomp did not necessarily write: every way it can fail is an InstanceError
naming the file.

``json.loads`` fails in more ways than :class:`json.JSONDecodeError`: an integer of more than
4,300 digits raises a plain ValueError (CPython's limit on integer-string conversion,
``sys.get_int_max_str_digits``), deep nesting a RecursionError, and the file itself an OSError
or a UnicodeDecodeError.
"""

from __future__ import annotations

import json
import pathlib

from .errors import InstanceError


class _DuplicateKey(ValueError):
    pass


def _unique_keys(pairs):
    out = dict(pairs)
    if len(out) < len(pairs):
        seen = set()
        for k, _ in pairs:
            if k in seen:
                raise _DuplicateKey(k)
            seen.add(k)
    return out


def loads(text, *, file=None, error=InstanceError, what: str = "not valid JSON"):
    """Parse ``text``; any failure is ``error`` (an InstanceError class) naming ``file``. A key that
    appears twice in one object is refused too (``json`` would keep the last one silently)."""
    try:
        return json.loads(text, object_pairs_hook=_unique_keys)
    except _DuplicateKey as exc:
        raise error(f"the key {str(exc)[:200]!r} appears twice in one object: which one is meant is "
                    f"ambiguous", file=file, column=str(exc)[:200]) from None
    except json.JSONDecodeError as exc:
        raise error(f"{what} ({exc.msg} at line {exc.lineno} column {exc.colno})", file=file) from exc
    except RecursionError as exc:
        raise error(f"{what}: nested too deeply to read", file=file) from exc
    except ValueError as exc:          # an integer over 4,300 digits; a lone surrogate in a string
        raise error(f"{what}: {str(exc)[:200]}", file=file) from exc


def read(path, *, error=InstanceError, missing: str = "file not found"):
    """The JSON value in the file at ``path``; a missing, unreadable or malformed file is ``error``."""
    path = pathlib.Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise error(missing, file=path) from exc
    except UnicodeDecodeError as exc:
        raise error(f"not valid UTF-8 text ({exc.reason})", file=path) from exc
    except OSError as exc:
        raise error(f"cannot read the file: {exc.strerror or exc}", file=path) from exc
    return loads(text, file=path, error=error)
