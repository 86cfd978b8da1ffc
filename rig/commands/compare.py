"""``fringecal compare`` and ``fringecal predict``: one panel at several wavelengths.

compare overlays measured curves and checks them against the panel model of analysis/dispersion.py; predict fits
that model and writes the curve and lookup table of a wavelength that was not measured.

predict writes into its --out folder:
    phase.csv        the predicted curve in the phase.csv format; phase_std_rad is the prediction's uncertainty,
                     contrast and n_frames are 0 (nothing was measured at this wavelength)
    prediction.json  the model, its coefficients, the source results and the uncertainty figures
    prediction.png   the predicted curve with a 2-sigma band among the measured ones
    lut/             the five table files built from the predicted curve
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np

from analysis.dispersion import fit_panel, predict, scale
from analysis.lut import build_lut
from rig.atomic import write_atomic
from rig.errors import UsageError
from rig.options import WAVELENGTH, output_folder
from rig.output.provenance import claim_output, prediction_source
from rig.output.figures import prediction_figure, wavelengths_figure
from rig.output.lut_files import metadata, write_lut_folder
from rig.output.results import now_iso, write_json
from rig.output.runs import bit_depth_of, panel_differences, read_result

MODEL = ("phase(gray, lambda) = f(gray) * D(lambda) / lambda, D = 1 + b/lambda^2 + c/lambda^4 (extended-Cauchy "
         "birefringence over its constant term, lambda in um)")


def _fit(results, what: str):
    try:
        return fit_panel([r.calibration(what) for r in results])
    except ValueError as err:
        raise UsageError(f"{what}: {err}") from None


def _coefficients_line(model) -> str:
    how = "c tied to b^2 (two wavelengths)" if model.tied else "b and c fitted"
    sb, sc = math.sqrt(max(model.covariance[0, 0], 0.0)), math.sqrt(max(model.covariance[1, 1], 0.0))
    return (f"dispersion: b = {model.b_um2:.4f} ± {sb:.4f} um^2, c = {model.c_um4:.5f} ± {sc:.5f} um^4 ({how}), "
            f"reference {model.reference_nm:g} nm")


def temperature_shifts(results) -> list[str]:
    """For curves of one wavelength measured at two or more logged temperatures: how the range moves per kelvin
    (a straight-line fit of range against temperature) and the curve shift between the coldest and warmest."""
    lines = []
    by_nm: dict[float, list] = {}
    for r in results:
        if r.wavelength_nm and r.info.get("temperature_c") is not None:
            by_nm.setdefault(r.wavelength_nm, []).append(r)
    for nm, group in sorted(by_nm.items()):
        temps = np.array([r.info["temperature_c"] for r in group])
        if len(group) < 2 or np.ptp(temps) < 0.1:
            continue
        # a range is a span, whichever way the phase runs with gray
        spans = np.array([abs(float(r.curve.phase_rad[-1] - r.curve.phase_rad[0])) for r in group])
        slope = float(np.polyfit(temps, spans, 1)[0])
        cold, warm = group[int(np.argmin(temps))], group[int(np.argmax(temps))]
        grays = np.intersect1d(cold.curve.gray, warm.curve.gray)
        shift = (np.interp(grays, warm.curve.gray, warm.curve.phase_rad)
                 - np.interp(grays, cold.curve.gray, cold.curve.phase_rad))
        lines.append(f"temperature at {nm:g} nm: range {slope * 1e3:+.1f} mrad per K over {temps.min():.1f}.."
                     f"{temps.max():.1f} C; warmest minus coldest curve: mean {shift.mean() * 1e3:+.1f} mrad, "
                     f"largest {shift[np.argmax(np.abs(shift))] * 1e3:+.1f} mrad")
    return lines


def cmd_compare(args) -> int:
    """Overlay the curves of one panel measured at several wavelengths and check them against the panel model.

    Prints per curve its range, the first gray reaching 2 pi, its scale ratio to the first curve (measured and as
    the fitted dispersion model gives it) and its RMS misfit to the model.
    """
    if len(args.runs) < 2:
        raise UsageError(f"RUN: expected at least 2 results to compare, got {len(args.runs)}")
    if args.out and Path(args.out).suffix.lower() != ".png":
        raise UsageError(f"--out: expected a .png file name, got {args.out}")
    if args.out and not Path(args.out).parent.exists():
        raise UsageError(f"--out: folder {Path(args.out).parent} does not exist")
    results = [read_result(spec, "RUN") for spec in args.runs]
    wavelengths = [r.wavelength_nm for r in results]
    # the dispersion model needs distinct wavelengths; curves of one wavelength are compared as they are
    model = _fit(results, "RUN") if all(wavelengths) and len(set(wavelengths)) == len(wavelengths) else None
    print(f"{'curve':<28} {'nm':>7} {'temp C':>7} {'range rad':>10} {'2pi at':>7} {'ratio':>16} {'model':>7} "
          f"{'misfit mrad':>12}")
    for i, r in enumerate(results):
        c = r.curve
        span = abs(float(c.phase_rad[-1] - c.phase_rad[0]))  # a span, whichever way the phase runs
        reach = np.flatnonzero(np.abs(c.phase_rad - c.phase_rad[0]) >= 2 * np.pi)
        first = str(int(c.gray[reach[0]])) if reach.size else "-"
        nm = f"{r.wavelength_nm:g}" if r.wavelength_nm else "?"
        if model is None:
            ratio = modelled = misfit = "-"
        else:
            ratio = f"{model.ratios[i]:.4f} ± {model.ratio_std[i]:.4f}"
            modelled = f"{float(scale(r.wavelength_nm, model.reference_nm, model.b_um2, model.c_um4)):.4f}"
            misfit = f"{1e3 * model.residual_rms_rad[i]:.1f}"
        temp = r.info.get("temperature_c")
        temp = "-" if temp is None else f"{temp:.1f}"
        print(f"{r.label[-28:]:<28} {nm:>7} {temp:>7} {span:>10.3f} {first:>7} {ratio:>16} {modelled:>7} "
              f"{misfit:>12}")
    for line in temperature_shifts(results):
        print(line)
    if model is not None:
        print(_coefficients_line(model))
        if model.tied:
            print("note: two wavelengths fix one dispersion coefficient; a third calibration would test the model")
    for note in panel_differences(results):
        print(f"warning: {note}", file=sys.stderr)
    if args.out:
        curves = [(r.label, r.wavelength_nm, r.curve.gray, r.curve.phase_rad) for r in results]
        shapes = None
        if model is not None:
            shapes = [(r.curve.gray, r.curve.phase_rad / ratio) for r, ratio in zip(results, model.ratios)]
        write_atomic(Path(args.out), wavelengths_figure(curves, shapes))
        print(f"wrote {args.out}")
    return 0


def cmd_predict(args) -> int:
    """Predict the phase curve and lookup table of a wavelength not measured, from two or more calibrations.

    The panel model (same response shape at every wavelength, extended-Cauchy birefringence) is fitted to the
    calibrations; the predicted curve carries an uncertainty per gray level (prediction.json says how it is made).
    """
    if len(args.sources) < 2:
        raise UsageError(f"--from: expected at least 2 calibrations of the panel, got {len(args.sources)}")
    out = output_folder(args.out)
    claim_output(out, prediction_source(args.sources, args.wavelength_nm), args.force)
    results = [read_result(spec, "--from") for spec in args.sources]
    model = _fit(results, "--from")
    pred = predict(model, args.wavelength_nm)
    lams = model.wavelengths_nm
    inside = min(lams) <= args.wavelength_nm <= max(lams)
    bits = bit_depth_of(results)
    try:
        lut = build_lut(pred.gray, pred.phase_rad, pred.phase_std_rad, bit_depth=bits)
    except ValueError as err:
        raise UsageError(f"--wavelength-nm: the predicted curve cannot make a table ({err})") from None

    out.mkdir(exist_ok=True)
    rows = "".join(f"{int(g)},{p:.6f},{s:.6f},0,0\n" for g, p, s in zip(pred.gray, pred.phase_rad, pred.phase_std_rad))
    write_atomic(out / "phase.csv", ("gray,phase_rad,phase_std_rad,contrast,n_frames\n" + rows).encode())
    (out / "lut").mkdir(exist_ok=True)
    created = now_iso()
    write_lut_folder(out / "lut", lut, {**metadata(lut, str(out / "phase.csv"), created, args.wavelength_nm),
                                        "predicted_from": [r.label for r in results]})
    rms_std = float(np.sqrt(np.mean(pred.phase_std_rad**2)))
    doc = {
        "wavelength_nm": args.wavelength_nm, "created": created, "model": MODEL,
        "sources": [{"path": r.label, "wavelength_nm": r.wavelength_nm, "ratio": model.ratios[i],
                     "ratio_std": model.ratio_std[i], "misfit_rms_rad": model.residual_rms_rad[i]}
                    for i, r in enumerate(results)],
        "reference_nm": model.reference_nm, "b_um2": model.b_um2, "c_um4": model.c_um4,
        "coefficient_covariance": model.covariance.tolist(), "c_tied_to_b_squared": model.tied,
        "scale_to_reference": pred.scale, "inside_measured_wavelengths": inside,
        "range_rad": float(pred.phase_rad[-1] - pred.phase_rad[0]), "uncertainty_rms_rad": rms_std,
        "closure_rms_rad": pred.closure_rad,
        "uncertainty": "per gray: shape std scaled, coefficient covariance propagated, and with two calibrations "
                       "the change of the prediction between c = b^2 and c = 0",
        "lut": {"folder": "lut", "window_gray": list(lut.window), "distinct_grays": lut.distinct_grays,
                "range_rad": lut.range_rad},
    }
    write_json(out / "prediction.json", doc)
    sources = [(r.wavelength_nm, r.curve.gray, r.curve.phase_rad) for r in results]
    write_atomic(out / "prediction.png", prediction_figure(sources, args.wavelength_nm, pred.gray, pred.phase_rad,
                                                           pred.phase_std_rad))
    print(_coefficients_line(model))
    print(f"predicted {args.wavelength_nm:g} nm: range {doc['range_rad']:.3f} rad "
          f"({doc['range_rad'] / math.pi:.2f} pi), {pred.scale:.4f} x the {model.reference_nm:g} nm curve; "
          f"uncertainty {1e3 * rms_std:.1f} mrad RMS over grays (worst {1e3 * pred.phase_std_rad.max():.1f} mrad)")
    print(f"table: grays {lut.window[0]}..{lut.window[1]} for {lut.range_rad:.3f} rad, {lut.distinct_grays} distinct")
    print(f"wrote {out}/phase.csv, prediction.json, prediction.png, lut/")
    if not inside:
        print(f"warning: {args.wavelength_nm:g} nm lies outside the measured {min(lams):g}..{max(lams):g} nm; "
              "the prediction extrapolates the dispersion (see its uncertainty)", file=sys.stderr)
    for note in [*panel_differences(results), *lut.warnings]:
        print(f"warning: {note}", file=sys.stderr)
    return 0


def register(command) -> None:
    """Add ``fringecal compare`` and ``fringecal predict`` to the parser."""
    p = command("compare", cmd_compare, "overlay curves of one panel at several wavelengths and check the model",
                config=None)
    p.add_argument("runs", nargs="+", metavar="RUN", help="run folder, folder with phase.csv, or phase.csv; "
                                                          "append @NM when no run.json records the wavelength")
    p.add_argument("--out", metavar="FILE.png", help="also write the overlay figure")
    p = command("predict", cmd_predict, "predict the curve and lookup table at a wavelength not measured",
                config=None)
    p.add_argument("--from", dest="sources", nargs="+", required=True, metavar="RUN",
                   help="two or more calibrations of the panel (run folders, or PATH@NM)")
    p.add_argument("--wavelength-nm", type=WAVELENGTH, required=True, metavar="NM", help="wavelength to predict")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for phase.csv, prediction.json/png and lut/")
    p.add_argument("--force", action="store_true",
                   help="write into --out even if it holds a run, or results made from another source")
