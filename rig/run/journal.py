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
        self._fh = open(self.path, "a", encoding="utf-8")

    def append(self, record: dict) -> None:
        """Write one record as a line, flush and fsync it."""
        self._fh.write(json.dumps(record, separators=(",", ":")) + "\n")
        self._fh.flush()
        os.fsync(self._fh.fileno())

    def close(self) -> None:
        self._fh.close()
