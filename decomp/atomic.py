"""Atomic writes: write to a temporary file beside the target, then rename."""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import pathlib
import tempfile

from .paths import output_file, refusing


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path in the target's folder; rename it over ``path`` on success.

    ``path`` must be a regular file or not exist (:class:`~decomp.errors.OutputPathError`
    otherwise: a folder, a device such as /dev/stdout, a pipe would be replaced by a file). A full
    disk, a read-only folder or a denied permission is
    :class:`~decomp.errors.EnvironmentRefusedError` naming ``path``, not the temporary file.
    """
    path = output_file(path, option="output file")
    with refusing(path):
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
        os.close(fd)
        # mkstemp creates the file private (0600); give it the usual mode for new files
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        try:
            yield pathlib.Path(tmp)
            os.replace(tmp, path)
        except BaseException:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)
            raise


def write_text(path, text: str) -> None:
    with atomic_path(path) as tmp:
        tmp.write_text(text)


def write_json(path, obj) -> None:
    write_text(path, json.dumps(obj, indent=2, sort_keys=False) + "\n")


def file_sha256(path) -> str:
    """The SHA-256 hex digest of a file's bytes, read in 1 MiB chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()
