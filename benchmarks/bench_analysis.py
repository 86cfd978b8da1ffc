"""Fringe analysis: phase error of each estimator against the simulator's truth and the Cramér–Rao bound.

Simulated sweeps of the 1064 nm demo bench (every 4th gray, 2 frames a level, gray 0 first, after every 16 levels
and last, as the rig schedules references) at three light levels, with vibration jitter, and with 1 rad of drift.
Each curve is scored offset-free: the rms over gray levels of its error after removing the mean error, divided by
the bound for the same frames. The bound is var >= 1 / sum((d mu / d phi)^2 / var_px) over the band (known carrier
and envelope; for uniform fringes it is Kay's 2 sigma^2 / (N A^2)), from the noise-free frames and the sensor's
photon-transfer variance; it counts camera noise only, not vibration.
"the noise part" scores each estimate minus the same estimator on the noise-free frame (rendered with the frame's
own tilt), plus the fringe phase of that tilt, through the same curve: camera noise and what drift removal makes of
it, without the bench's own systematic error (the grating's zero order diffracted past the split's edge beats with
the first order at the carrier, a phase error that depends on the gray); "vs truth" keeps it. "std/scatter" is the
mean reported per-frame uncertainty over the per-frame rms camera noise (1 when honest); "drift deg" the degree of
the drift polynomial the curve chose (-1: none fitted).
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

from analysis.band import Band, find_band, local_fringes
from analysis.config import load_config, replace
from analysis.curve import phase_curve
from analysis.carrier import find_carrier
from analysis.fringe import cosine_fit, estimate, lsq_model
from analysis.patterns import layout_of, split_screen
from configs import DEFAULT_SIM

LEVELS = tuple(range(0, 256, 4))
FRAMES = 2
REFERENCE_EVERY = 16
GRATING_HIGH = 80  # close to a pi step on the demo panel: the best-contrast grating pair
ESTIMATORS = ("weighted-lsq", "carrier-lsq", "fourier", "cosine-fit")
CURVE_SIGN = -1  # on this bench the fringe phase falls as the gray rises


def sweep(cfg):
    """Frames of a simulated sweep in acquisition order: (gray, time_s, image, noise-free image, tilt phase rad).

    References come as rig/run/steps.sweep_units schedules them: first, after every REFERENCE_EVERY levels and last.
    The noise-free image is rendered with the frame's own panel tilt (drift and vibration), so image minus
    noise-free image is camera noise alone; the fringe phase that tilt causes is returned on its own (see
    tilt_phase), so that the noise part can put it back without the bench's systematic error riding on it.
    """
    from simulators.bench import Bench
    from simulators.devices import SimCamera, SimScreen

    bench = Bench(cfg)
    screen, cam = SimScreen(bench), SimCamera(bench)
    m, p = cfg.modulator, cfg.pattern

    def show(gray):
        screen.show(split_screen(m.width_px, m.height_px, gray, p.grating_low, p.grating_high, layout_of(p),
                                 m.bit_depth))
        bench.clock.sleep(cfg.sweep.settle_s)

    # The simulator merges a mirror half that has settled at the grating's low gray into the low stripes and gives
    # the merged region one tilt piston at its joint centroid, so a reference shown straight after a blank panel
    # would see a third of the drift. A real sweep follows tuning, which leaves the mirror half at another gray.
    show(GRATING_HIGH)
    units = [0]
    for i, g in enumerate(LEVELS):
        units.append(g)
        if (i + 1) % REFERENCE_EVERY == 0 or i + 1 == len(LEVELS):
            units.append(0)
    out, three = [], None
    for gray in units:
        show(gray)
        for _ in range(FRAMES):
            frame = cam.grab()
            tilt = bench.tilt_at(frame.timestamp_s, frame.sequence)
            e = bench.electrons(bench.irradiance(frame.timestamp_s, frame.exposure_s, tilt), frame.exposure_s)
            clean = bench.sensor.expose(e.reshape(frame.image.shape), frame.gain_db, noiseless=True)
            state = bench.state_at(frame.timestamp_s)
            if three is None and len({r.gray for r in state.regions}) == 3:
                three = state
            out.append([gray, frame.timestamp_s, frame.image, clean, tilt])
    for f in out:
        f[4] = tilt_phase(bench, three, f[4])
    return bench, three, [tuple(f) for f in out]


def tilt_phase(bench, state, tilt_urad) -> float:
    """Fringe phase (rad, in the estimators' sign) that a panel tilt adds: the mirror region's piston less the
    mean of the two grating stripes' (the first order's phase is their mean), from a state of three grays."""
    t = bench.clock.now()
    exposure = bench.cfg.camera.exposure_s
    moved = np.subtract(bench.region_phases(state, t, exposure, tilt_urad), bench.region_phases(state, t, exposure))
    p = bench.cfg.pattern
    grating = [d for r, d in zip(state.regions, moved) if r.gray in (p.grating_low, p.grating_high)]
    mirror = [d for r, d in zip(state.regions, moved) if r.gray not in (p.grating_low, p.grating_high)]
    # The estimators read the mirror's phase against the first order's with a plus sign on this bench (the curve's
    # sign is -1 because the crystal's retardance falls as the gray rises).
    return float(mirror[0] - np.mean(grating))


def frame_bound(clean, band, carrier, noise) -> float:
    """Cramér–Rao variance (rad^2) of one frame's phase from its noise-free counts (see the module docstring)."""
    m = int(2 * carrier.period_px)  # filter the band with a margin, so its edges see real neighbours
    y0, x0 = max(band.y0 - m, 0), max(band.x0 - m, 0)
    img = clean[y0:band.y1 + m, x0:band.x1 + m].astype(np.float64)
    inner = (slice(band.y0 - y0, band.y1 - y0), slice(band.x0 - x0, band.x1 - x0))
    z = local_fringes(img, carrier).fringe[inner]
    k = noise.e_per_adu
    var = np.maximum(img[inner] - noise.dark_offset_adu, 0) / k + (noise.read_noise_e / k) ** 2 + 1 / 12
    return 1.0 / float(np.sum((2 * z.imag) ** 2 / var))


