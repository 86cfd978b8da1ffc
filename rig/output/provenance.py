"""Where the results already in an output folder came from, so that no command replaces another's results.

`analyze`, `lut` and `predict` refuse an --out folder that holds a run (run.json), or results made from another
source, unless --force is given. The source is what the results record: analysis.json's ``source``, lut.json's
``source_file``, prediction.json's ``sources`` and ``wavelength_nm``.
"""

from __future__ import annotations

import json
from pathlib import Path

from rig.errors import UsageError

# result files a folder may hold, and what each records about its source
RESULT_FILES = ("phase.csv", "analysis.json", "lut.json", "lut.npy", "prediction.json")


def claim_output(out: str | Path, source: str, force: bool, what: str = "--out") -> None:
    """Allow writing results of ``source`` (as :func:`source_of` states it) into ``out``; else UsageError."""
    out = Path(out)
    if force or not out.is_dir():
        return
    if (out / "run.json").exists():
        raise UsageError(f"{what}: {out} holds a run, whose results this would replace; pick another folder "
                         "(or add --force)")
    held = [name for name in RESULT_FILES if (out / name).exists()]
    if not held:
        return
    recorded = recorded_source(out)
    if recorded != source:
        raise UsageError(f"{what}: {out} holds results ({', '.join(held)}) made from "
                         f"{recorded or 'an unknown source'}, not {source}; pick another folder (or add --force)")


def source_of(path: str | Path, relative_to: Path | None = None) -> str:
    """A source path as results compare it: resolved, relative paths first against ``relative_to`` if given and
    the file is there, else against the working folder."""
    path = Path(path)
    if relative_to is not None and not path.is_absolute() and (relative_to / path).exists():
        path = relative_to / path
    return str(path.resolve())


def prediction_source(paths: list[str], wavelength_nm: float) -> str:
    """What a prediction is made from: its calibrations and its wavelength."""
    return f"{', '.join(sorted(source_of(p.rpartition('@')[0] if '@' in p else p) for p in paths))} " \
           f"at {wavelength_nm:g} nm"


def recorded_source(out: Path) -> str | None:
    """The source the results in ``out`` record (None when they record none, or cannot be read)."""
    doc = _read(out / "prediction.json")
    if doc is not None and isinstance(doc.get("sources"), list) and "wavelength_nm" in doc:
        return prediction_source([str(s.get("path")) for s in doc["sources"] if isinstance(s, dict)],
                                 float(doc["wavelength_nm"]))
    for name, key in (("analysis.json", "source"), ("lut.json", "source_file")):
        doc = _read(out / name)
        if doc is not None and isinstance(doc.get(key), str):
            return source_of(doc[key], out.parent)
    return None


def _read(path: Path) -> dict | None:
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return doc if isinstance(doc, dict) else None
