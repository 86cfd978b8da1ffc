"""Fringe analysis: phase error of each estimator against the simulator's truth and the Cramér–Rao bound.

Simulated sweeps of the 1064 nm demo bench (every 4th gray, 2 frames a level, gray 0 revisited every 16 levels) at
three light levels, with vibration jitter, and with 1 rad of drift. Each curve is scored offset-free: the rms over
gray levels of its error after removing the mean error, divided by the bound for the same frames. The bound is
var >= 1 / sum((d mu / d phi)^2 / var_px) over the band (known carrier and envelope; for uniform fringes it is
Kay's 2 sigma^2 / (N A^2)), from the noise-free frames and the sensor's photon-transfer variance.
"the noise part" scores each estimate against the same estimator on the noise-free frame, which removes the
bench's own systematic error (the grating's zero order diffracted past the split's edge beats with the first
order at the carrier, a phase error that depends on the gray); "vs truth" keeps it.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import time

import numpy as np

from analysis.band import find_band, local_fringes
from analysis.config import load_config, replace
from analysis.curve import phase_curve
from analysis.fringe import cosine_fit, estimate, lsq_model
from analysis.patterns import layout_of, split_screen
from configs import DEFAULT_SIM

LEVELS = tuple(range(0, 256, 4))
FRAMES = 2
REFERENCE_EVERY = 16
GRATING_HIGH = 80  # close to a pi step on the demo panel: the best-contrast grating pair
ESTIMATORS = ("carrier-lsq", "fourier", "cosine-fit")


def sweep(cfg):
    """Frames of a simulated sweep: (gray, time_s, image, noise-free image) in acquisition order."""
    from simulators.bench import Bench
    from simulators.devices import SimCamera, SimScreen

    bench = Bench(cfg)
    screen, cam = SimScreen(bench), SimCamera(bench)
    m, p = cfg.modulator, cfg.pattern
    out = []
    for i, g in enumerate(LEVELS):
        for gray in ([0] if i % REFERENCE_EVERY == 0 and i else []) + [g]:
            screen.show(split_screen(m.width_px, m.height_px, gray, p.grating_low, p.grating_high, layout_of(p),
                                     m.bit_depth))
            bench.clock.sleep(cfg.sweep.settle_s)
            for _ in range(FRAMES):
                frame = cam.grab()
                e = bench.electrons(bench.irradiance(frame.timestamp_s, frame.exposure_s), frame.exposure_s)
                clean = bench.sensor.expose(e.reshape(frame.image.shape), frame.gain_db, noiseless=True)
                out.append((gray, frame.timestamp_s, frame.image, clean))
    return bench, out


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
    """One table row per estimator for a sweep of ``cfg``."""
    t0 = time.perf_counter()
    bench, frames = sweep(cfg)
    dark = cfg.simulator.noise.dark_offset_adu
    samples = [f[2] for f in frames[:: max(len(frames) // 8, 1)]]
    survey = find_band(samples, dark)
    band, carrier = survey.band, survey.carrier
    model = lsq_model(band, carrier)
    grays = np.array([f[0] for f in frames])
    times = np.array([f[1] for f in frames])
    bounds = np.array([frame_bound(f[3], band, carrier, cfg.simulator.noise) for f in frames])
    _, truth = bench.true_curve()
    full = 2**cfg.camera.bit_depth - 1
    line = (band.y0 + band.y1) // 2
    runs = {name: (lambda img, n=name: estimate(img, band, carrier, n, dark, full, model)) for name in ESTIMATORS}
    runs["single-line cosine"] = lambda img: cosine_fit(img, band, carrier, dark, line=line)
    rows = []
    level_bound = None
    for name, run in runs.items():
        noisy = [run(f[2]) for f in frames]
        clean = [run(f[3]) for f in frames]
        phase = np.array([e.phase_rad for e in noisy])
        std = np.array([e.std_rad for e in noisy])
        curve = phase_curve(grays, phase, std, times, sign=-1)
        noise_only = np.angle(np.exp(1j * (phase - np.array([e.phase_rad for e in clean]))))
        flat = phase_curve(grays, noise_only, std, times, sign=-1)
        if level_bound is None:
            per_level = [math.sqrt(np.mean(bounds[grays == g]) / np.count_nonzero(grays == g)) for g in curve.gray]
            level_bound = math.sqrt(np.mean(np.square(per_level)))
        vs_truth = offset_free_rms(curve.phase_rad - truth[curve.gray])
        vs_clean = offset_free_rms(flat.phase_rad)
        rows.append((label, name, vs_truth, vs_clean, level_bound))
    print(f"  [{label}: {len(frames)} frames, band {band.width}x{band.height} px, contrast {survey.contrast:.2f}, "
          f"{time.perf_counter() - t0:.0f} s]", flush=True)
    return rows, bench, frames


def drift_rate(bench, duration_s: float, phase_rad: float = 1.0) -> float:
    """Panel tilt drift (urad/s) that shifts the fringe phase by ``phase_rad`` over ``duration_s``."""
    state = bench.state_at(bench.clock.now())
    exposure = bench.cfg.camera.exposure_s
    t = bench.clock.now()
    moved = np.subtract(bench.region_phases(state, t, exposure, (1.0, 1.0)), bench.region_phases(state, t, exposure))
    by_gray = {r.gray: d for r, d in zip(state.regions, moved)}
    p = bench.cfg.pattern
    per_urad = by_gray[max(LEVELS)] - 0.5 * (by_gray[p.grating_low] + by_gray[p.grating_high])
    return phase_rad / (abs(per_urad) * duration_s)


THROUGHPUT = """
import time, numpy as np
from analysis.band import Band
from analysis.carrier import Carrier
from analysis.fringe import carrier_lsq, lsq_model
rng = np.random.default_rng(0)
frames = [rng.integers(40, 4000, (1200, 1920)).astype(np.uint16) for _ in range(8)]
band = Band(600, 1250, 0, 1200)
model = lsq_model(band, Carrier(1 / 10.6, 0.0))
n, t0 = 0, time.perf_counter()
while time.perf_counter() - t0 < 3.0:
    carrier_lsq(frames[n % 8], model, 40.0, 4095)
    n += 1
