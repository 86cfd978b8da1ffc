"""The run journal: one JSON object per line, each flushed and fsynced, readable after a power cut.

It is read back by ``rig.output.runs.read_journal``.
"""

from __future__ import annotations

import json
import os
from pathlib import Path


class Journal:
    """Append-only JSON-lines file; every ``append`` is on disk when it returns.

    Opening an existing journal whose last line was cut short (a kill or power cut mid-write) removes that fragment
    first, so new lines never glue onto it; the fragment is kept in ``cut``.
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self.cut = ""
        if self.path.exists():
            data = self.path.read_bytes()
            end = data.rfind(b"\n") + 1
            if end < len(data):
                self.cut = data[end:].decode("utf-8", "replace")
                with open(self.path, "r+b") as fh:
                    fh.truncate(end)
        self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o666)

    def append(self, record: dict) -> None:
        """Write one record as a line and fsync it. If that fails (a full disk), what was written of the line is
        cut off again and the OSError, naming the journal, raised: a line is in the journal whole or not at all."""
        line = (json.dumps(record, separators=(",", ":"), allow_nan=False) + "\n").encode()
        end = os.fstat(self._fd).st_size
        try:
            view = memoryview(line)
            while view:
                view = view[os.write(self._fd, view):]
            os.fsync(self._fd)
        except OSError as err:
            os.ftruncate(self._fd, end)
            raise OSError(err.errno, err.strerror, str(self.path)) from None

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None
