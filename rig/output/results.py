"""Result files of a phase curve, the same whether it came from `fringecal analyze` or from a run.

    phase.csv      gray,phase_rad,phase_std_rad,contrast,n_frames (one row per measured gray, ascending); an adaptive
                   sweep's has a row for every gray and a sixth column, source: 'measured' (the level's own
                   figures) or 'model' (the model's phase and std; contrast empty, n_frames 0)
    analysis.json  method, band, carrier, drift model, range, warnings, versions
    phase.png      the curve with its uncertainties
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import math
import platform
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np

from rig import __version__
from rig.atomic import write_atomic
from rig.errors import UsageError
from rig.output.figures import curve_figure, tuning_figure

PHASE_HEADER = ("gray", "phase_rad", "phase_std_rad", "contrast", "n_frames")
MAX_PHASE_RAD = 200.0  # no panel's phase comes near: some 30 waves
SOURCE_COLUMN = "source"


def now_iso() -> str:
    return dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")


def versions() -> dict:
    """Versions of the software that produced a result."""
    import scipy
    return {"fringecal": __version__, "python": platform.python_version(), "numpy": np.__version__,
            "scipy": scipy.__version__, "opencv": cv2.__version__}


def write_phase_csv(path: Path, curve, model=None) -> Path:
    """phase.csv of a PhaseCurve; with an adaptive sweep's ``model`` (rig.run.adaptive.ModelCurve), every gray."""
    buf = io.StringIO()
    if model is None:
        buf.write(",".join(PHASE_HEADER) + "\n")
        for g, p, s, c, n in zip(curve.gray, curve.phase_rad, curve.std_rad, curve.contrast, curve.n_frames):
            buf.write(f"{int(g)},{p:.6f},{s:.6f},{c:.4f},{int(n)}\n")
        return write_atomic(path, buf.getvalue().encode())
    buf.write(",".join(PHASE_HEADER + (SOURCE_COLUMN,)) + "\n")
    measured = {int(g): row for g, *row in zip(curve.gray, curve.phase_rad, curve.std_rad, curve.contrast,
                                                curve.n_frames)}
    for g, p, s in zip(model.gray, model.phase_rad, model.std_rad):
        if int(g) in measured:
            mp, ms, c, n = measured[int(g)]
            buf.write(f"{int(g)},{mp:.6f},{ms:.6f},{c:.4f},{int(n)},measured\n")
        else:
            buf.write(f"{int(g)},{p:.6f},{s:.6f},,0,model\n")
    return write_atomic(path, buf.getvalue().encode())


def curve_summary(curve, survey_or_band, carrier, method: str, warnings: list[str], time_base: str,
                  automatic_roi: bool = True) -> dict:
    """The analysis.json figures of a curve measured in a band at a carrier: its corrections (direction, drift,
    cyclic error) and uncertainty budget with the curve's own figures; ``warnings`` come first, then the curve's."""
    s = curve.summary
    band = getattr(survey_or_band, "band", survey_or_band)
    fields = curve.analysis_fields(time_base)
    out = {
        "method": method,
        "roi": {"x0": band.x0, "x1": band.x1, "y0": band.y0, "y1": band.y1, "automatic": automatic_roi},
        "carrier": {"period_px": carrier.period_px, "angle_deg": carrier.angle_deg, "sharpness": carrier.sharpness},
        "reference_gray": curve.reference_gray, **fields,
        "range_rad": s.range_rad, "range_pi": s.range_pi, "first_gray_2pi": s.first_gray_2pi,
        "smooth_rms_rad": s.smooth_rms_rad, "worst_std_rad": s.worst_std_rad, "worst_std_gray": s.worst_std_gray,
        "rejected_grays": list(curve.rejected_grays), "rejected_frames": len(curve.rejected_frames),
        "warnings": list(warnings) + [w for w in fields["warnings"] if w not in warnings],
    }
    if hasattr(survey_or_band, "fringe_count"):
        out.update(fringe_count=survey_or_band.fringe_count, period_spread=survey_or_band.period_spread,
                   band_contrast=survey_or_band.contrast)
    return out


def write_json(path: Path, data: dict) -> Path:
    """``data`` as JSON, atomically; a NaN or infinity is refused (ValueError), never written."""
    return write_atomic(path, (json.dumps(data, indent=2, allow_nan=False) + "\n").encode())


