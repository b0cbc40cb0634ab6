"""Where decomp writes: every output path is checked here before the work starts, folders
decomp replaces are recognised by the marker it wrote, and a write the machine refuses becomes
one error naming the path the user gave.

* :func:`output_file` -- a file to write (``--out RESULT.json``, ``--leg-table T.csv``, ``--history F``);
* :func:`output_folder` -- a folder to write into (``run``, ``simulate``, ``size``, ``bench``,
  ``baseline check``) or to replace (``generate``, ``baseline record --force``);
* :func:`write_marker` / :func:`marker_kind` -- the ``.decomp`` file decomp puts into every
  folder it writes whole (an instance, a baseline): an existing folder is replaced only when it
  carries one of the same kind, so a folder of someone's own files is never replaced;
* :func:`refusing` -- turns a full disk, a read-only folder or a denied permission into
  :class:`~decomp.errors.EnvironmentRefusedError` naming the target path.

A bad path is an :class:`~decomp.errors.OutputPathError` (exit 2), raised before anything is
solved or written.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import pathlib
import stat

from .errors import EnvironmentRefusedError, OutputPathError

#: The marker file decomp writes into the folders it writes whole.
MARKER = ".decomp"
#: Errors that mean the machine refused the write (not that the path was wrong).
REFUSED_ERRNOS = frozenset({errno.ENOSPC, errno.EROFS, errno.EACCES, errno.EPERM, errno.EDQUOT, errno.EFBIG})


def _kind(path: pathlib.Path):
    """'missing', 'file', 'folder', 'link-loop', 'broken-link' or 'special' (device, FIFO, socket)."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        return "broken-link" if os.path.islink(path) else "missing"
    except NotADirectoryError:
        return "under-file"
    except OSError as exc:
        return "link-loop" if exc.errno == errno.ELOOP else "unreadable"
    if stat.S_ISDIR(st.st_mode):
        return "folder"
    if stat.S_ISREG(st.st_mode):
        return "file"
    return "special"


_WHY = {"special": "is a device, FIFO or socket, not a regular file", "link-loop": "is a symbolic link loop",
        "broken-link": "is a symbolic link to nothing", "unreadable": "cannot be examined (permission?)"}


def _check_text(path, option) -> pathlib.Path:
    if path is None or str(path).strip() == "":
        raise OutputPathError("an empty path: name a file or folder to write", path=path, option=option)
    if "\x00" in str(path):
        raise OutputPathError("a path must not contain NUL", path=repr(str(path)), option=option)
    return pathlib.Path(path)


def _check_parents(p: pathlib.Path, option) -> None:
    """No existing component above ``p`` is a file or a device (``FILE/x.json``)."""
    for parent in reversed(p.parents):
        k = _kind(parent)
        if k == "missing":
            return
        if k in ("file", "special", "under-file"):
            raise OutputPathError(f"cannot be written: {parent} is a file, not a folder", path=p, option=option)
        if k in _WHY and k != "unreadable":
            raise OutputPathError(f"cannot be written: {parent} {_WHY[k]}", path=p, option=option)


def output_file(path, option: str = "--out", *, suffixes=None, stdout: bool = False) -> pathlib.Path | None:
    """Check ``path`` as a file to write (atomically); None for ``-`` when ``stdout`` is allowed.

    Refused: an empty path; an existing folder, device, FIFO or link loop (renaming over it would
    replace it); a path under a file; a suffix not in ``suffixes`` (lower-case, with the dot).
    """
    if stdout and path == "-":
        return None
    p = _check_text(path, option)
    k = _kind(p)
    if k == "folder":
        raise OutputPathError("is a folder, not a regular file; name a file to write" + (" (or - for stdout)" if stdout else ""),
                              path=p, option=option)
    if k in _WHY:
        raise OutputPathError(f"{_WHY[k]}; not replacing it", path=p, option=option)
    _check_parents(p, option)
    if suffixes is not None and p.suffix.lower() not in suffixes:
        raise OutputPathError(f"must end in {' or '.join(suffixes)}", path=p, option=option)
    return p


def output_folder(path, option: str = "--out", *, replace: str | None = None, new: bool = False,
                  legacy=None) -> pathlib.Path:
    """Check ``path`` as a folder to write into.

    By default an existing folder is written into (files added or updated by name: a resumable
    run, a report). ``new``: it must not exist (or be empty). ``replace``: a marker kind
    ('instance', 'baseline'); an existing folder is replaced only when it is empty or carries
    decomp's marker of that kind (or ``legacy(path)`` says decomp wrote it before markers).
    Refused always: an empty path, a file, a device, a link to nothing, a path under a file.
    """
    p = _check_text(path, option)
    k = _kind(p)
    if k == "file":
        raise OutputPathError("is a file; name a folder", path=p, option=option)
    if k in _WHY:
        raise OutputPathError(f"{_WHY[k]}; name a folder", path=p, option=option)
    _check_parents(p, option)
    if k == "folder" and (new or replace) and any(p.iterdir()):
        if new and not replace:
            raise OutputPathError("already exists; choose a new folder", path=p, option=option)
        found = marker_kind(p)
        if found != replace and not (legacy is not None and legacy(p)):
            why = (f"holds a decomp {found} folder, not a{'n' if replace[0] in 'aeiou' else ''} {replace}"
                   if found else "was not written by decomp (it has no .decomp marker)")
            raise OutputPathError(f"exists and {why}; not replacing it: choose another folder, or remove it "
                                  f"yourself", path=p, option=option)
    return p


def write_marker(folder, kind: str) -> None:
    """Mark ``folder`` as written whole by decomp (``kind``: 'instance', 'baseline')."""
    from . import __version__

    (pathlib.Path(folder) / MARKER).write_text(json.dumps({"written_by": "decomp", "kind": kind,
                                                           "version": __version__}) + "\n")


def marker_kind(folder) -> str | None:
    """The kind in ``folder``'s marker, or None when it has no readable marker (a link is not one)."""
    m = pathlib.Path(folder) / MARKER
    try:
        if m.is_symlink() or not m.is_file() or m.stat().st_size > 4096:
            return None
        data = json.loads(m.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if isinstance(data, dict) and data.get("written_by") == "decomp" and isinstance(data.get("kind"), str):
        return data["kind"]
    return None


def is_refused(exc: BaseException) -> bool:
    """The machine refused a write (full, read-only, no permission, quota, file too large)."""
    return isinstance(exc, OSError) and exc.errno in REFUSED_ERRNOS


@contextlib.contextmanager
def refusing(path, *, outermost: bool = False):
    """Within the block, an OSError the machine refused with becomes
    :class:`~decomp.errors.EnvironmentRefusedError` naming ``path`` (the path the user gave).
    ``outermost``: one raised deeper (naming a file inside a temporary folder being built) is
    named by ``path`` too."""
    try:
        yield
    except EnvironmentRefusedError as exc:
        if outermost and exc.path != str(path):
            raise EnvironmentRefusedError(path, exc.cause) from exc
        raise
    except OSError as exc:
        if is_refused(exc):
            raise EnvironmentRefusedError(path, exc) from exc
        raise
