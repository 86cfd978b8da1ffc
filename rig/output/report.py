"""``fringecal report``: the figures of a calibration and one self-contained HTML page to forward to a colleague.

Writes into the run folder:
    report/        curve.png, residuals.png, table.png, tuning.png, frame.png, drift.png, logged.png (each only
                   when its data are in the folder)
    report.html    setup, results, warnings, the figures (embedded as base64 PNG) and the laser-safety note

``write_report(run_dir)`` is what ``fringecal run`` calls at its end. Any folder holding a phase.csv works; the
other files (run.json, analysis.json, lut/, tune.csv, truth.csv, journal.jsonl, frames/) add their sections.
"""

from __future__ import annotations

import base64
import csv
import html
import math
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np

from analysis.curve import monotone_fit
from analysis.lut import monotone_cubic
from rig import __version__
from rig.atomic import write_atomic
from rig.errors import UsageError
from rig.output.figures import (curve_figure, drift_figure, frame_figure, logged_figure, residual_figure, table_figure,
                         tuning_figure)
from rig.output.results import now_iso
from rig.output.runs import CROP_MARGIN_PERIODS, read_journal, read_json_file, read_result

REPORT_HTML = "report.html"
FIGURE_DIR = "report"
LOGGED = (("power_mw", "power (mW)"), ("temperature_c", "temperature (°C)"))  # journal keys a bench may log
SAFETY_NOTE = ("Laser safety: this calibration lights the panel with a laser beam. Wear eyewear rated for the "
               "wavelength and power, block unused diffraction orders and stray reflections, and keep beams away "
               "from eye level. The lab's laser safety officer and local rules take precedence over this note.")


@dataclass(frozen=True)
class Figure:
    """One figure of the report: file stem, heading, caption and the PNG bytes."""

    name: str
    title: str
    caption: str
    png: bytes


def _csv_rows(path: Path) -> list[dict]:
    if not path.is_file():
        return []
    with path.open(newline="") as fh:
        return list(csv.DictReader(fh))


def _figures(folder: Path, info: dict, analysis: dict, table: dict) -> tuple[list[Figure], dict]:
    """Every figure the folder's files allow, and the figures' own numbers for the summary."""
    result = read_result(str(folder), "RUN_DIR")
    c = result.curve
    figures, numbers = [], {}
    smooth = monotone_fit(c.gray, c.phase_rad, np.maximum(c.phase_std_rad, 1e-6)) if c.gray.size >= 4 else c.phase_rad
    truth_rows = _csv_rows(folder / "truth.csv")
    truth = None
    if truth_rows:
        truth = (np.array([int(r["gray"]) for r in truth_rows]), np.array([float(r["phase_rad"]) for r in truth_rows]))
    model_rows = _csv_rows(folder / "model.csv")
    measured = np.ones(c.gray.size, bool) if c.measured is None else c.measured
    if c.measured is not None and model_rows:  # an adaptive sweep: measured levels and the model between them
        band = tuple(np.array([float(r[k]) for r in model_rows]) for k in ("gray", "phase_rad", "phase_std_rad"))
        smooth = np.interp(c.gray, band[0], band[1])
        figures.append(Figure("curve", "Calibration curve (adaptive sweep)",
                              f"The {int(measured.sum())} measured gray levels with 2σ error bars, and the model "
                              "through them with its 2σ band (drawn 50 times wide); every other level comes from the "
                              "model" + (", beside the simulated panel's true curve." if truth else "."),
                              curve_figure(c.gray[measured], c.phase_rad[measured], c.phase_std_rad[measured], None,
                                           truth, band=band)))
    else:
        figures.append(Figure("curve", "Calibration curve",
                              "Phase of every measured gray level relative to the reference gray, with 2σ error bars "
                              "from the frames' scatter, and the smooth monotone fit"
                              + (" and the simulated panel's true curve." if truth else "."),
                              curve_figure(c.gray, c.phase_rad, c.phase_std_rad, smooth, truth)))
    residual = (c.phase_rad - smooth)[measured]
    numbers["fit_rms_mrad"] = 1e3 * float(np.sqrt(np.mean(residual**2)))
    figures.append(Figure("residuals", "Residuals against the smooth fit",
                          f"Measured minus fit: {numbers['fit_rms_mrad']:.1f} mrad RMS. Points outside the grey band "
                          "(2σ of the measurement) show structure the fit does not follow, or outliers.",
                          residual_figure(c.gray[measured], residual, c.phase_std_rad[measured])))
    if table.get("gray"):
        gray = np.asarray(table["gray"], int)
        target = np.asarray(table["target_phase_rad"], float)
        inside = (gray >= c.gray[0]) & (gray <= c.gray[-1])
        measured = None
        if inside.all():
            through = monotone_cubic(c.gray, c.phase_rad, gray)
            measured = through - through[0] - target
        figures.append(Figure("table", "Lookup table",
                              f"{len(gray)} entries over {table['range_rad']:.3f} rad using grays {gray.min()}.."
                              f"{gray.max()} ({table.get('distinct_grays', len(set(gray)))} distinct); on the right, "
                              "the measured curve read through the table, minus the target.",
                              table_figure(target, gray, measured)))
    tune = _csv_rows(folder / "tune.csv")
    pair = info.get("pair")
    if tune and pair:
        figures.append(Figure("tuning", "Grating tuning",
                              f"Fringe contrast against the grating's high gray. The pair {pair['low']}/{pair['high']} "
                              "with the most contrast is a π phase step.",
                              tuning_figure([int(r["high_gray"]) for r in tune], [float(r["contrast"]) for r in tune],
                                            pair["low"], pair["high"])))
    frame = _frame_figure(folder, info)
    if frame:
        figures.append(frame)
    if (folder / "journal.jsonl").is_file():
        records = read_journal(folder / "journal.jsonl").frames()
        drift = _drift_figure(records, analysis.get("drift"), analysis.get("reference_gray", 0))
        if drift:
            figures.append(drift)
        series = [(label, np.array([r["t_s"] for r in records if r.get(key) is not None]),
                   np.array([r[key] for r in records if r.get(key) is not None])) for key, label in LOGGED]
        series = [s for s in series if s[1].size]
        if series:
            figures.append(Figure("logged", "Power and temperature", "As logged with each frame.",
                                  logged_figure(series)))
    return figures, numbers