def offset_free_rms(err: np.ndarray) -> float:
    return float(np.sqrt(np.mean((err - err.mean()) ** 2)))


def score(cfg, label):
    """Table rows (one per estimator) for a sweep of ``cfg``, the bench and its three-gray state, the frames."""
    t0 = time.perf_counter()
    bench, state, frames = sweep(cfg)
    dark = cfg.simulator.noise.dark_offset_adu
    samples = [f[2] for f in frames[:: max(len(frames) // 8, 1)]]
    survey = find_band(samples, dark)
    band, carrier = survey.band, survey.carrier
    model = lsq_model(band, carrier)
    grays = np.array([f[0] for f in frames])
    times = np.array([f[1] for f in frames])
    tilts = np.array([f[4] for f in frames])
    bounds = np.array([frame_bound(f[3], band, carrier, cfg.simulator.noise) for f in frames])
    _, truth = bench.true_curve()
    full = 2**cfg.camera.bit_depth - 1
    line = (band.y0 + band.y1) // 2
    runs = {name: (lambda img, n=name: estimate(img, band, carrier, n, dark, full, model)) for name in ESTIMATORS}
    runs["single-line cosine"] = lambda img: cosine_fit(img, band, carrier, dark, line=line)
    per_level = [math.sqrt(np.mean(bounds[grays == g]) / np.count_nonzero(grays == g)) for g in np.unique(grays)]
    level_bound = math.sqrt(np.mean(np.square(per_level)))
    rows = []
    for name, run in runs.items():
        noisy = [run(f[2]) for f in frames]
        clean = np.array([run(f[3]).phase_rad for f in frames])
        phase = np.array([e.phase_rad for e in noisy])
        std = np.array([e.std_rad for e in noisy])
        curve = phase_curve(grays, phase, std, times, sign=CURVE_SIGN)
        camera_noise = np.angle(np.exp(1j * (phase - clean)))
        flat = phase_curve(grays, camera_noise + tilts, std, times, sign=CURVE_SIGN)
        honesty = float(np.mean(std) / np.sqrt(np.mean(camera_noise**2)))
        degree = len(flat.drift.coefficients) - 1 if flat.drift else -1
        rows.append((label, name, offset_free_rms(curve.phase_rad - truth[curve.gray]),
                     offset_free_rms(flat.phase_rad), level_bound, honesty, degree))
    print(f"  [{label}: {len(frames)} frames, band {band.width}x{band.height} px, contrast {survey.contrast:.2f}, "
          f"per-frame bound {1e3 * math.sqrt(np.mean(bounds)):.3f} mrad, {time.perf_counter() - t0:.0f} s]",
          flush=True)
    return rows, bench, state, frames


def drift_rate(bench, state, duration_s: float, phase_rad: float = 1.0) -> float:
    """Panel tilt drift (urad/s) that shifts the fringe phase by ``phase_rad`` over ``duration_s``."""
    return phase_rad / (abs(tilt_phase(bench, state, (1.0, 1.0))) * duration_s)


UNMADE_DRAWS = 34  # noisy frames a level (six levels a kind): the scatter's variance to 10 %
UNMADE_METHODS = ("weighted-lsq", "carrier-lsq", "fourier")


def unmade_table() -> None:
    """Frames the project did not make: tests/framegen.py's kinds, each estimator's rms error over the Cramér–Rao
    bound (one offset removed), its noise part alone, and stated std over scatter (see framegen.trial)."""
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
    import framegen as fg

    print(f"\nframes the project did not make (tests/framegen.py; 6 levels x {UNMADE_DRAWS} noisy frames a kind, "
          "large frames 3 x 24; bound from the exact per-pixel model, background and amplitude as nuisance)")
    print(f"{'kind':<26}{'estimator':<14}{'bound mrad':>11}{'error/bound':>12}{'noise/bound':>12}{'std/scatter':>12}"
          f"{'spread mrad':>12}")
    for name, kind in fg.kinds().items():
        draws = UNMADE_DRAWS
        if kind.shape[0] > 1000:
            kind, draws = fg.replace(kind, levels=kind.levels[:3]), 24
        for method in UNMADE_METHODS:
            def make(crop, method=method, kind=kind):
                band = Band(0, crop.shape[1], 0, crop.shape[0])
                carrier = find_carrier(crop, max_period_px=max(crop.shape) / 2)
                model = lsq_model(band, carrier)
                return lambda c: estimate(c, band, carrier, method, kind.sensor.offset_adu, kind.sensor.full_scale,
                                          model)
            r = fg.trial(kind, make, draws, np.random.default_rng(7))
            print(f"{name:<26}{method:<14}{1e3 * r.bound_rad:>11.3f}{r.ratio:>12.2f}{r.noise_ratio:>12.2f}"
                  f"{r.honesty:>12.2f}{1e3 * r.spread_rad:>12.3f}", flush=True)
    print("  ghost: a 6 % coherent cover-glass ghost; its error/bound is the cyclic error, corrected from all levels "
          "elsewhere (analysis/cyclic.py), not by the estimator.")


THROUGHPUT = """
import sys, time, numpy as np
sys.path.insert(0, sys.argv[2])
import framegen as fg
from analysis.band import Band
from analysis.carrier import find_carrier
from analysis.fringe import estimate, lsq_model
kind = fg.kinds()["1200x1920"]
x0, x1, y0, y1 = kind.band
electrons = fg.light_e(kind, kind.levels[0])
rng = np.random.default_rng(0)
frames = [fg.draw(kind, electrons, rng) for _ in range(8)]
band = Band(x0, x1, y0, y1)
carrier = find_carrier(frames[0][band.slices], max_period_px=max(band.width, band.height) / 2)
model = lsq_model(band, carrier)
n, t0 = 0, time.process_time()
while time.process_time() - t0 < 3.0:
    estimate(frames[n % 8], band, carrier, sys.argv[1], kind.sensor.offset_adu, kind.sensor.full_scale, model)
    n += 1
print(n / (time.process_time() - t0))
"""


def throughput(method: str) -> float:
    """Frames per CPU second of one estimator on framegen's 1200x1920 uint16 frames (640x1000 px band), one thread.

    CPU time, not wall time: on a machine shared with other work the wall clock counts their time too.
    """
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    tests = str(Path(__file__).resolve().parent.parent / "tests")
    done = subprocess.run([sys.executable, "-c", THROUGHPUT, method, tests], env=env, capture_output=True, text=True,
                          check=True)
    return float(done.stdout.strip())


NOTES = """\
notes: the bound counts camera noise alone. Unweighted least squares under shot noise stays above it by
  sqrt(2 (1 - sqrt(1 - V^2)) / V^2) = 1.2x at visibility V = 0.92 (bound 1 / (N_ph (1 - sqrt(1 - V^2)))); less at
  low light, where read noise, which does not follow the fringes, takes a larger share.
  0.02 urad of panel vibration moves the fringes by ~0.7 mrad rms a frame, 20x the camera bound: there no
  estimator reaches the bound; vibration / sqrt(frames a level) is the floor.
  Drift: every reference visit's noise enters the drift model. With visits of 2 frames first, every 16 levels and
  last, a straight line (what the visits show here: the simulator's drift is linear in time) adds ~7 % to the
  level noise, a piecewise-linear interpolation through the visits ~20 %, and a cubic through four visits that is
  extrapolated past the last one 2.3x (Monte Carlo of the schedule). More frames a visit shrink all three.
  weighted-lsq's "noise part" is not pure camera noise: on the noise-free frame its fitted photon-transfer line
  is flat, so the weights differ from the noisy frame's and the beams' fine structure enters the difference."""


def run() -> None:
    base = replace(load_config(DEFAULT_SIM), **{"pattern.grating_high": GRATING_HIGH,
                                                "simulator.timing.vibration_urad": 0.0})
    print(f"subset of gray levels: every 4th ({len(LEVELS)} levels), {FRAMES} frames each, gray 0 first, after every "
          f"{REFERENCE_EVERY} levels and last; grating pair {base.pattern.grating_low}/{GRATING_HIGH}")
    cases = [("light x1", base),
             ("light x0.3", replace(base, **{"laser.power_mw": base.laser.power_mw * 0.3})),
             ("light x0.1", replace(base, **{"laser.power_mw": base.laser.power_mw * 0.1})),
             ("clipping (light x1.5)", replace(base, **{"laser.power_mw": base.laser.power_mw * 1.5})),
             ("vibration 0.02 urad", replace(base, **{"simulator.timing.vibration_urad": 0.02}))]
    table = []
    nominal = None
    for label, cfg in cases:
        rows, bench, state, frames = score(cfg, label)
        table += rows
        if nominal is None:
            nominal = (bench, state, frames[-1][1] - frames[0][1])
    rate = drift_rate(*nominal)
    rows, _, _, _ = score(replace(base, **{"simulator.timing.drift_urad_per_s": rate}), "drift 1 rad")
    table += rows

    print(f"{'case':<21}{'estimator':<20}{'vs truth mrad':>14}{'noise part mrad':>16}{'bound mrad':>11}"
          f"{'truth/bound':>12}{'noise/bound':>12}{'line/this':>10}{'std/scatter':>12}{'drift deg':>10}")
    line_of = {r[0]: r for r in table if r[1] == "single-line cosine"}
    for case, name, vs_truth, vs_clean, bound, honesty, degree in table:
        line = line_of[case][3] / vs_clean if name != "single-line cosine" else float("nan")
        print(f"{case:<21}{name:<20}{vs_truth * 1e3:>14.2f}{vs_clean * 1e3:>16.3f}{bound * 1e3:>11.3f}"
              f"{vs_truth / bound:>12.2f}{vs_clean / bound:>12.2f}{line:>10.1f}{honesty:>12.2f}{degree:>10d}")
    unmade_table()
    speeds = {name: throughput(name) for name in ("weighted-lsq", "carrier-lsq", "fourier")}
    print("throughput, 1920x1200 uint16 frames (framegen), 640x1000 px band, one core (frames per CPU second): "
          + ", ".join(f"{name} {fps:.0f} frames/s" for name, fps in speeds.items()))
    print(NOTES)