print(n / (time.perf_counter() - t0))
"""


def throughput() -> float:
    """Frames/s of the per-frame path (carrier-lsq, 650x1200 px band of 1920x1200 uint16 frames) on one core."""
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    done = subprocess.run([sys.executable, "-c", THROUGHPUT], env=env, capture_output=True, text=True, check=True)
    return float(done.stdout.strip())


def run() -> None:
    base = replace(load_config(DEFAULT_SIM), **{"pattern.grating_high": GRATING_HIGH,
                                                "simulator.timing.vibration_urad": 0.0})
    print(f"subset of gray levels: every 4th ({len(LEVELS)} levels), {FRAMES} frames each, gray 0 again every "
          f"{REFERENCE_EVERY} levels; grating pair {base.pattern.grating_low}/{GRATING_HIGH}")
    cases = [("light x1", base),
             ("light x0.3", replace(base, **{"laser.power_mw": base.laser.power_mw * 0.3})),
             ("light x0.1", replace(base, **{"laser.power_mw": base.laser.power_mw * 0.1})),
             ("vibration 0.02 urad", replace(base, **{"simulator.timing.vibration_urad": 0.02}))]
    table = []
    nominal = None
    for label, cfg in cases:
        rows, bench, frames = score(cfg, label)
        table += rows
        if nominal is None:
            nominal = (bench, frames[-1][1] - frames[0][1])
    rate = drift_rate(*nominal)
    rows, _, _ = score(replace(base, **{"simulator.timing.drift_urad_per_s": rate}), "drift 1 rad")
    table += rows

    print(f"{'case':<21}{'estimator':<20}{'vs truth mrad':>14}{'noise part mrad':>16}{'bound mrad':>11}"
          f"{'truth/bound':>12}{'noise/bound':>12}{'line/this':>10}")
    line_of = {r[0]: r for r in table if r[1] == "single-line cosine"}
    for case, name, vs_truth, vs_clean, bound in table:
        line = line_of[case][3] / vs_clean if name != "single-line cosine" else float("nan")
        print(f"{case:<21}{name:<20}{vs_truth * 1e3:>14.2f}{vs_clean * 1e3:>16.2f}{bound * 1e3:>11.2f}"
              f"{vs_truth / bound:>12.2f}{vs_clean / bound:>12.2f}{line:>10.1f}")
    print(f"throughput, carrier-lsq per frame, 1920x1200 uint16, 650x1200 px band, one core: {throughput():.0f} frames/s")