def _frame_figure(folder: Path, info: dict) -> Figure | None:
    """A saved crop from the middle of the sweep with the band outlined (crops hold the band plus a margin)."""
    frames = [r for r in _csv_rows(folder / "manifest.csv") if (folder / r["file"]).is_file()]
    band, carrier = info.get("band"), info.get("carrier")
    if not frames or not band or not carrier:
        return None
    middle = (min(int(r["gray"]) for r in frames) + max(int(r["gray"]) for r in frames)) / 2
    row = min(frames, key=lambda r: abs(int(r["gray"]) - middle))  # a level mid-range, not the reference gray
    image = cv2.imread(str(folder / row["file"]), cv2.IMREAD_UNCHANGED)
    if image is None:
        return None
    margin = int(math.ceil(CROP_MARGIN_PERIODS * carrier["period_px"]))
    x, y = band["x0"] - max(band["x0"] - margin, 0), band["y0"] - max(band["y0"] - margin, 0)
    rect = (x, y, band["x1"] - band["x0"], band["y1"] - band["y0"])
    return Figure("frame", "A fringe frame",
                  f"Saved crop at gray {row['gray']} ({row['file']}); the outline is the band the phase is measured "
                  f"in, fringes of {carrier['period_px']:.2f} px.",
                  frame_figure(image, rect, f"gray {row['gray']}, camera counts"))


def _drift_figure(records: list[dict], drift: dict | None, reference_gray: int) -> Figure | None:
    refs = sorted((r for r in records if r["purpose"] == "reference" and r["gray"] == reference_gray
                   and r.get("phase_rad") is not None),
                  key=lambda r: r["t_s"])
    if len(refs) < 2:
        return None
    t = np.array([r["t_s"] for r in refs])
    phase = np.unwrap([r["phase_rad"] for r in refs])
    model_t = model = None
    caption = f"Phase of the reference gray at its {len(refs)} visits, relative to the first visit."
    if drift:
        model_t = np.linspace(t[0], t[-1], 200)
        model = np.polyval(drift["coefficients_rad_per_s_power"], model_t - drift["t0_s"])
        start = float(np.polyval(drift["coefficients_rad_per_s_power"], t[0] - drift["t0_s"]))
        phase = phase + 2 * np.pi * np.round((start - phase[0]) / (2 * np.pi))  # onto the model's branch
        model = model - start
        phase = phase - start
        caption += (f" The fitted drift ({drift['model']}) spans {1e3 * drift['span_rad']:.2f} mrad and is removed "
                    "from every level.")
    else:
        phase = phase - phase[0]
    return Figure("drift", "Drift", caption, drift_figure(t, phase, model_t, model))


