"""Whole-file writes that never leave a half-written file behind: a temporary sibling renamed into place, or a new
file removed again when its write fails."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


def write_atomic(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and an atomic rename."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        # mkstemp makes the file private (0600); give it the mode a plain open() would have.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def write_whole(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to a new file ``path`` in place (no rename), every byte checked; on failure (a full disk) the
    partial file is removed and the OSError, naming ``path``, raised. For files recorded only once written (frames)."""
    path = Path(path)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o666)
    try:
        view = memoryview(data)
        while view:
            view = view[os.write(fd, view):]
    except OSError as err:
        os.close(fd)
        path.unlink(missing_ok=True)
        raise OSError(err.errno, err.strerror, str(path)) from None
    os.close(fd)
    return path
