"""Simulator speed at the demo camera size (1024 x 1280 px): superposition shortcut vs full propagation, noisy frames."""

import time

import numpy as np

from analysis.config import load_config
from analysis.patterns import layout_of, split_screen
from configs import DEFAULT_SIM
from simulators.bench import Bench
from simulators.devices import SimCamera


def rate(func, seconds=2.0, min_calls=3):
    """Calls per second of ``func`` over about ``seconds``."""
    func()
    n, t0 = 0, time.perf_counter()
    while n < min_calls or time.perf_counter() - t0 < seconds:
        func()
        n += 1
    return n / (time.perf_counter() - t0)


def run():
    cfg = load_config(DEFAULT_SIM)
    bench = Bench(cfg)
    m, p = cfg.modulator, cfg.pattern
    patterns = [split_screen(m.width_px, m.height_px, g, p.grating_low, p.grating_high, layout_of(p), m.bit_depth)
                for g in range(0, 256, 5)]
    bench.show(patterns[0])
    bench.clock.sleep(0.1)
    exposure = cfg.camera.exposure_s
    times = iter(np.arange(1e6) * 1e-3 + 1.0)

    shortcut = rate(lambda: bench.irradiance(next(times), exposure, bench.tilt_at(0.0, 0)))
    full = rate(lambda: bench.irradiance_full(bench.clock.now(), exposure), seconds=4.0)
    shows = iter(patterns * 100)
    show = rate(lambda: bench.show(next(shows)))
    cam = SimCamera(bench)
    noisy = rate(lambda: cam.grab())

    print(f"camera {cfg.camera.height_px} x {cfg.camera.width_px} px, panel {m.height_px} x {m.width_px} px, "
          f"propagation grid {bench.propagator.shape[0]} x {bench.propagator.shape[1]}")
    print(f"{'path':<52}{'frames/s':>10}{'target':>10}")
    print(f"{'noise-free optics, superposition shortcut':<52}{shortcut:>10.0f}{'>= 200':>10}")
    print(f"{'noise-free optics, full propagation per frame':<52}{full:>10.1f}")
    print(f"{'  ratio shortcut / full':<52}{shortcut / full:>10.0f}{'>= 20':>10}")
    print(f"{'new pattern on the panel (show: regions, cached)':<52}{show:>10.0f}")
    print(f"{'whole noisy frame (optics + sensor, SimCamera.grab)':<52}{noisy:>10.0f}{'>= 50':>10}")
    print("noise: one normal draw per pixel (shot + read) where a pixel expects >= 40 e-, exact Poisson below;"
          " normal draws in two threads")