# --- the page ------------------------------------------------------------------------------------------------
CSS = """
body{font:15px/1.5 system-ui,-apple-system,"Segoe UI",sans-serif;color:#1f3b4d;margin:0;background:#f6f7f8}
main{max-width:960px;margin:0 auto;padding:0 24px 40px;background:#fff}
header{padding:28px 0 14px;border-bottom:3px solid #c2571a}
h1{font-size:24px;margin:0}
.sub{color:#5d6b75;margin:4px 0 0}
h2{font-size:18px;margin:30px 0 10px;padding-bottom:4px;border-bottom:1px solid #dde2e6}
table{border-collapse:collapse;width:100%;font-size:14px}
td,th{text-align:left;padding:4px 10px 4px 0;border-bottom:1px solid #eef1f3;vertical-align:top}
th{font-weight:600;width:40%;color:#3d5566}
.figs figure{margin:18px 0 26px}
figure img{max-width:100%;height:auto;display:block}
figcaption{font-size:13px;color:#4a5a66;margin-top:4px}
.warn{background:#fff6ec;border-left:4px solid #c2571a;padding:8px 12px;margin:6px 0}
.ok{color:#3b7a3b}
.safety{background:#f2f5f7;border-left:4px solid #1f3b4d;padding:10px 14px;font-size:14px}
footer{color:#7a8791;font-size:12px;margin-top:30px}
code{font-size:13px}
"""


def _rows(pairs) -> str:
    return "".join(f"<tr><th>{html.escape(str(k))}</th><td>{html.escape(str(v))}</td></tr>" for k, v in pairs)


def _summary(info: dict, analysis: dict, table: dict, numbers: dict, curve) -> list[tuple[str, str]]:
    rows = [("status", info.get("status", "—")), ("wavelength", f"{info['wavelength_nm']:g} nm"
                                                   if info.get("wavelength_nm") else "not recorded")]
    span = float(curve.phase_rad[-1] - curve.phase_rad[0])
    rows.append(("phase range", f"{span:.3f} rad ({span / math.pi:.2f} π) over grays {curve.gray[0]}..{curve.gray[-1]}"
                                f", {curve.gray.size if curve.measured is None else int(curve.measured.sum())} "
                                "levels measured"))
    if "adaptive" in analysis:
        a = analysis["adaptive"]
        rows.append(("adaptive sweep", f"{a['levels_measured']} levels measured, the rest from the model; the table's "
                                       f"predicted error {1e3 * a['predicted_table_rms_rad']:.2f} mrad RMS (tolerance "
                                       f"{1e3 * a['tolerance_rad']:g} mrad, budget {a['budget_levels']} levels)"))
    if "table_error_vs_truth_rad" in analysis:
        rows.append(("table error against the simulator's truth",
                     f"{1e3 * analysis['table_error_vs_truth_rad']:.2f} mrad RMS over its entries"))
    first = analysis.get("first_gray_2pi")
    if "first_gray_2pi" in analysis:
        rows.append(("2π first reached", f"gray {first}" if first is not None else "not reached"))
    rows.append(("measurement uncertainty", f"{1e3 * float(np.sqrt(np.mean(curve.phase_std_rad**2))):.2f} mrad RMS, "
                                            f"worst {1e3 * float(curve.phase_std_rad.max()):.2f} mrad"))
    rows.append(("residual to the smooth fit", f"{numbers['fit_rms_mrad']:.2f} mrad RMS"))
    if "truth_rms_error_rad" in analysis:
        rows.append(("error against the simulator's truth", f"{1e3 * analysis['truth_rms_error_rad']:.2f} mrad RMS "
                                                            "(constant offset removed)"))
    if table.get("gray"):
        w = table.get("window_gray", [min(table["gray"]), max(table["gray"])])
        rows.append(("lookup table", f"{len(table['gray'])} entries over {table['range_rad']:.3f} rad, grays "
                                     f"{w[0]}..{w[1]}, {table.get('distinct_grays', '?')} distinct"))
        if "rms_quantisation_rad" in table:
            rows.append(("table quantisation error", f"{1e3 * table['rms_quantisation_rad']:.2f} mrad RMS, worst "
                                                     f"{1e3 * table['worst_quantisation_rad']:.2f} mrad"))
        if "rms_linearity_rad" in table:
            rows.append(("measured curve through the table", f"{1e3 * table['rms_linearity_rad']:.2f} mrad RMS "
                                                             "from linear"))
    if analysis.get("method"):
        rows.append(("fringe estimator", analysis["method"]))
    return rows


BUDGET_NAMES = {"pixel_noise": "pixel noise (A)", "frame_scatter": "frame-to-frame scatter (A)",
                "drift": "drift model (A)", "cyclic": "cyclic correction (B)", "floor": "systematic floor (B)"}


