"""Seeded variants of the small bench with every non-ideality of a real bench at once, for tests and benchmarks.

Each variant draws its strengths from its own seed within the ranges below (each marked with where it comes from);
the cover-glass ghost of 0.5 % intensity reflectance at the inner interface and 5 K of panel warming during the
sweep are in every variant, as issue 12 asks. tests/test_truth.py runs a few of them end to end; the coverage
benchmark (benchmarks/bench_coverage.py) runs them all.
"""

from __future__ import annotations

import math

import numpy as np

from analysis.config import Config, load_config, replace
from configs import HERE
from rig.run.stages import AUTO_FRAMES, with_frames
from rig.run.steps import run_seconds

COUNT = 8                   # variants in the benchmark
WARMING_K = 5.0             # panel warming during the sweep (issue 12)
INNER_REFLECTANCE = 0.005   # cover glass/ITO/LC interface, intensity (issue 12: 0.1-1 %)
FRAMES_PER_LEVEL = "auto"   # as the demo benches: the scatter probe sets the frames that vibration and flicker need

# strength ranges (uniform draws)
CROSSTALK_PX = (0.5, 1.2)        # fringing-field smoothing sigma, about a pixel for 8 um LCOS (from memory)
POLARIZATION_DEG = (5.0, 15.0)   # half-wave plate set off the director by hand (from memory), either sign
FRONT_REFLECTANCE = (0.001, 0.003)  # AR-coated front surface (common practice: 0.1-0.5 %)
FRONT_WEDGE_URAD = 100.0         # front-surface wedge, each axis within +-this (from memory)
THICKNESS = (0.01, 0.05)         # peak relative cell-gap variation (from memory: a few %)
DROOP = (0.0, 0.04)              # relative loss of reflected power at full gray (from memory)
VIBRATION_URAD = (0.1, 0.5)      # rms panel tilt jitter frame to frame (optical table with fans, from memory)
FLICKER_RAD = (0.005, 0.02)      # drive ripple at the steepest gray (from memory)
# EMVA 1288 sensor non-uniformity, typical CMOS values (from memory)
PRNU, DSNU_E, DARK_E_PER_S, HOT_PIXELS = 0.005, 2.0, 20.0, 20


def small_bench() -> Config:
    return load_config(HERE / "small-bench.toml")


def expected_frames(cfg: Config) -> int:
    """The frames per level 'auto' should choose on this bench (within rig.run.stages.AUTO_FRAMES): a panel tilt
    alpha moves the fringes by 2 k alpha z sin(theta_1), the lever being the shear of the grating's first order
    over the distance z (simulators/bench.py); flicker and pixel noise are left out (they are smaller here)."""
    if cfg.sweep.frames_per_level != "auto":
        return cfg.sweep.frames_per_level
    k = 2 * math.pi / (cfg.laser.wavelength_nm * 1e-9)
    sin_first = cfg.laser.wavelength_nm * 1e-9 / (cfg.pattern.grating_period_px * cfg.modulator.pitch_um * 1e-6)
    jitter = 2 * k * cfg.simulator.timing.vibration_urad * 1e-6 * cfg.geometry.distance_mm * 1e-3 * sin_first
    fewest, most = AUTO_FRAMES
    return min(max(math.ceil((jitter / (cfg.sweep.target_std_mrad * 1e-3)) ** 2), fewest), most)


def warming_rate_k_per_min(cfg: Config, kelvin: float = WARMING_K) -> float:
    """The steady ramp (K/min) that warms the panel by about ``kelvin`` over the sweep (its duration at the frame
    rate, with the frames per level 'auto' is expected to choose)."""
    resolved = with_frames(cfg, expected_frames(cfg))
    sweep_s = run_seconds(resolved, cfg.simulator.timing.frame_rate_hz)
    return kelvin / (sweep_s / 60.0)


def variant(index: int, base: Config | None = None) -> tuple[str, Config]:
    """Variant ``index`` (0, 1, ...): its label and config; the same index always gives the same bench."""
    cfg = small_bench() if base is None else base
    rng = np.random.default_rng([12, index])
    u = lambda lo_hi: float(rng.uniform(*lo_hi))  # noqa: E731
    pol = u(POLARIZATION_DEG) * (1 if rng.random() < 0.5 else -1)
    changes = {
        "simulator.seed": 100 + index,
        "sweep.frames_per_level": FRAMES_PER_LEVEL,
        "sweep.order": "shuffled",  # as the demo benches: slow drifts do not follow the gray
        "simulator.response.crosstalk_px": u(CROSSTALK_PX),
        "simulator.response.polarization_deg": pol,
        "simulator.response.thickness_variation": u(THICKNESS),
        "simulator.response.reflectance_droop": u(DROOP),
        "simulator.cover_glass.inner_reflectance": INNER_REFLECTANCE,
        "simulator.cover_glass.front_reflectance": u(FRONT_REFLECTANCE),
        "simulator.cover_glass.front_wedge_urad": [float(v) for v in rng.uniform(-1, 1, 2) * FRONT_WEDGE_URAD],
        "simulator.cover_glass.inner_phase_rad": float(rng.uniform(0, 2 * math.pi)),
        "simulator.noise.prnu": PRNU, "simulator.noise.dsnu_e": DSNU_E,
        "simulator.noise.dark_current_e_per_s": DARK_E_PER_S, "simulator.noise.hot_pixels": HOT_PIXELS,
        "simulator.timing.vibration_urad": u(VIBRATION_URAD),
        "simulator.timing.flicker_rad": u(FLICKER_RAD),
        "simulator.timing.drift_urad_per_s": 0.01,
    }
    cfg = replace(cfg, **changes)
    cfg = replace(cfg, **{"simulator.timing.warming_k_per_min": warming_rate_k_per_min(cfg)})
    label = (f"v{index}: xt {changes['simulator.response.crosstalk_px']:.1f} px, pol {pol:+.0f} deg, "
             f"vib {changes['simulator.timing.vibration_urad']:.2f} urad")
    return label, cfg
