"""The adaptive sweep's steps: a first set of levels, then batches chosen by analysis.adaptive until the table is good.

Units are those of the full sweep (a level, a drift reference; each ends with a Checkpoint), keyed by gray
(``level:g123``) so a level is measured once, with a reference first, after every ``sweep.reference_every`` levels
and at the end; with a second reference gray (run.json ``scale_gray``) each reference visit measures it too
(``scale-reference:N``), as the full sweep does. Every fit, live or at the finish, makes the curve as the full sweep's
finish does: the cyclic-error correction on the frames' complex fringe amplitudes, piston and scale drift referred
to the middle of the frames so far. Each decision is journaled as a Checkpoint ``choice:K:g1,g2,...`` (empty: stop) before its levels are
measured, and is computed only from the frames of completed units, in the form the journal holds them: a resumed sweep
reads the choices already made and computes the next one from the same frames, so it measures what an uninterrupted
sweep would.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis import adaptive
from analysis.curve import CurveError, sweep_curve
from analysis.recalibrate import ShapeCheck, check_shape, recalibration_levels, unwrapped_consistently
from rig.errors import UsageError
from rig.run.steps import Checkpoint, Grab, Settle, ShowSplit, Stage, frames_for

DEFAULT_TOLERANCE_MRAD = 10.0
EARLIER_CSV = "earlier.csv"  # the earlier curve a recalibration starts from, kept in the run folder


@dataclass(frozen=True, eq=False)
class AdaptiveSettings:
    """Stop below ``tolerance_rad`` of predicted table error or after ``budget`` levels; ``shape_rad`` and
    ``shape_std_rad`` (an earlier curve at every gray, same direction) make it a recalibration."""

    tolerance_rad: float
    budget: int
    shape_rad: np.ndarray | None = None
    shape_std_rad: np.ndarray | None = None

    def first_levels(self, gray_max: int) -> list[int]:
        """The levels measured before the first decision: a handful for a recalibration, else the coarse set."""
        if self.shape_rad is not None:
            return recalibration_levels(gray_max)
        return adaptive.coarse_levels(gray_max)


@dataclass(frozen=True, eq=False)
class AdaptiveFit:
    """The phase curve of the measured levels, the model through them, and the earlier shape's verdict (if any)."""

    curve: object  # analysis.curve.PhaseCurve
    model: adaptive.CurveModel
    shape: ShapeCheck | None


def frame_row(record) -> tuple:
    """(gray, phase, std, time, contrast, fringe amplitude) of a frame as the journal holds it (a journal dict or a
    FrameResult); a missing contrast or amplitude is NaN."""
    get = record.get if isinstance(record, dict) else lambda key: getattr(record, key)
    contrast, amplitude = get("contrast"), get("amplitude_adu")
    return (int(get("gray")), get("phase_rad"), get("phase_std_rad"), round(get("t_s"), 9),
            float("nan") if contrast is None else contrast, float("nan") if amplitude is None else float(amplitude))


def journal_rows(frame_records) -> list[tuple]:
    """The sweep's frames (levels and references) of a journal's completed units, as frame rows."""
    return [frame_row(r) for r in frame_records if r["purpose"] in ("level", "reference")]


def fit_levels(rows: list[tuple], cfg, settings: AdaptiveSettings, direction: str = "unknown",
               scale_gray: int | None = None) -> AdaptiveFit:
    """The curve of the measured frames and the model through its levels (pure: the same rows, the same fit).
    ``direction`` is the sign probe's ("rising", "falling"; "unknown" makes the curve rise); ``scale_gray`` the
    second reference gray (None: piston drift only).

    Rows are put in time order first, so frames met live and frames read back from the journal give the same sums.
    The curve is made as the full sweep's finish makes it (analysis.curve.sweep_curve).
    """
    rows = sorted((r for r in rows if r[1] is not None), key=lambda r: (r[3], r[0], r[1]))
    if not rows:
        raise CurveError("adaptive sweep: no measured frame")
    gray, phase, std, t_s, contrast, amplitude = (np.array(c, dtype=float) for c in zip(*rows))
    curve, _, _ = sweep_curve(gray.astype(int), phase, std, t_s, contrast, amplitude, cfg.sweep.reference_gray,
                              direction=direction, scale_gray=scale_gray)
    way = 1 if curve.phase_rad[-1] >= curve.phase_rad[0] else -1
    shape = None
    if settings.shape_rad is not None:
        shape = check_shape(curve.gray, curve.phase_rad, curve.std_rad, settings.shape_rad, settings.shape_std_rad,
                            cfg.gray_max)
    # The earlier shape stays in the model's mean either way: when the chi-square rejects it, the residual's fitted
    # amplitude carries the misfit and the sweep goes on measuring (with the unwrapping rule) until the table is good.
    model = adaptive.fit_model(curve.gray, curve.phase_rad, curve.std_rad, cfg.gray_max, way,
                               settings.shape_rad, settings.shape_std_rad)
    return AdaptiveFit(curve, model, shape)


