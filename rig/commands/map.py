"""``fringecal map``: a calibration per tile of the panel, a map of its non-uniformity, and per-tile tables."""

from __future__ import annotations

import io

import numpy as np

from analysis.band import Band
from analysis.carrier import Carrier
from analysis.config import config_from_dict
from analysis.curve import phase_curve
from analysis.lut import build_lut
from analysis.panelmap import fit_surface, parse_grid, tiles
from analysis.patterns import grating_half, layout_of
from rig.atomic import write_atomic
from rig.errors import UsageError
from rig.options import add_run_options, add_sweep_options, load_bench_config
from rig.output.figures import map_figure
from rig.output.lut_files import metadata, write_lut_folder
from rig.output.results import now_iso, write_json, write_phase_csv
from rig.output.runs import JournalContents, read_journal
from rig.run.adaptive import adaptive_settings, adaptive_sweep_steps, finish_model, journal_rows, resumed_settings
from rig.run.folder import RunFolder
from rig.run.session import Session, guarded, prepare_run
from rig.run.stages import auto_exposure, choose_frames, locate, sweep_config, sweep_frames, take_dark, tune
from rig.run.steps import UseRegion, sweep_steps


def register(command) -> None:
    p = command("map", cmd_map, "calibrate each tile of the panel: maps of its non-uniformity, per-tile tables")
    add_run_options(p)
    add_sweep_options(p)
    p.add_argument("--grid", metavar="RxC", help="tiles in rows x columns, e.g. 3x3")
    p.add_argument("--resume", metavar="RUN_DIR", help="continue an interrupted map in RUN_DIR")
    p.add_argument("--background-gray", type=int, metavar="G",
                   help="gray shown outside the tile being measured (default: the reference gray)")


def _region(tile, background: int):
    """One step: draw patterns inside ``tile`` from now on."""
    r = tile.rect
    yield UseRegion((r.x0, r.x1, r.y0, r.y1), background)


def cmd_map(args) -> int:
    """Show the split-screen pattern inside one tile at a time (a uniform gray elsewhere), tune once on the centre
    tile, sweep every tile, and write per-tile curves and tables, maps of the range and of the first gray reaching
    2 pi, a smooth polynomial model of the variation, and one combined table file for the whole panel."""
    if args.resume:
        if args.grid or args.out or args.config:
            raise UsageError("--resume: the map's own grid, config and folder are used; drop --grid, --config, --out")
        folder = RunFolder.open(args.resume)
        if "map" not in folder.info:
            raise UsageError(f"--resume: {folder.path} is not a map run")
        cfg = config_from_dict(folder.info["config"], source=folder.info["config_source"])
        args.sim = args.sim or folder.info["devices"]["camera_backend"] == "sim"
        folder.update(status="running")
    else:
        if not args.grid:
            raise UsageError("--grid: expected RxC (rows x columns of tiles), such as 3x3")
        try:
            rows, cols = parse_grid(args.grid)
        except ValueError as err:
            raise UsageError(str(err)) from None
        checked = load_bench_config(args)  # before the run folder is made: a bad gray leaves nothing behind
        background = checked.sweep.reference_gray if args.background_gray is None else args.background_gray
        if not 0 <= background <= checked.gray_max:
            raise UsageError(f"--background-gray: expected a gray level in [0, {checked.gray_max}], got {background}")
        cfg, folder = prepare_run(args, "map")
        folder.update(map={"rows": rows, "cols": cols, "background_gray": background, "tiles": {}})
        adaptive_settings(args, cfg, folder)  # recorded in run.json, read back below like a resumed map's
    return guarded(folder, lambda: _measure(args, cfg, folder), resume="map")


