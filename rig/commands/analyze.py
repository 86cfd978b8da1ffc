"""``fringecal analyze``: phase curve from a folder of split-screen fringe images."""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np

from analysis.band import Band, find_band, survey_band
from analysis.carrier import NoFringesError
from analysis.curve import CurveError, phase_curve
from analysis.fringe import REANALYSIS_METHOD, estimate, lsq_model
from analysis.imageio import DEFAULT_NAME_PATTERN, ImageFolderError, list_images, read_image
from rig.errors import UsageError
from rig.options import add_method_option, number, output_folder
from rig.output.provenance import claim_output, source_of
from rig.output.results import curve_summary, plot_curve, versions, write_json, write_phase_csv
from rig.output.runs import read_json_file

BAND_SAMPLES = 8        # frames at distinct grays used to find the band
PROGRESS_FROM = 20      # show a progress bar for folders of at least this many images


def register(command) -> None:
    p = command("analyze", cmd_analyze, "phase-vs-gray curve from a folder of fringe images", config=None)
    p.add_argument("source", metavar="SOURCE",
                   help="a run folder written by fringecal, a folder with manifest.csv (gray,file[,time_s]), "
                        "or a folder of images named by gray")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for phase.csv, analysis.json and phase.png")
    p.add_argument("--roi", metavar="x0:x1,y0:y1", help="fringe band in image pixels (default: found automatically)")
    add_method_option(p, REANALYSIS_METHOD)
    p.add_argument("--reference-gray", type=int, default=0, metavar="G", help="gray the phases are relative to (default 0)")
    p.add_argument("--sign", default="auto", choices=("auto", "+1", "-1"),
                   help="auto: from --direction; +1/-1: keep or flip the fringe phase as measured")
    p.add_argument("--direction", choices=("rising", "falling", "unknown"),
                   help="which way the panel's phase runs with gray (default: what the run's sign probe measured, "
                        "recorded in its run.json; else unknown: the curve is made to rise and the direction is "
                        "recorded as assumed)")
    p.add_argument("--name-pattern", default=DEFAULT_NAME_PATTERN, metavar="RE",
                   help="regex with one group for the gray, matched against file names without suffix "
                        f"(default {DEFAULT_NAME_PATTERN!r}: g017.png, 017.tif)")
    p.add_argument("--bit-depth", type=int, default=8, metavar="BITS", help="panel gray-level bits (default 8)")
    p.add_argument("--dark-adu", type=number("a black level in ADU", 0), default=0.0, metavar="ADU",
                   help="camera black level, subtracted for the contrast figures (default 0)")
    p.add_argument("--smooth", action="store_true", help="also fit a smooth monotone curve")
    p.add_argument("--json", action="store_true", help="print the summary as JSON on stdout")
    p.add_argument("--force", action="store_true",
                   help="write into --out even if it holds a run, or results made from another source")


def parse_roi(text: str) -> Band:
    """A Band from 'x0:x1,y0:y1' (half-open pixel bounds)."""
    try:
        xs, ys = text.split(",")
        x0, x1 = (int(v) for v in xs.split(":"))
        y0, y1 = (int(v) for v in ys.split(":"))
    except ValueError:
        raise UsageError(f"--roi: expected x0:x1,y0:y1 in pixels, got {text!r}") from None
    return Band(x0, x1, y0, y1)


def cmd_analyze(args) -> int:
    """Find the fringe band, measure every frame's fringe phase and write the phase-vs-gray curve."""
    out = output_folder(args.out)
    if not 1 <= args.bit_depth <= 16:
        raise UsageError(f"--bit-depth: expected 1 to 16 bits, got {args.bit_depth}")
    _check_finished(Path(args.source))
    try:
        return _analyze(args, out)
    except (ImageFolderError, NoFringesError, CurveError, ValueError) as err:
        raise UsageError(str(err)) from None


def _check_finished(source: Path) -> None:
    """A run folder is analysed from its manifest.csv, which a run writes as it finishes."""
    if (source / "run.json").is_file() and not (source / "manifest.csv").exists():
        try:
            status = json.loads((source / "run.json").read_text(encoding="utf-8")).get("status", "unknown")
        except (ValueError, AttributeError):
            status = "unknown"
        raise UsageError(f"SOURCE: {source} is a run that has not finished (status {status}), so it has no "
                         f"manifest.csv yet; finish it with: fringecal sweep --resume {source}")