def adaptive_sweep_steps(cfg, low: int, high: int, settings: AdaptiveSettings, done: frozenset[str] = frozenset(),
                        rows=(), prefix: str = "", stage: str = "sweep", log=None, direction: str = "unknown",
                        scale_gray: int | None = None):
    """Measure the adaptive sweep's units not in ``done``; ``rows`` are the frames of the done units (frame_row).

    ``log(message)`` hears each decision; ``direction`` is the sign probe's and ``scale_gray`` the second reference
    gray, visited with every reference (see fit_levels).
    """
    rows = list(rows)
    every, ref_gray = cfg.sweep.reference_every, cfg.sweep.reference_gray
    count = {"refs": 0, "since": 0, "levels": 0}
    levels_seen: set[int] = set()
    # at most: the budget's levels, their references, and a choice checkpoint per batch (the dashboard counts those)
    visits = (settings.budget // max(every, 1) + 2) * (1 if scale_gray is None else 2)
    most = settings.budget + visits + settings.budget // adaptive.BATCH + 1
    yield Stage(stage, most, sum(k.startswith(prefix) for k in done))

    def measure(key, purpose, gray):
        if key in done:
            return
        yield ShowSplit(gray, low, high)
        yield Settle(cfg.sweep.settle_s)
        m = yield Grab(frames_for(cfg, purpose), purpose, gray, wait=True, keep=True, unit=key)
        rows.extend(frame_row(r) for r in m.results)
        yield Checkpoint(key)

    def reference():
        refs = count["refs"]
        count["refs"] += 1
        yield from measure(f"{prefix}reference:{refs}", "reference", ref_gray)
        if scale_gray is not None:
            yield from measure(f"{prefix}scale-reference:{refs}", "reference", scale_gray)

    def level(gray):
        count["levels"] += 1
        levels_seen.add(gray)
        yield from measure(f"{prefix}level:g{gray}", "level", gray)
        count["since"] += 1
        if every and count["since"] == every:
            count["since"] = 0
            yield from reference()

    if every:
        yield from reference()
    for gray in settings.first_levels(cfg.gray_max):
        yield from level(gray)
    k = 0
    while True:
        recorded = [key for key in done if key.startswith(f"{prefix}choice:{k}:")]
        if recorded:
            text = recorded[0].split(":", 2)[2]
            grays = [int(g) for g in text.split(",")] if text else []
        else:
            fit = fit_levels(rows, cfg, settings, direction, scale_gray)
            decision = adaptive.decide(fit.model, cfg.modulator.bit_depth, settings.tolerance_rad, settings.budget,
                                       count["levels"],
                                       check_gaps=fit.shape is None or not unwrapped_consistently(fit.shape),
                                       exclude=levels_seen)
            grays = list(decision.grays)
            if log is not None:
                log(describe(decision, count["levels"], fit.shape))
            yield Checkpoint(f"{prefix}choice:{k}:{','.join(map(str, grays))}")
        if not grays:
            break
        for gray in grays:
            yield from level(gray)
        k += 1
    if every and count["since"]:
        yield from reference()  # a closing visit, so the drift model is never extrapolated past the last level


def describe(decision: adaptive.Decision, levels: int, shape: ShapeCheck | None) -> str:
    """One log line for a decision."""
    head = f"{levels} levels, predicted table error {decision.predicted_rms_rad * 1e3:.1f} mrad RMS"
    if shape is not None:
        head += f"; {shape.describe()}"
    if decision.reason == "measure":
        return f"{head}; next: {', '.join(map(str, decision.grays))}"
    reasons = {"tolerance": "below the tolerance: done", "budget": "level budget spent: done",
               "exhausted": "no level left that helps: done"}
    return f"{head}; {reasons[decision.reason]}"


def choose_mode(cfg, adaptive: bool, full: bool) -> bool:
    """Whether the sweep is adaptive: --adaptive or --full when given, else adaptive above 8 bits."""
    if adaptive and full:
        raise UsageError("--adaptive, --full: expected at most one of them")
    return adaptive or (not full and cfg.modulator.bit_depth > 8)


def settings_for(cfg, tolerance_mrad: float | None, max_levels: int | None, earlier=None) -> AdaptiveSettings:
    """The adaptive sweep's settings from the options (defaults: 10 mrad, analysis.adaptive.default_budget levels);
    ``earlier`` is (phase, std) of an earlier curve at every gray, for a recalibration."""
    tolerance = DEFAULT_TOLERANCE_MRAD if tolerance_mrad is None else tolerance_mrad
    if not (0 < tolerance < 1000):
        raise UsageError(f"--tolerance-mrad: expected a predicted table error in (0, 1000) mrad, got {tolerance}")
    budget = adaptive.default_budget(cfg.modulator.bit_depth) if max_levels is None else max_levels
    first = len(AdaptiveSettings(1.0, 0, *(earlier or (None, None))).first_levels(cfg.gray_max))
    if not first <= budget <= cfg.gray_max + 1:
        raise UsageError(f"--max-levels: expected {first} to {cfg.gray_max + 1} levels, got {budget}")
    shape, shape_std = earlier if earlier is not None else (None, None)
    return AdaptiveSettings(tolerance * 1e-3, budget, shape, shape_std)


def earlier_curve(gray, phase_rad, std_rad, gray_max: int, what: str) -> tuple[np.ndarray, np.ndarray]:
    """An earlier run's curve (its phase.csv rows) at every gray 0..gray_max, for a recalibration."""
    gray = np.asarray(gray, int)
    if gray.size < 4 or gray[0] > 0 or gray[-1] < gray_max or gray[-1] > gray_max:
        raise UsageError(f"{what}: expected a curve over grays 0..{gray_max} (the same panel's bit depth), "
                         f"got grays {gray[0]}..{gray[-1]}")
    grays = np.arange(gray_max + 1)
    return np.interp(grays, gray, phase_rad), np.interp(grays, gray, std_rad)


@dataclass(frozen=True, eq=False)
class ModelCurve:
    """An adaptive sweep's result: the model's phase and std (rad) at every gray, which grays were measured, the fit
    and the table's predicted error."""

    gray: np.ndarray
    phase_rad: np.ndarray
    std_rad: np.ndarray
    measured: np.ndarray  # bool per gray
    fit: AdaptiveFit
    table: adaptive.TablePrediction

    def summary(self, settings: AdaptiveSettings) -> dict:
        """The analysis.json figures of the model."""
        m = self.fit.model
        out = {"model": "Gaussian process: Matérn-5/2 residual on a linear mean"
                        + (" and the earlier curve's shape" if m.shape_rad is not None else "")
                        + ", hyperparameters by marginal likelihood",
               "levels_measured": int(self.measured.sum()), "tolerance_rad": settings.tolerance_rad,
               "budget_levels": settings.budget, "predicted_table_rms_rad": self.table.rms_rad,
               "amplitude_rad": m.hyper.amplitude_rad, "length_gray": m.hyper.length * m.gray_max,
               "excess_noise_rad": m.hyper.excess_rad, "leave_one_out_variance_factor": m.birge}
        if self.fit.shape is not None:
            s = self.fit.shape
            out["earlier_shape"] = {"holds": s.holds, "scale": s.scale, "scale_std": s.scale_std, "chi2": s.chi2,
                                    "dof": s.dof, "p_value": s.p_value}
        return out


def finish_model(rows: list[tuple], cfg, settings: AdaptiveSettings, direction: str = "unknown",
                 scale_gray: int | None = None) -> ModelCurve:
    """The model through every measured frame of an adaptive sweep (the closing reference included), running the
    sign probe's ``direction``, with ``scale_gray`` the second reference gray (see fit_levels)."""
    fit = fit_levels(rows, cfg, settings, direction, scale_gray)
    gray, phase, std = fit.model.curve()
    measured = np.isin(gray, fit.curve.gray)
    return ModelCurve(gray, phase, std, measured, fit, adaptive.predict_table(fit.model, cfg.modulator.bit_depth))


def adaptive_settings(args, cfg, folder, earlier=None) -> AdaptiveSettings | None:
    """The sweep's settings from the options (None: the full sweep), recorded in run.json so --resume uses them;
    ``earlier`` is an earlier run's result (rig.output.runs.Result) to recalibrate from, kept as earlier.csv."""
    if earlier is None and not choose_mode(cfg, args.adaptive, args.full):
        folder.update(sweep_mode="full")
        return None
    if earlier is not None and args.full:
        raise UsageError("--from, --full: a recalibration measures only the levels it needs; drop --full")
    shape = None
    if earlier is not None:
        c = earlier.curve
        shape = earlier_curve(c.gray, c.phase_rad, c.phase_std_rad, cfg.gray_max, "--from")
        folder.write_csv(EARLIER_CSV, ["gray", "phase_rad", "phase_std_rad"],
                         ((g, f"{p:.6f}", f"{s:.6f}") for g, (p, s) in enumerate(zip(*shape))))
    settings = settings_for(cfg, args.tolerance_mrad, args.max_levels, shape)
    folder.update(sweep_mode="adaptive", adaptive={"tolerance_rad": settings.tolerance_rad, "budget": settings.budget,
                                                   "from": None if earlier is None else str(earlier.folder)})
    return settings


def resumed_settings(folder, cfg) -> AdaptiveSettings | None:
    """The settings a run folder's adaptive sweep was started with (None for a full sweep)."""
    info = folder.info.get("adaptive")
    if folder.info.get("sweep_mode") != "adaptive" or info is None:
        return None
    shape = None
    if info.get("from") is not None:
        rows = np.loadtxt(folder.path / EARLIER_CSV, delimiter=",", skiprows=1, ndmin=2)
        shape = (rows[:, 1], rows[:, 2])
    return AdaptiveSettings(info["tolerance_rad"], info["budget"], *(shape or (None, None)))
