"""The run folder's single writer: an exclusive lock on ``writer.lock`` held while the process lives.

The lock file holds the writer's process id, so a refused second writer can say which process writes. The lock is
the operating system's (flock): it goes with the process however that ends (even SIGKILL or a power cut), so a
stale lock file never blocks a resume.
"""

from __future__ import annotations

import fcntl
import os
from pathlib import Path

from rig.errors import UsageError

LOCK_NAME = "writer.lock"


class WriterLock:
    """Hold the run folder ``path`` for this process; raise UsageError if another process holds it."""

    def __init__(self, path: str | Path, what: str):
        self.path = Path(path) / LOCK_NAME
        self._fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(self._fd, 32, 0).decode("ascii", "replace").strip() or "unknown"
            os.close(self._fd)
            raise UsageError(f"{what}: {path} is being written by process {holder}; wait for it to end (or stop "
                             "it), then resume") from None
        os.ftruncate(self._fd, 0)
        os.pwrite(self._fd, f"{os.getpid()}\n".encode(), 0)

    def release(self) -> None:
        if self._fd is not None:
            os.close(self._fd)  # closing the descriptor drops the lock
            self._fd = None
