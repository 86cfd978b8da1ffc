"""Result files of a phase curve, the same whether it came from `fringecal analyze` or from a run.

    phase.csv      gray,phase_rad,phase_std_rad,contrast,n_frames (one row per measured gray, ascending)
    analysis.json  method, band, carrier, drift model, range, warnings, versions
    phase.png      the curve with its uncertainties
"""

from __future__ import annotations

import io
import json
from pathlib import Path


from rig.atomic import write_atomic
from rig.figures import curve_figure, tuning_figure

PHASE_HEADER = ["gray", "phase_rad", "phase_std_rad", "contrast", "n_frames"]


def write_phase_csv(path: Path, curve) -> Path:
    """phase.csv of a PhaseCurve."""
    buf = io.StringIO()
    buf.write(",".join(PHASE_HEADER) + "\n")
    for g, p, s, c, n in zip(curve.gray, curve.phase_rad, curve.std_rad, curve.contrast, curve.n_frames):
        buf.write(f"{int(g)},{p:.6f},{s:.6f},{c:.4f},{int(n)}\n")
    return write_atomic(path, buf.getvalue().encode())


def curve_summary(curve, survey_or_band, carrier, method: str, warnings: list[str], time_base: str,
                  automatic_roi: bool = True) -> dict:
    """The analysis.json figures of a curve measured in a band at a carrier."""
    s = curve.summary
    band = getattr(survey_or_band, "band", survey_or_band)
    drift = None
    if curve.drift is not None:
        d = curve.drift
        drift = {"model": f"polynomial of degree {len(d.coefficients) - 1} in time", "t0_s": d.t0_s,
                 "coefficients_rad_per_s_power": list(d.coefficients), "reference_visits": d.n_visits,
                 "span_rad": d.span_rad, "time_base": time_base}
    out = {
        "method": method,
        "roi": {"x0": band.x0, "x1": band.x1, "y0": band.y0, "y1": band.y1, "automatic": automatic_roi},
        "carrier": {"period_px": carrier.period_px, "angle_deg": carrier.angle_deg, "sharpness": carrier.sharpness},
        "reference_gray": curve.reference_gray, "sign": curve.sign, "drift": drift,
        "range_rad": s.range_rad, "range_pi": s.range_pi, "first_gray_2pi": s.first_gray_2pi,
        "smooth_rms_rad": s.smooth_rms_rad, "worst_std_rad": s.worst_std_rad, "worst_std_gray": s.worst_std_gray,
        "rejected_grays": list(curve.rejected_grays), "rejected_frames": len(curve.rejected_frames),
        "warnings": list(warnings),
    }
    if hasattr(survey_or_band, "fringe_count"):
        out.update(fringe_count=survey_or_band.fringe_count, period_spread=survey_or_band.period_spread,
                   band_contrast=survey_or_band.contrast)
    return out


def write_json(path: Path, data: dict) -> Path:
    return write_atomic(path, (json.dumps(data, indent=2) + "\n").encode())


def plot_curve(path: Path, curve, method: str, truth=None) -> Path:
    """phase.png: the measured curve with error bars (and the simulator's truth when given as (gray, phase))."""
    return write_atomic(path, curve_figure(curve.gray, curve.phase_rad, curve.std_rad, curve.smooth_rad, truth,
                                           label=f"measured, {method}"))


def plot_tuning(path: Path, curve: list[tuple[int, float]], low: int, best: int) -> Path:
    """tune.png: fringe contrast against the grating's high gray, with the chosen pair marked."""
    return write_atomic(path, tuning_figure([g for g, _ in curve], [c for _, c in curve], low, best))
