"""Reading finished results back: a run folder, a folder holding a phase.csv, or a phase.csv itself.

A source may end in ``@NM`` to give (or override) its wavelength in nm, for results that do not record one:
``result/phase.csv@780``. Run folders record theirs in run.json.
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass
from pathlib import Path

from analysis.dispersion import Calibration
from rig.errors import UsageError
from rig.options import WAVELENGTH_NM
from rig.output.results import MeasuredCurve, read_phase_csv


CROP_MARGIN_PERIODS = 3  # saved crops extend past the band so a later analysis can find the band again


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


def read_frames_csv(path: str | Path) -> list[dict]:
    """The frame records of a run's frames.csv (rig.run.stages.FRAME_COLUMNS; empty cells are None); UsageError
    naming the line of a bad value."""
    path = Path(path)
    try:
        rows = list(csv.DictReader(path.read_text(encoding="utf-8").splitlines()))
    except (FileNotFoundError, UnicodeDecodeError) as err:
        raise UsageError(f"frames.csv: cannot read {path} ({err.__class__.__name__})") from None
    out = []
    for line, row in enumerate(rows, start=2):
        record = {}
        for key, cell in row.items():
            cell = (cell or "").strip()
            try:
                record[key] = (None if not cell else cell if key == "purpose"
                               else int(cell) if key in ("frame", "gray") else float(cell))
            except ValueError:
                raise UsageError(f"frames.csv: {path} line {line}: column {key} expected a number, got {cell!r}") \
                    from None
        if record.get("gray") is None or record.get("t_s") is None or not record.get("purpose"):
            raise UsageError(f"frames.csv: {path} line {line}: expected gray, t_s and purpose")
        out.append(record)
    return out


@dataclass(frozen=True, eq=False)
class Result:
    """A measured curve with where it came from: its folder, run.json (empty if none) and wavelength (nm)."""

    label: str
    folder: Path
    curve: MeasuredCurve
    info: dict
    wavelength_nm: float | None

    def calibration(self, what: str) -> Calibration:
        """The curve as a Calibration; raise UsageError (naming ``what``) when no wavelength is known."""
        if self.wavelength_nm is None:
            raise UsageError(f"{what}: {self.label} records no wavelength; append it as {self.label}@NM")
        c = self.curve
        return Calibration(self.wavelength_nm, c.gray, c.phase_rad, c.phase_std_rad)


def read_json_file(path: Path, what: str) -> dict:
    """A JSON object from ``path`` ({} when the file is missing); UsageError when it is damaged."""
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return {}
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        raise UsageError(f"{what}: {path} is not valid JSON ({err})") from None
    if not isinstance(doc, dict):
        raise UsageError(f"{what}: {path}: expected a JSON object")
    return doc


def read_result(spec: str, what: str) -> Result:
    """Read ``spec`` (see the module docstring); ``what`` names the argument in error messages."""
    text, wavelength = spec, None
    if "@" in spec:
        text, _, nm = spec.rpartition("@")
        try:
            wavelength = float(nm)
        except ValueError:
            wavelength = math.nan
        low, high = WAVELENGTH_NM
        if not (math.isfinite(wavelength) and low <= wavelength <= high):
            raise UsageError(f"{what}: expected PATH@NM with a wavelength of {low:g} to {high:g} nm, got {spec!r}")
    path = Path(text)
    if path.is_dir():
        folder, csv_path = path, path / "phase.csv"
    else:
        folder, csv_path = path.parent, path
    if not csv_path.is_file():
        raise UsageError(f"{what}: no phase.csv at {csv_path} (expected a run folder, a folder with phase.csv, "
                         "or a phase.csv file)")
    info = read_json_file(folder / "run.json", what)
    if wavelength is None and info.get("wavelength_nm") is not None:
        wavelength = float(info["wavelength_nm"])
    return Result(text, folder, read_phase_csv(csv_path), info, wavelength)


def bit_depth_of(results: list[Result], default: int = 8) -> int:
    """The panel's gray-level bits from the first run.json that records a config (else ``default``)."""
    for r in results:
        bits = r.info.get("config", {}).get("modulator", {}).get("bit_depth")
        if bits is not None:
            return int(bits)
    return default


def panel_differences(results: list[Result]) -> list[str]:
    """Warnings for results whose run.json describes a different panel (size, pitch, bits, cell) than the first."""
    keys = (("modulator", "width_px"), ("modulator", "height_px"), ("modulator", "pitch_um"),
            ("modulator", "bit_depth"))
    described = [r for r in results if "config" in r.info]
    if len(described) < 2:
        return []
    first = described[0]
    notes = []
    for r in described[1:]:
        for section, key in keys:
            a = first.info["config"].get(section, {}).get(key)
            b = r.info["config"].get(section, {}).get(key)
            if a != b:
                notes.append(f"{r.label} has {section}.{key} = {b}, {first.label} has {a}: is it the same panel?")
    return notes


def read_journal(path: str | Path) -> JournalContents:
    """Read every complete line; a last line cut short is returned apart, earlier bad lines are an error
    (UsageError naming the journal, as for a journal that is missing or not text)."""
    try:
        lines = Path(path).read_text(encoding="utf-8").split("\n")
    except FileNotFoundError:
        raise UsageError(f"{path}: the run's journal is missing; without it the run cannot be finished") from None
    except UnicodeDecodeError as err:
        raise UsageError(f"{path}: the journal is damaged (not UTF-8 text at byte {err.start})") from None
    records, truncated = [], None
    for number, line in enumerate(lines, 1):
        if not line.strip():
            continue
        try:
            records.append(json.loads(line))
        except json.JSONDecodeError:
            is_last = all(not rest.strip() for rest in lines[number:])
            if not is_last:
                raise UsageError(f"{path}: line {number} is not a JSON record; the journal is damaged") from None
            truncated = line
    return JournalContents(tuple(records), truncated)
