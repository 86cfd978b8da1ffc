"""Result files of a phase curve, the same whether it came from `fringecal analyze` or from a run.

    phase.csv      gray,phase_rad,phase_std_rad,contrast,n_frames (one row per measured gray, ascending)
    analysis.json  method, band, carrier, drift model, range, warnings, versions
    phase.png      the curve with its uncertainties
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np

from rig.atomic import write_atomic

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
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(7, 4.5), dpi=110)
    ax.errorbar(curve.gray, curve.phase_rad / np.pi, yerr=curve.std_rad / np.pi, fmt=".", ms=3, capsize=1.5,
                label=f"measured ({method})")
    if curve.smooth_rad is not None:
        ax.plot(curve.gray, curve.smooth_rad / np.pi, "-", lw=1, label="monotone fit")
    if truth is not None:
        ax.plot(truth[0], truth[1] / np.pi, "-", lw=0.8, color="0.4", label="simulator truth")
    ax.set_xlabel("gray level")
    ax.set_ylabel(f"phase relative to gray {curve.reference_gray} (π rad)")
    ax.grid(alpha=0.3)
    ax.legend(loc="upper left")
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    plt.close(fig)
    return write_atomic(path, buf.getvalue())


def plot_tuning(path: Path, curve: list[tuple[int, float]], low: int, best: int) -> Path:
    """tune.png: fringe contrast against the grating's high gray, with the chosen pair marked."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    pts = sorted(curve)
    fig, ax = plt.subplots(figsize=(6, 3.8), dpi=110)
    ax.plot([g for g, _ in pts], [c for _, c in pts], "o-", ms=3, lw=0.8)
    ax.axvline(best, color="C3", lw=0.8, label=f"chosen pair {low}/{best}")
    ax.set_xlabel(f"grating high gray (low gray {low})")
    ax.set_ylabel("fringe contrast")
    ax.grid(alpha=0.3)
    ax.legend()
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    plt.close(fig)
    return write_atomic(path, buf.getvalue())