def _corrections(analysis: dict) -> list[tuple[str, str]]:
    """Rows naming what the analysis removed (direction, drift, cyclic error) and what it states instead (budget)."""
    rows = []
    if analysis.get("direction"):
        rows.append(("phase direction", f"{analysis['direction']} with gray ({analysis.get('direction_basis', '?')})"))
    d = analysis.get("drift")
    if d:
        text = (f"piston: {d['model'].removeprefix('piston: ')} from {d['reference_visits']} reference frames, "
                f"span {1e3 * d['span_rad']:.2f} mrad")
        if d.get("scale_gray") is not None:
            text += (f"; scale: from gray {d['scale_gray']} ({d['scale_visits']} frames), span "
                     f"{100 * d['scale_span']:.3f} %, curve referred to t = {d['curve_at_s']:.1f} s")
        rows.append(("drift removed", text))
    elif "drift" in analysis:
        rows.append(("drift removed", "none (the reference gray was measured in fewer than two visits)"))
    c = analysis.get("cyclic")
    if c:
        rows.append(("cyclic error (leak phasor)",
                     f"|L|/a = {c['ratio']:.4f} ± {c['ratio_std']:.4f}, phase {c['leak_phase_rad']:.3f} ± "
                     f"{c['leak_phase_std_rad']:.3f} rad, {c['significance_sigma']:.1f} σ from zero, peak error "
                     f"{1e3 * c['peak_error_rad']:.1f} mrad; correction {'ON' if c['applied'] else 'OFF'} "
                     f"({c['reason']})"))
    b = analysis.get("budget")
    if b:
        for key, part in b["components"].items():
            rows.append((f"uncertainty: {BUDGET_NAMES.get(key, key)}",
                         f"{1e3 * part['median_rad']:.3f} mrad median, {1e3 * part['max_rad']:.3f} mrad largest"))
        rows.append(("uncertainty: combined (GUM)", f"{1e3 * b['combined_median_rad']:.3f} mrad median, "
                                                    f"{1e3 * b['combined_max_rad']:.3f} mrad largest"))
    t = analysis.get("truth")
    if t:
        rows.append(("stated std against the simulator's truth",
                     f"χ² per level {t['chi2_per_level']:.2f}, {100 * t['within_2sigma']:.0f} % of {t['levels']} "
                     f"levels within 2σ, error {1e3 * t['rms_error_rad']:.2f} mrad RMS "
                     f"({1e3 * t['worst_error_rad']:.2f} worst)"))
    return rows


def _setup(info: dict) -> list[tuple[str, str]]:
    cfg = info.get("config", {})
    m, laser, cam = cfg.get("modulator", {}), cfg.get("laser", {}), cfg.get("camera", {})
    geo, pat, sweep = cfg.get("geometry", {}), cfg.get("pattern", {}), cfg.get("sweep", {})
    rows = []
    if m:
        rows.append(("panel", f"{m['width_px']} × {m['height_px']} px, {m['pitch_um']:g} µm pitch, "
                              f"{m['bit_depth']}-bit"))
    if laser:
        rows.append(("laser", f"{laser['wavelength_nm']:g} nm, {laser['power_mw']:g} mW at the panel, class "
                              f"{laser.get('laser_class', 'unset')}"))
    if cam:
        rows.append(("camera", f"{cam['width_px']} × {cam['height_px']} px, {cam['pitch_um']:g} µm, "
                               f"{cam['bit_depth']}-bit, backend {cam.get('backend', '?')}"))
    if geo:
        rows.append(("geometry", f"{geo['distance_mm']:g} mm panel to sensor, incidence {geo['incidence_deg']:g}°"))
    if pat:
        pair = info.get("pair", {})
        rows.append(("split screen", f"{pat['split']} split at {pat['split_position']:g}, grating on the "
                                     f"{pat['grating_side']}, period {pat['grating_period_px']} px, pair "
                                     f"{pair.get('low', pat['grating_low'])}/{pair.get('high', pat['grating_high'])}"))
    if sweep:
        levels = sweep["levels"] if isinstance(sweep["levels"], str) else f"{len(sweep['levels'])} levels"
        frames = sweep["frames_per_level"]
        if frames == "auto" and info.get("auto_frames"):
            chosen = info["auto_frames"]
            frames = (f"{chosen['per_level']} (auto: frames scatter {1e3 * chosen['frame_scatter_rad']:.1f} mrad, "
                      f"target {1e3 * chosen['target_rad']:g} mrad a level)")
        rows.append(("sweep", f"{levels}, {frames} frames per level, settle {sweep['settle_s']:g} s,"
                              f" reference gray {sweep['reference_gray']} every {sweep['reference_every']} levels"
                              + (f" ({sweep['reference_frames']} frames a visit)"
                                 if "reference_frames" in sweep else "")))
    if "exposure_s" in info:
        rows.append(("exposure", f"{1e3 * info['exposure_s']:.3f} ms"))
    for key, label in (("devices", "devices"), ("versions", "software")):
        if info.get(key):
            rows.append((label, ", ".join(f"{k} {v}" for k, v in info[key].items())))
    for key, label in (("started", "started"), ("ended", "ended"), ("host", "host")):
        if info.get(key):
            rows.append((label, info[key]))
    if info.get("command"):
        rows.append(("command", " ".join(info["command"])))
    return rows