def _measure(args, cfg, folder: RunFolder) -> int:
    info = folder.info["map"]
    grid = tiles(cfg.modulator.width_px, cfg.modulator.height_px, info["rows"], info["cols"])
    background = info["background_gray"]
    journal = folder.path / "journal.jsonl"
    contents = read_journal(journal) if journal.exists() else JournalContents((), None)
    done = contents.checkpoints()
    settings = resumed_settings(folder, cfg)
    with Session(args, cfg, folder, "fringecal map", contents.last_checkpoint_s(), contents.frames_journaled()) as s:
        if "pair" not in folder.info:
            take_dark(s)
            centre = grid[len(grid) // 2]
            s.engine.run(_region(centre, background))
            auto_exposure(s, cfg.pattern.grating_low, cfg.pattern.grating_high)
            opposite = locate(s, cfg.pattern.grating_low, cfg.pattern.grating_high)
            result = tune(s, opposite)
            auto_exposure(s, result.low, result.high)
        else:
            s.devices.camera.exposure_s = folder.info["exposure_s"]
        low, high = folder.info["pair"]["low"], folder.info["pair"]["high"]
        for tile in grid:
            s.engine.run(_region(tile, background))
            known = info["tiles"].get(tile.name)
            if known:
                b, c = known["band"], known["carrier"]
                band = Band(b["x0"], b["x1"], b["y0"], b["y1"])
                s.analyzer.use(band, Carrier(c["fx"], c["fy"], c["sharpness"]))
                folder.set_crop(band, c["period_px"], (s.devices.camera.height_px, s.devices.camera.width_px))
            else:
                locate(s, low, high)
                info["tiles"][tile.name] = {"band": folder.info["band"], "carrier": folder.info["carrier"]}
                folder.update(map=info)
            choose_frames(s, low, high)  # on the first tile measured ('auto' frames per level only)
            cfg = sweep_config(cfg, folder.info)
            prefix = f"{tile.name}/"
            if settings is None:
                s.engine.run(sweep_steps(cfg, low, high, done, prefix=prefix, stage=f"tile {tile.name}"))
            else:
                rows = journal_rows(r for r in contents.frames() if r["unit"].startswith(prefix))
                s.engine.run(adaptive_sweep_steps(cfg, low, high, settings, done, rows, prefix=prefix,
                                                  stage=f"tile {tile.name}", log=s.log))
        bench = s.devices.bench
    summary = _finish(folder, cfg, grid, bench, settings)
    first = summary["range_rad"]
    print(f"{len(grid)} tiles: range {min(first.values()):.3f}..{max(first.values()):.3f} rad "
          f"({(max(first.values()) - min(first.values())) / (2 * np.pi) * 100:.1f} % of 2 pi across the panel)")
    if "truth_range_error_rad" in summary:
        print(f"against the simulator's truth: worst tile range error "
              f"{max(map(abs, summary['truth_range_error_rad'].values())) * 1e3:.1f} mrad")
    print(f"files in {folder.path}: tiles/, map.json, map.png, tables.npy, tables.json")
    return 0


def _finish(folder: RunFolder, cfg, grid, bench, settings=None) -> dict:
    contents = read_journal(folder.path / "journal.jsonl")
    frames = sweep_frames(contents.frames())
    layout = layout_of(cfg.pattern)
    summary = {"grid": [folder.info["map"]["rows"], folder.info["map"]["cols"]], "range_rad": {},
               "first_gray_2pi": {}, "tiles": {}}
    tables, xs, ys = [], [], []
    for tile in grid:
        mine = [r for r in frames if r["unit"].startswith(f"{tile.name}/")]
        curve = phase_curve([r["gray"] for r in mine], [r["phase_rad"] for r in mine],
                            [r["phase_std_rad"] for r in mine], [r["t_s"] for r in mine],
                            [r["contrast"] for r in mine], cfg.sweep.reference_gray, None, smooth=True)
        out = folder.path / "tiles" / tile.name
        out.mkdir(parents=True, exist_ok=True)
        if settings is None:
            write_phase_csv(out / "phase.csv", curve)
            lut = build_lut(curve.gray, curve.smooth_rad, curve.std_rad, bit_depth=cfg.modulator.bit_depth)
        else:  # an adaptive sweep per tile: the table from the tile's model at every gray
            model = finish_model(journal_rows(mine), cfg, settings)
            write_phase_csv(out / "phase.csv", curve, model)
            lut = build_lut(model.gray, model.phase_rad, model.std_rad, bit_depth=cfg.modulator.bit_depth,
                            smooth=False)
            summary.setdefault("predicted_table_rms_rad", {})[tile.name] = model.table.rms_rad
        write_lut_folder(out, lut, metadata(lut, f"tiles/{tile.name}/phase.csv", now_iso(), cfg.laser.wavelength_nm))
        tables.append(lut.gray)
        summary["range_rad"][tile.name] = float(curve.summary.range_rad)
        summary["first_gray_2pi"][tile.name] = curve.summary.first_gray_2pi
        r = tile.rect
        summary["tiles"][tile.name] = {"rect": [r.x0, r.x1, r.y0, r.y1], "window_gray": list(lut.window)}
        xs.append(tile.centre_px[0])
        ys.append(tile.centre_px[1])
        if bench is not None:
            mirror = ~grating_half(r.width, r.height, layout)
            cols, rows = np.flatnonzero(mirror.any(axis=0)), np.flatnonzero(mirror.any(axis=1))
            _, truth = bench.true_curve_in(r.x0 + cols[0], r.x0 + cols[-1] + 1, r.y0 + rows[0], r.y0 + rows[-1] + 1)
            # a range is a span (rad), whichever way the phase runs with gray
            true_range = abs(float(truth[curve.gray[-1]] - truth[curve.gray[0]]))
            summary.setdefault("truth_range_rad", {})[tile.name] = true_range
            summary.setdefault("truth_range_error_rad", {})[tile.name] = summary["range_rad"][tile.name] - true_range
    m = cfg.modulator
    surface = fit_surface(xs, ys, list(summary["range_rad"].values()), m.width_px, m.height_px)
    summary["range_model"] = {"degree": surface.degree, "coefficients": list(surface.coefficients),
                              "rms_residual_rad": surface.rms_residual,
                              "terms": "1, v, u, v^2, u v, u^2 in u = 2x/width - 1, v = 2y/height - 1 (px)"}
    rows, cols = summary["grid"]
    stack = np.stack(tables).reshape(rows, cols, -1).astype(np.uint16)
    buf = io.BytesIO()
    np.save(buf, stack)
    write_atomic(folder.path / "tables.npy", buf.getvalue())
    write_json(folder.path / "tables.json", {"shape": "rows x cols x levels", "grid": [rows, cols],
                                             "tiles": summary["tiles"], "file": "tables.npy"})
    write_json(folder.path / "map.json", summary)
    ranges = np.array([summary["range_rad"][t.name] for t in grid]).reshape(rows, cols)
    firsts = np.array([np.nan if summary["first_gray_2pi"][t.name] is None else summary["first_gray_2pi"][t.name]
                       for t in grid], float).reshape(rows, cols)
    write_atomic(folder.path / "map.png", map_figure(ranges, firsts))
    folder.update(status="complete", ended=now_iso())
    return summary