def plot_curve(path: Path, curve, method: str, truth=None, model=None) -> Path:
    """phase.png: the measured curve with error bars (and the simulator's truth when given as (gray, phase)); an
    adaptive sweep's model with its 2-sigma band in place of the smooth fit."""
    if model is None:
        return write_atomic(path, curve_figure(curve.gray, curve.phase_rad, curve.std_rad, curve.smooth_rad, truth,
                                               label=f"measured, {method}"))
    return write_atomic(path, curve_figure(curve.gray, curve.phase_rad, curve.std_rad, None, truth,
                                           label=f"measured, {method}",
                                           band=(model.gray, model.phase_rad, model.std_rad)))


def plot_tuning(path: Path, curve: list[tuple[int, float]], low: int, best: int) -> Path:
    """tune.png: fringe contrast against the grating's high gray, with the chosen pair marked."""
    return write_atomic(path, tuning_figure([g for g, _ in curve], [c for _, c in curve], low, best))


@dataclass(frozen=True, eq=False)
class MeasuredCurve:
    """The columns of a phase.csv: gray levels, phase (rad), its std (rad), fringe contrast, frames averaged, and
    (an adaptive sweep's) which rows were measured rather than modelled."""

    gray: np.ndarray
    phase_rad: np.ndarray
    phase_std_rad: np.ndarray
    contrast: np.ndarray
    n_frames: np.ndarray
    measured: np.ndarray | None = None


def read_phase_csv(path: str | Path) -> MeasuredCurve:
    """Read a phase.csv; raise UsageError naming the line and column of the first bad value."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise UsageError(f"PHASE_CSV: no such file {path}") from None
    except (IsADirectoryError, UnicodeDecodeError) as err:
        raise UsageError(f"PHASE_CSV: cannot read {path} as text ({err.__class__.__name__})") from None
    rows = [row for row in csv.reader(text.splitlines()) if row]
    header = tuple(cell.strip() for cell in rows[0]) if rows else ()
    if header not in (PHASE_HEADER, PHASE_HEADER + (SOURCE_COLUMN,)):
        raise UsageError(f"PHASE_CSV: {path}: expected header {','.join(PHASE_HEADER)}[,{SOURCE_COLUMN}], "
                         f"got {','.join(header) or 'an empty file'}")
    if len(rows) < 3:
        raise UsageError(f"PHASE_CSV: {path}: expected at least 2 rows of measured gray levels, got {len(rows) - 1}")
    columns = [[] for _ in PHASE_HEADER]
    measured = []
    for line, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            raise UsageError(f"PHASE_CSV: {path} line {line}: expected {len(header)} values, got {len(row)}")
        where = f"{path} line {line}"
        if len(header) > len(PHASE_HEADER):
            source = row[-1].strip()
            if source not in ("measured", "model"):
                raise UsageError(f"PHASE_CSV: {where}: column {SOURCE_COLUMN} expected 'measured' or 'model', "
                                 f"got {source!r}")
            measured.append(source == "measured")
        for name, cell, column in zip(PHASE_HEADER, row, columns):
            if name == "contrast" and measured and not measured[-1] and not cell.strip():
                column.append(math.nan)  # a modelled level has no fringes of its own
                continue
            column.append(_number(cell, name, integer=name in ("gray", "n_frames"), where=where))
    curve = MeasuredCurve(*(np.asarray(c, dtype=np.int64 if n in ("gray", "n_frames") else float)
                            for n, c in zip(PHASE_HEADER, columns)),
                          measured=np.asarray(measured, bool) if measured else None)
    for name, values, low, high, expected in (
            ("phase_rad", curve.phase_rad, -MAX_PHASE_RAD, MAX_PHASE_RAD, f"a phase within ±{MAX_PHASE_RAD:g} rad"),
            ("phase_std_rad", curve.phase_std_rad, 0.0, 2 * math.pi, "a std from 0 to 2π rad")):
        bad = np.flatnonzero(~((values >= low) & (values <= high)))
        if bad.size:
            raise UsageError(f"PHASE_CSV: {path} line {int(bad[0]) + 2}: column {name} expected {expected}, "
                             f"got {values[bad[0]]:g}")
    return curve


def _number(cell: str, name: str, integer: bool, where: str) -> float:
    try:
        value = float(cell)
    except ValueError:
        value = math.nan
    if not math.isfinite(value) or integer and value != round(value):
        kind = "an integer" if integer else "a finite number"
        raise UsageError(f"PHASE_CSV: {where}: column {name} expected {kind}, got {cell.strip()!r}")
    return int(value) if integer else value
