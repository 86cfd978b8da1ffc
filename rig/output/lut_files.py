"""The lookup-table folder: the same table in five files, and reading it back.

- ``lut.csv``: header ``index,target_phase_rad,gray``, one row per entry.
- ``lut.json``: the table (``gray``, ``target_phase_rad``) and its metadata (see ``metadata``).
- ``lut.npy``: the grays as a 1-D uint16 array (NumPy format).
- ``lut.mat``: MATLAB file with ``gray`` (uint16 row), ``target_phase_rad``, ``range_rad``, ``bit_depth``,
  ``wavelength_nm`` (NaN when not given).
- ``lut.txt``: a ``#`` line saying what the table holds (LookupTable.header_line), then one gray per line, entry 0
  first (numpy.loadtxt skips the ``#`` line).

A table short of 2 pi does not wrap, and a list of grays read as a 2 pi table would be wrong everywhere: every file
but lut.json (which states ``range_rad`` and ``short_of_two_pi``) then carries the range in its name, e.g.
``lut-range-1.60pi.npy``.
"""

from __future__ import annotations

import io
import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.io

from analysis.lut import LookupTable
from rig.atomic import write_atomic
from rig.errors import UsageError

FORMAT_NAME = "fringecal-lut"
FORMAT_VERSION = 1
FILE_NAMES = ("lut.csv", "lut.json", "lut.npy", "lut.mat", "lut.txt")
METHOD = ("weighted smoothing spline (generalised cross-validation), isotonic regression, monotone piecewise-cubic "
          "interpolation at every gray, nearest gray per target phase")


@dataclass(frozen=True, eq=False)
class StoredTable:
    """A table read back from ``lut.json``: grays for targets ``range_rad * i / len(gray)``."""

    gray: np.ndarray
    range_rad: float
    bit_depth: int
    wavelength_nm: float | None


def metadata(lut: LookupTable, source: str, created_utc: str, wavelength_nm: float | None) -> dict:
    """Everything ``lut.json`` records besides the table itself (phases in rad)."""
    return {
        **lut.metadata_fields(), "files": list(file_names(lut)),
        "format": FORMAT_NAME, "format_version": FORMAT_VERSION, "created_utc": created_utc, "source_file": source,
        "wavelength_nm": wavelength_nm, "bit_depth": lut.bit_depth, "levels": lut.levels, "range_rad": lut.range_rad,
        "method": METHOD, "window_gray": list(lut.window), "reach_rad": lut.reach_rad,
        "distinct_grays": lut.distinct_grays, "worst_quantisation_rad": lut.worst_quantisation_rad,
        "rms_quantisation_rad": lut.rms_quantisation_rad, "rms_linearity_rad": lut.rms_linearity_rad,
        "uncertainty_rad": lut.uncertainty_rad, "notes": list(lut.notes), "warnings": list(lut.warnings),
    }


def file_names(lut: LookupTable) -> tuple[str, ...]:
    """The five file names of ``lut``, in FILE_NAMES order: with the range in them when it is short of 2 pi."""
    if not lut.short_of_two_pi:
        return FILE_NAMES
    return tuple(n if n == "lut.json" else n.replace("lut.", f"lut-range-{lut.range_label}.") for n in FILE_NAMES)


def write_lut_folder(folder: Path, lut: LookupTable, meta: dict) -> list[Path]:
    """Write the five files into ``folder`` (which must exist), each atomically, and remove table files of another
    range left by an earlier table; return the paths written."""
    gray = lut.gray.astype(np.uint16)
    csv_text = "index,target_phase_rad,gray\n" + "".join(
        f"{i},{t:.9f},{g}\n" for i, (t, g) in enumerate(zip(lut.target_phase_rad, gray)))
    table = {"target_phase_rad": [round(float(t), 9) for t in lut.target_phase_rad], "gray": gray.tolist()}
    npy = io.BytesIO()
    np.save(npy, gray)
    mat = io.BytesIO()
    wavelength = meta.get("wavelength_nm")
    scipy.io.savemat(mat, {"gray": gray[None, :], "target_phase_rad": lut.target_phase_rad[None, :],
                           "range_rad": lut.range_rad, "bit_depth": float(lut.bit_depth),
                           "wavelength_nm": math.nan if wavelength is None else float(wavelength)})
    contents = {
        "lut.csv": csv_text.encode(),
        "lut.json": (json.dumps({**meta, **table}, indent=1, allow_nan=False) + "\n").encode(),
        "lut.npy": npy.getvalue(),
        "lut.mat": mat.getvalue(),
        "lut.txt": (f"# {lut.header_line()}\n" + "".join(f"{g}\n" for g in gray)).encode(),
    }
    names = file_names(lut)
    folder = Path(folder)
    for stale in [*folder.glob("lut-range-*"), *(folder / n for n in FILE_NAMES)]:
        if stale.name not in names and stale.is_file():
            stale.unlink()
    return [write_atomic(folder / name, contents[generic]) for name, generic in zip(names, FILE_NAMES)]


def read_lut_folder(folder: str | Path) -> StoredTable:
    """Read ``lut.json`` from a table folder; raise UsageError naming what is wrong."""
    path = Path(folder) / "lut.json"
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise UsageError(f"--lut: no lut.json in {folder} (make one with 'fringecal lut')") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        raise UsageError(f"--lut: {path} is not valid JSON ({err})") from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
        raise UsageError(f"--lut: {path} is not a {FORMAT_NAME} file (expected \"format\": \"{FORMAT_NAME}\")")
    try:
        gray = np.asarray(doc["gray"], dtype=np.int64)
        range_rad, bit_depth = float(doc["range_rad"]), int(doc["bit_depth"])
        wavelength = doc.get("wavelength_nm")
        wavelength = None if wavelength is None else float(wavelength)
    except (KeyError, TypeError, ValueError) as err:
        raise UsageError(f"--lut: {path} lacks a valid gray, range_rad or bit_depth ({err})") from None
    if gray.ndim != 1 or gray.size < 2 or gray.min() < 0 or gray.max() >= 2**bit_depth or not range_rad > 0:
        raise UsageError(f"--lut: {path}: expected at least 2 grays in [0, {2**bit_depth - 1}] and range_rad > 0")
    return StoredTable(gray, range_rad, bit_depth, wavelength)
