"""The run journal: one JSON object per line, each flushed and fsynced, readable after a power cut."""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path


@dataclass(frozen=True)
class JournalContents:
    """Records of a journal; ``truncated`` is the unreadable last line a power cut or kill left, if any."""

    records: tuple[dict, ...]
    truncated: str | None

    def checkpoints(self) -> frozenset[str]:
        """Keys of every completed unit of work."""
        return frozenset(r["checkpoint"] for r in self.records if "checkpoint" in r)

    def last_checkpoint_s(self) -> float:
        """Clock time (s) of the last finished unit, 0 before any: where a resumed simulated run's clock starts."""
        return max((r["t_s"] for r in self.records if "checkpoint" in r), default=0.0)

    def frames_journaled(self) -> int:
        """The highest frame number journaled so far (a resumed run numbers its frames after it)."""
        return max((r["frame"] for r in self.records if "frame" in r), default=0)

    def frames(self) -> list[dict]:
        """Frame records of completed units, from the session that completed each: a unit cut short is measured
        again, whole, by a later session, and its earlier frames are left out."""
        final = {r["checkpoint"]: r["session"] for r in self.records if "checkpoint" in r}
        return [r for r in self.records if "frame" in r and final.get(r.get("unit")) == r["session"]]


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


def read_journal(path: str | Path) -> JournalContents:
    """Read every complete line; a last line cut short is returned apart, earlier bad lines are an error."""
    lines = Path(path).read_text(encoding="utf-8").split("\n")
    records, truncated = [], None
    for number, line in enumerate(lines, 1):
        if not line.strip():
            continue
        try:
            records.append(json.loads(line))
        except json.JSONDecodeError:
            is_last = all(not rest.strip() for rest in lines[number:])
            if not is_last:
                raise ValueError(f"{path}: line {number} is not a JSON record; the journal is damaged") from None
            truncated = line
    return JournalContents(tuple(records), truncated)
