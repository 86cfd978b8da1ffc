"""Step generators: each ``*_steps`` function yields the small steps that the engine executes. They hold no I/O.

A generator yields steps; for a ``Grab`` with ``wait=True`` the engine sends back the ``Measurement``, so it can
decide what to measure next (exposure, tuning). ``list(steps)`` on a generator that never waits runs with no hardware,
which is how tests and dry runs see what a sweep will do. ``Checkpoint`` marks a finished unit of work: a resumed
run skips every unit whose checkpoint is already in the journal; a unit is measured whole or not at all.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from analysis.tuning import coarse_peak, vertex_gray

GOLDEN = (1 + 5**0.5) / 2


@dataclass(frozen=True)
class ShowSplit:
    """Put the split-screen pattern with this mirror gray and grating pair on the panel."""

    mirror_gray: int
    low: int
    high: int


@dataclass(frozen=True)
class ShowStaircase:
    """Put the sign probe on the panel: ``mirror_gray`` on the mirror half, a blazed staircase of ``step_grays``
    on the other, rising away from the mirror half or toward it (analysis.patterns.staircase_split)."""

    mirror_gray: int
    step_grays: tuple[int, ...]
    rising_away: bool


@dataclass(frozen=True)
class UseRegion:
    """Draw later split patterns inside ``rect`` (x0, x1, y0, y1 panel px) with ``background_gray`` elsewhere;
    ``rect=None`` goes back to the whole panel."""

    rect: tuple[int, int, int, int] | None
    background_gray: int = 0


@dataclass(frozen=True)
class Settle:
    """Wait until ``seconds`` after the last pattern change; frames exposed before then are discarded."""

    seconds: float


@dataclass(frozen=True)
class Wait:
    """Let ``seconds`` pass with the pattern held."""

    seconds: float


@dataclass(frozen=True)
class SetExposure:
    """Set the camera exposure (s)."""

    exposure_s: float


@dataclass(frozen=True)
class Grab:
    """Grab ``frames`` good frames and analyse them; ``wait`` returns the Measurement to the generator."""

    frames: int
    purpose: str  # exposure | locate | tune | sign | level | reference
    gray: int
    wait: bool = False
    keep: bool = False  # save the frames' band crops in the run folder
    unit: str | None = None  # the sweep unit the frames belong to (resumable work)


@dataclass(frozen=True)
class Checkpoint:
    """The unit of work named ``key`` is complete."""

    key: str


@dataclass(frozen=True)
class Stage:
    """A new stage of the run begins (for progress display); ``total`` counts the units it will measure."""

    name: str
    total: int = 0
    done: int = 0  # units already measured (a resumed sweep)
    what: str = ""  # the units in words for the progress display, e.g. "256 gray levels + 17 drift references"


@dataclass(frozen=True)
class FrameResult:
    """What analysis made of one frame (phase fields are None before the fringe band is known)."""

    gray: int
    purpose: str
    t_s: float
    sequence: int
    peak_fraction: float
    saturated_px: int
    phase_rad: float | None = None
    phase_std_rad: float | None = None
    contrast: float | None = None
    amplitude_adu: float | None = None  # fringe amplitude: with phase_rad, the frame's complex fringe amplitude
    background_adu: float | None = None  # band-mean background under the fringes (dark included)


@dataclass(frozen=True)
class Measurement:
    """The frames of one Grab, analysed."""

    results: tuple[FrameResult, ...]
    images: tuple[np.ndarray, ...] = field(default=(), repr=False)

    @property
    def contrast(self) -> float:
        """Mean fringe contrast of the frames."""
        return float(np.mean([r.contrast for r in self.results]))

    @property
    def amplitude_adu(self) -> float:
        """Mean fringe amplitude of the frames (ADU)."""
        return float(np.mean([r.amplitude_adu or 0.0 for r in self.results]))

    @property
    def peak_fraction(self) -> float:
        """Largest fraction of full scale reached by the brightest pixels."""
        return max(r.peak_fraction for r in self.results)

    @property
    def saturated_px(self) -> int:
        return max(r.saturated_px for r in self.results)


class StepError(RuntimeError):
    """A measurement cannot go on (too little contrast, a camera that saturates at its shortest exposure)."""


# --- exposure ------------------------------------------------------------------------------------------------
MIN_EXPOSURE_S, MAX_EXPOSURE_S = 1e-6, 10.0  # exposures a camera takes (s): camera.exposure_s's bounds


def exposure_steps(cfg, exposure_s: float, low_gray: int, high_gray: int, target: float = 0.70, low: float = 0.60,
                  high: float = 0.80, tries: int = 10):
    """Bring the brightest pixels of the split pattern to ``low``..``high`` of full scale; return the exposure (s).

    Scales the exposure by target / reached while nothing clips; halves it while the peak is saturated. The fringe
    maximum does not depend on the mirror gray, only on the grating pair (how bright its first order is).
    """
    yield Stage("exposure", tries, what=f"up to {tries} exposure trials")
    yield ShowSplit(cfg.sweep.reference_gray, low_gray, high_gray)
    yield Settle(cfg.sweep.settle_s)
    for _ in range(tries):
        yield SetExposure(exposure_s)
        m = yield Grab(1, "exposure", cfg.sweep.reference_gray, wait=True)
        reached = m.peak_fraction
        if low <= reached <= high and not m.saturated_px:
            return exposure_s
        if (m.saturated_px or reached >= 0.999) and exposure_s <= MIN_EXPOSURE_S:
            raise StepError(f"exposure: the camera saturates at its shortest exposure ({MIN_EXPOSURE_S * 1e6:g} us); "
                            "attenuate the beam")
        exposure_s *= 0.5 if m.saturated_px or reached >= 0.999 else target / max(reached, 1e-3)
        exposure_s = max(min(exposure_s, cfg.camera.exposure_s * 1e3, MAX_EXPOSURE_S), MIN_EXPOSURE_S)
    raise StepError(f"exposure: no exposure brought the peak into {low:.0%}..{high:.0%} of full scale in {tries} tries"
                    f" (last {reached:.0%} at {exposure_s:.3g} s); check the light level and attenuation")


# --- locating the band ------------------------------------------------------------------------------------------
LOCATE_GRAYS = 8


def locate_steps(cfg, low: int, high: int, grays=None):
    """Show ``grays`` (default: LOCATE_GRAYS mirror grays spread over the panel's range) with the grating pair;
    return their Measurements (images kept): the band is where fringes move with the mirror gray, and their phases
    give a first coarse curve."""
    if grays is None:
        grays = [round(i * cfg.gray_max / (LOCATE_GRAYS - 1)) for i in range(LOCATE_GRAYS)]
    measurements = []
    for gray in grays:
        yield ShowSplit(gray, low, high)
        yield Settle(cfg.sweep.settle_s)
        measurements.append((yield Grab(1, "locate", gray, wait=True)))
    return measurements


def _from_reference(grays, phases_rad, reference_gray: int):
    """(grays, unwrapped fringe phase less the reference gray's, rad) of a coarse scan in gray order."""
    grays = np.asarray(grays)
    curve = np.unwrap(np.asarray(phases_rad, float))
    return grays, curve - np.interp(reference_gray, grays, curve)


def opposite_gray(grays, phases_rad, reference_gray: int) -> int:
    """The gray whose fringe phase is pi away from the reference gray's, from a coarse (gray, phase) scan."""
    grays, curve = _from_reference(grays, phases_rad, reference_gray)
    fine = np.arange(grays.min(), grays.max() + 1)
    wrapped = np.angle(np.exp(1j * (np.interp(fine, grays, curve) - np.pi)))
    return int(fine[np.argmin(np.abs(wrapped))])


def farthest_gray(grays, phases_rad, reference_gray: int) -> int:
    """The gray of a coarse (gray, phase) scan whose fringe phase lies farthest from the reference gray's: the
    longest lever for the drift of the curve's scale, whose error on a level is the scale's error times the
    level's phase from the reference (a scale measured a third of the way out is tripled at the far end)."""
    grays, curve = _from_reference(grays, phases_rad, reference_gray)
    return int(grays[np.argmax(np.abs(curve))])


# --- the sign of the phase --------------------------------------------------------------------------------
def sign_steps(cfg, step_grays: tuple[int, ...], frames: int = 2):
    """Show the blazed staircase probe rising away from the mirror half, then toward it (analysis/sign.py says
    why); return the two Measurements (away, toward)."""
    yield Stage("sign", 2, what="a blazed staircase both ways round")
    out = []
    for away in (True, False):
        yield ShowStaircase(cfg.sweep.reference_gray, tuple(step_grays), away)
        yield Settle(cfg.sweep.settle_s)
        out.append((yield Grab(frames, "sign", cfg.sweep.reference_gray, wait=True)))
    return tuple(out)


# --- tuning the grating pair ---------------------------------------------------------------------------------
@dataclass(frozen=True)
class TuneResult:
    """The grating pair with the strongest first order, and the curve behind the choice."""

    low: int
    high: int
    contrast: float
    pi_step_gray: float  # high - low (gray levels) at the fitted maximum
    curve: tuple[tuple[int, float, float], ...]  # (high gray, fringe amplitude ADU, contrast), in measuring order
    measurements: int  # grating pairs measured


def tune_steps(cfg, mirror_grays: tuple[int, int], low: int | None = None, coarse_points: int = 16,
              frames: int = 1, refine: int = 12):
    """Find the high gray (low fixed) whose binary grating has the strongest first order: a pi phase step.

    The figure of merit is the fringe amplitude at fixed exposure (proportional to the first order's field), averaged
    over two mirror grays whose fringes are pi apart, which cancels the part of any estimator leakage that follows
    the fringe phase. Coarse scan of ``coarse_points`` high grays; golden-section search (at most ``refine`` more
    pairs) in the bracket of the first peak that reaches the maximum (panels of more than 2 pi have several); the
    pair is the vertex of a parabola through the measurements near the peak, rounded to a gray level.
    """
    gmax = cfg.gray_max
    low = cfg.pattern.grating_low if low is None else low
    amplitude: dict[int, float] = {}
    contrast: dict[int, float] = {}
    order: list[int] = []

    def measure(high):
        if high not in amplitude:
            ms = []
            for gray in mirror_grays:
                yield ShowSplit(gray, low, high)
                yield Settle(cfg.sweep.settle_s)
                ms.append((yield Grab(frames, "tune", high, wait=True)))
            amplitude[high] = float(np.mean([m.amplitude_adu for m in ms]))
            contrast[high] = float(np.mean([m.contrast for m in ms]))
            order.append(high)
        return amplitude[high]

    yield Stage("tune", coarse_points + refine,
                what=f"{coarse_points} high grays, then up to {refine} more to refine the best")
    span = gmax - low
    for high in sorted({low + max(1, round(span * (i + 1) / coarse_points)) for i in range(coarse_points)}):
        yield from measure(high)
    a, b = coarse_peak(sorted(amplitude.items()), low, gmax)
    c, d = round(b - (b - a) / GOLDEN), round(a + (b - a) / GOLDEN)
    budget = refine
    while b - a > 2 and budget > 0 and c < d:
        fc = yield from measure(c)
        fd = yield from measure(d)
        budget -= 2
        if fc >= fd:
            b = d
        else:
            a = c
        c, d = round(b - (b - a) / GOLDEN), round(a + (b - a) / GOLDEN)
    best = max(amplitude, key=amplitude.get)
    lo, hi = coarse_peak(sorted(amplitude.items()), low, gmax)
    vertex = vertex_gray({h: v for h, v in amplitude.items() if lo <= h <= hi}, best)
    high = min(max(round(vertex), low + 1), gmax)
    yield from measure(high)
    return TuneResult(low, high, contrast[high], vertex - low,
                      tuple((h, amplitude[h], contrast[h]) for h in order), len(order))


# --- the sweep -------------------------------------------------------------------------------------------------
def sweep_order(levels, order: str, seed: int = 0) -> list[int]:
    """Gray levels in measuring order: ascending, shuffled (seeded), or up then down (every level twice)."""
    levels = sorted(levels)
    if order == "shuffled":
        return [levels[i] for i in np.random.default_rng(seed).permutation(len(levels))]
    if order == "up-down":
        return levels + levels[::-1]
    return levels


def sweep_units(cfg, seed: int = 0, prefix: str = "", scale_gray: int | None = None) -> list[tuple[str, str, int]]:
    """The sweep as units (checkpoint key, purpose, gray): references first, every K levels, and last.

    ``prefix`` keeps the keys of several sweeps in one journal apart (one sweep per tile of a map). With
    ``scale_gray`` every reference visit measures that gray too, right after the reference gray: two reference
    grays give the drift of the curve's scale as well as its piston (analysis.curve).
    """
    order = sweep_order(cfg.sweep_levels(), cfg.sweep.order, seed)
    every, ref = cfg.sweep.reference_every, cfg.sweep.reference_gray
    units, refs = [], 0

    def reference():
        nonlocal refs
        units.append((f"{prefix}reference:{refs}", "reference", ref))
        if scale_gray is not None:
            units.append((f"{prefix}scale-reference:{refs}", "reference", scale_gray))
        refs += 1

    if every:
        reference()
    for i, gray in enumerate(order):
        units.append((f"{prefix}level:{i}", "level", gray))
        if every and ((i + 1) % every == 0 or i + 1 == len(order)):
            reference()
    return units


def frames_for(cfg, purpose: str) -> int:
    """Frames grabbed for a sweep unit: ``sweep.reference_frames`` for a drift reference (its frames follow each
    other without a settle, so they are cheap, and its noise reaches every level), else ``frames_per_level``
    (resolved: 'auto' is replaced by the scatter probe's choice before a sweep's steps are made)."""
    if purpose == "reference":
        return cfg.sweep.reference_frames
    if cfg.sweep.frames_per_level == "auto":
        raise ValueError("sweep.frames_per_level 'auto' must be resolved by the scatter probe first")
    return cfg.sweep.frames_per_level


def scatter_steps(cfg, low: int, high: int, grays: tuple[int, ...], frames: int):
    """Hold the split pattern at each of ``grays`` and grab ``frames`` back to back (the scatter probe of
    frames_per_level 'auto'); return the Measurements in order."""
    yield Stage("frames", len(grays), what=f"{frames} frames back to back at gray{'s' if len(grays) > 1 else ''} "
                                           + ", ".join(map(str, grays)))
    out = []
    for gray in grays:
        yield ShowSplit(gray, low, high)
        yield Settle(cfg.sweep.settle_s)
        out.append((yield Grab(frames, "scatter", gray, wait=True)))
    return tuple(out)


def sweep_steps(cfg, low: int, high: int, done: frozenset[str] = frozenset(), seed: int = 0, prefix: str = "",
               stage: str = "sweep", scale_gray: int | None = None):
    """Measure every unit of the sweep not in ``done``; frames are analysed and journaled as they come."""
    units = sweep_units(cfg, seed, prefix, scale_gray)
    references = sum(purpose == "reference" for _, purpose, _ in units)
    yield Stage(stage, len(units), sum(key in done for key, _, _ in units),
                what=f"{len(units) - references} gray levels + {references} drift reference"
                     + ("s" if references != 1 else "")
                     + (f" ({references // 2} visits at grays {cfg.sweep.reference_gray} and {scale_gray})"
                        if scale_gray is not None and references else ""))
    for key, purpose, gray in units:
        if key in done:
            continue
        yield ShowSplit(gray, low, high)
        yield Settle(cfg.sweep.settle_s)
        yield Grab(frames_for(cfg, purpose), purpose, gray, keep=True, unit=key)
        yield Checkpoint(key)


@dataclass(frozen=True)
class WarmupResult:
    """How the warm-up ended: stable or not, after how long, the last slope, and the phase series followed."""

    stable: bool
    minutes: float
    slope_rad_per_min: float
    series: tuple[tuple[float, float], ...]  # (time s, unwrapped fringe phase rad)


def warmup_steps(cfg, low: int, high: int, max_minutes: float, interval_s: float = 10.0, window_s: float = 120.0):
    """Hold the reference pattern and follow its fringe phase until, over the last ``window_s``, it moves less than
    ``sweep.warmup_slope_rad_per_min``; give up (stable=False) after ``max_minutes``."""
    gray = cfg.sweep.reference_gray
    checks = int(max_minutes * 60 / interval_s) + 1
    yield Stage("warm-up", checks, what=f"up to {checks} checks of the reference fringe phase, {interval_s:g} s apart")
    yield ShowSplit(gray, low, high)
    yield Settle(cfg.sweep.settle_s)
    times, phases = [], []
    slope = float("nan")
    while True:
        m = yield Grab(2, "warmup", gray, wait=True)
        times.append(float(np.mean([r.t_s for r in m.results])))
        phases.append(float(np.angle(np.mean(np.exp(1j * np.array([r.phase_rad for r in m.results]))))))
        t, phi = np.array(times), np.unwrap(phases)
        elapsed = t[-1] - t[0]
        if elapsed >= window_s:
            recent = t >= t[-1] - window_s
            slope = float(np.polyfit(t[recent], phi[recent], 1)[0] * 60)
            if abs(slope) < cfg.sweep.warmup_slope_rad_per_min:
                return WarmupResult(True, elapsed / 60, slope, tuple(zip(t, phi)))
        if elapsed >= max_minutes * 60:
            return WarmupResult(False, elapsed / 60, slope, tuple(zip(t, phi)))
        yield Wait(interval_s)


def hold_steps(cfg, gray: int, low: int, high: int, frames: int):
    """Hold one split pattern and grab ``frames`` frames back to back; return their Measurement."""
    yield Stage("flicker", 1, what=f"{frames} frames back to back at one gray")
    yield ShowSplit(gray, low, high)
    yield Settle(cfg.sweep.settle_s)
    return (yield Grab(frames, "flicker", gray, wait=True))


def run_seconds(cfg, frame_rate_hz: float) -> float:
    """Lower bound (s) of a sweep's duration: per unit the settle time and its frames, each taking a frame period
    (free running: the first exposure that starts after the settle is at best the next one) or, software triggered,
    one exposure (the next exposure may start as the last one ends). ``cfg`` has its frames per level resolved."""
    per_frame = cfg.camera.exposure_s
    if cfg.camera.trigger == "free-run":
        per_frame = max(1.0 / frame_rate_hz, per_frame)
    two = cfg.sweep.second_reference_gray != "none" and cfg.sweep.reference_every > 0
    units = sweep_units(cfg, scale_gray=cfg.sweep.reference_gray if two else None)  # any gray counts the same
    return sum(cfg.sweep.settle_s + frames_for(cfg, purpose) * per_frame for _, purpose, _ in units)