def render_page(title: str, subtitle: str, summary, setup, warnings: list[str], figures: list[Figure],
                created: str, corrections=()) -> str:
    """The whole HTML page as a string (figures embedded)."""
    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{html.escape(title)}</title>", f"<style>{CSS}</style>", "</head>", "<body>", "<main>",
             "<header>", f"<h1>{html.escape(title)}</h1>", f'<p class="sub">{html.escape(subtitle)}</p>', "</header>",
             "<h2>Results</h2>", f"<table>{_rows(summary)}</table>"]
    if corrections:
        parts += ["<h2>Corrections and uncertainty budget</h2>", f"<table>{_rows(corrections)}</table>"]
    parts.append("<h2>Warnings</h2>")
    if warnings:
        parts += [f'<p class="warn">{html.escape(w)}</p>' for w in warnings]
    else:
        parts.append('<p class="ok">None recorded.</p>')
    parts += ["<h2>Figures</h2>", '<div class="figs">']
    for f in figures:
        data = base64.b64encode(f.png).decode("ascii")
        parts += [f'<figure id="fig-{f.name}">', f"<h3>{html.escape(f.title)}</h3>",
                  f'<img src="data:image/png;base64,{data}" alt="{html.escape(f.title)}">',
                  f"<figcaption>{html.escape(f.caption)}</figcaption>", "</figure>"]
    parts.append("</div>")
    if setup:
        parts += ["<h2>Setup</h2>", f"<table>{_rows(setup)}</table>"]
    parts += ["<h2>Laser safety</h2>", f'<p class="safety">{html.escape(SAFETY_NOTE)}</p>',
              f"<footer>Made by fringecal {html.escape(__version__)} on {html.escape(created)}.</footer>",
              "</main>", "</body>", "</html>"]
    return "\n".join(parts) + "\n"


def write_report(run_dir: str | Path) -> Path:
    """Write the report's PNG figures and report.html into ``run_dir``; return the HTML path."""
    folder = Path(run_dir)
    if not (folder / "phase.csv").is_file():
        raise UsageError(f"RUN_DIR: {folder} holds no phase.csv (expected a run or analyze folder)")
    info = read_json_file(folder / "run.json", "RUN_DIR")
    analysis = read_json_file(folder / "analysis.json", "RUN_DIR")
    table = read_json_file(folder / "lut" / "lut.json", "RUN_DIR")
    figures, numbers = _figures(folder, info, analysis, table)
    (folder / FIGURE_DIR).mkdir(exist_ok=True)
    for f in figures:
        write_atomic(folder / FIGURE_DIR / f"{f.name}.png", f.png)
    curve = read_result(str(folder), "RUN_DIR").curve
    warnings = list(dict.fromkeys([*info.get("warnings", []), *analysis.get("warnings", []),
                                   *table.get("warnings", [])]))
    if info.get("status") not in (None, "complete"):
        warnings.insert(0, f"the run is {info['status']}: {info.get('message', 'not finished')}")
    nm = f"{info['wavelength_nm']:g} nm" if info.get("wavelength_nm") else "wavelength not recorded"
    backend = info.get("devices", {}).get("camera_backend")
    bench = "simulated bench" if backend == "sim" else "bench"
    subtitle = f"{nm} · {bench} · {info.get('started') or 'date not recorded'} · {folder.resolve().name}"
    page = render_page(f"Phase calibration at {nm}" if info.get("wavelength_nm") else "Phase calibration", subtitle,
                       _summary(info, analysis, table, numbers, curve), _setup(info), warnings, figures, now_iso(),
                       _corrections(analysis))
    return write_atomic(folder / REPORT_HTML, page.encode("utf-8"))