def _analyze(args, out: Path) -> int:
    records = list_images(args.source, args.name_pattern)
    gmax = 2**args.bit_depth - 1
    bad = [r for r in records if not 0 <= r.gray <= gmax]
    if bad:
        raise UsageError(f"{bad[0].where}: gray {bad[0].gray}: expected gray levels in [0, {gmax}] for a "
                         f"{args.bit_depth}-bit panel (see --bit-depth)")
    if not any(r.gray == args.reference_gray for r in records):
        raise UsageError(f"--reference-gray: no image at gray {args.reference_gray}")
    warnings: list[str] = []

    first = read_image(records[0].path)
    shape, dtype = first.shape, first.dtype
    distinct = sorted({r.gray for r in records})
    picks = [distinct[i] for i in np.unique(np.linspace(0, len(distinct) - 1, BAND_SAMPLES).round().astype(int))]
    samples = [first] + [_read_same(r.path, shape) for r in (next(r for r in records if r.gray == g) for g in picks)]
    full_scale = _full_scale(dtype, max(int(np.max(s)) for s in samples))
    if args.dark_adu >= full_scale:
        raise UsageError(f"--dark-adu: expected a black level below the images' full scale of {full_scale} ADU, "
                         f"got {args.dark_adu:g}")
    if args.roi:
        roi = parse_roi(args.roi)
        roi.check_inside(shape, "--roi")
        survey = survey_band(samples[0], roi, args.dark_adu)
    else:
        survey = find_band(samples, args.dark_adu)
    band, carrier = survey.band, survey.carrier
    model = lsq_model(band, carrier) if args.method == "carrier-lsq" else None

    rows = []
    saturated: set[int] = set()
    with _progress(len(records)) as advance:
        for record in records:
            img = _read_same(record.path, shape)
            est = estimate(img, band, carrier, args.method, args.dark_adu, full_scale, model)
            if np.count_nonzero(img[band.slices] >= full_scale):
                saturated.add(record.gray)
            rows.append((record, est))
            advance()
    if saturated:
        warnings.append(f"saturated frames (pixels at {full_scale} counts in the band) at grays "
                        f"{', '.join(str(g) for g in sorted(saturated))}; lower the exposure")
    if survey.contrast < 0.2:
        warnings.append(f"low fringe contrast {survey.contrast:.2f}; check polarisation and overlap")
    times = [r.time_s for r, _ in rows]
    info = read_json_file(Path(args.source) / "run.json", "SOURCE")
    direction, basis = args.direction, None
    if direction is None:
        direction = (info.get("direction") or {}).get("direction", "unknown")
        basis = "measured" if direction != "unknown" else None
    amplitude = [e.amplitude_adu for _, e in rows]
    if not all(math.isfinite(a) and a > 0 for a in amplitude):
        amplitude = None
        warnings.append("a frame without fringe amplitude: the cyclic error is neither fitted nor corrected")
    scale_gray = info.get("scale_gray") if args.reference_gray == info.get("config", {}).get("sweep", {}).get(
        "reference_gray") else None
    if scale_gray is not None and not any(r.gray == scale_gray for r, _ in rows):
        scale_gray = None
    curve = phase_curve([r.gray for r, _ in rows], [e.phase_rad for _, e in rows], [e.std_rad for _, e in rows],
                        None if times[0] is None else times, [e.contrast for _, e in rows], args.reference_gray,
                        None if args.sign == "auto" else int(args.sign), args.smooth,
                        direction="unknown" if args.sign != "auto" else direction, direction_basis=basis,
                        amplitude=amplitude, scale_gray=scale_gray,
                        scale_at_s=None if times[0] is None else 0.5 * (min(times) + max(times)))
    if curve.rejected_frames:
        files = ", ".join(rows[i][0].path.name for i in curve.rejected_frames)
        warnings.append(f"{len(curve.rejected_frames)} outlier frames left out: {files}")
    if curve.rejected_grays:
        warnings.append(f"outlier gray levels left out: {', '.join(str(g) for g in curve.rejected_grays)}")
    if curve.drift is None:
        warnings.append("no drift correction: the reference gray was measured in fewer than two visits")

    claim_output(out, source_of(args.source), args.force)  # once the input is known good: its errors come first
    out.mkdir(parents=True, exist_ok=True)
    write_phase_csv(out / "phase.csv", curve)
    summary = {"source": str(args.source), "images": len(records),
               **curve_summary(curve, survey, survey.carrier, args.method, warnings,
                               "time_s" if records[0].time_s is not None else "image index", not args.roi),
               "camera_full_scale_adu": full_scale, "versions": versions()}
    write_json(out / "analysis.json", summary)
    plot_curve(out / "phase.png", curve, args.method)
    for w in summary["warnings"]:  # the curve's own (dips, a scale drift, a cyclic error not assessed) too
        print(f"fringecal: warning: {w}", file=sys.stderr)
    if args.json:
        print(json.dumps(summary, indent=2))
    else:
        s = curve.summary
        reach = f"2pi first at gray {s.first_gray_2pi}" if s.first_gray_2pi is not None else "2pi not reached"
        print(f"wrote {out}/phase.csv, analysis.json, phase.png: {curve.gray.size} grays from {len(records)} images, "
              f"range {s.range_rad:.3f} rad ({s.range_pi:.2f} pi), {reach}, worst std {s.worst_std_rad * 1e3:.1f} mrad "
              f"at gray {s.worst_std_gray}")
    return 0


def _read_same(path: Path, shape: tuple[int, int]) -> np.ndarray:
    img = read_image(path)
    if img.shape != shape:
        raise UsageError(f"{path}: expected a {shape[1]}x{shape[0]} px image like the others, "
                         f"got {img.shape[1]}x{img.shape[0]}")
    return img


def _full_scale(dtype: np.dtype, peak: int) -> int:
    """Camera full scale: 255 for 8-bit files; for 16-bit files the smallest 2^b - 1 (b >= 8) holding the peak,
    since a 10- or 12-bit camera's counts are usually stored unshifted."""
    if dtype == np.uint8:
        return 255
    if dtype.kind == "f":
        return int(2**math.ceil(math.log2(max(peak, 255) + 1)) - 1)
    return 2 ** max(8, int(peak).bit_length()) - 1


class _progress:
    """Context giving an advance() callable: a rich progress bar on stderr for long folders, else a no-op."""

    def __init__(self, total: int):
        self.total = total
        self.bar = None

    def __enter__(self):
        if self.total < PROGRESS_FROM:
            return lambda: None
        from rich.console import Console
        from rich.progress import Progress
        self.bar = Progress(console=Console(stderr=True), transient=True)
        self.bar.start()
        task = self.bar.add_task("measuring fringe phases", total=self.total)
        return lambda: self.bar.advance(task)

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.stop()
        return False
