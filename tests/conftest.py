"""Shared fixtures: configs for the demo bench and for a small, fast bench with the same physics."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")

import numpy as np
import pytest

from analysis.config import load_config, replace, to_toml
from analysis.patterns import layout_of, split_screen
from configs import DEFAULT_SIM, HERE

SMALL_CONFIG = HERE / "small-bench.toml"


# Helper modules of tests that drive a shared device: the X display's panel monitor, Aravis's simulated cameras.
SHARED_DEVICES = ("xdisplay", "genicam_cams")


@pytest.hookimpl(tryfirst=True)  # before xdist's own hook, which reads the mark into the test's id
def pytest_collection_modifyitems(items):
    """Under pytest-xdist (pyproject's addopts), the test files that use a shared device run one after another on one
    worker: two windows on the panel monitor would hide each other, two simulated GigE cameras would claim one port."""
    shares = {}
    for item in items:
        if item.path not in shares:
            text = item.path.read_text()
            shares[item.path] = any(name in text for name in SHARED_DEVICES)
        if shares[item.path]:
            item.add_marker(pytest.mark.xdist_group("shared-devices"))


@pytest.fixture(scope="session")
def demo_cfg():
    """The shipped default simulator config (1064 nm tweezers bench)."""
    return load_config(DEFAULT_SIM)


@pytest.fixture(scope="session")
def small_cfg():
    """configs/small-bench.toml: a 400x300 panel seen by a 256x200 camera at 40 mm, same physics, fast frames."""
    return load_config(SMALL_CONFIG)


def small_config_file(folder, name="bench.toml", **changes):
    """Write the small bench with dotted-key ``changes`` (e.g. **{"sweep.levels": [0, 80]}) as a TOML file."""
    path = folder / name
    path.write_text(to_toml(replace(load_config(SMALL_CONFIG), **changes)))
    return path


def split_for(cfg, mirror_gray, low=None, high=None):
    """The config's split-screen pattern at ``mirror_gray`` (grating pair from the config unless given)."""
    p, m = cfg.pattern, cfg.modulator
    return split_screen(m.width_px, m.height_px, mirror_gray, p.grating_low if low is None else low,
                        p.grating_high if high is None else high, layout_of(p), m.bit_depth)


def band_phasor(image, cfg, cols):
    """Complex fringe amplitude at the grating's carrier over camera columns ``cols`` (Hann-windowed lock-in).

    The carrier on the sensor is the grating period on the panel (common practice: two beams at angle theta make
    fringes of period lambda / sin(theta), which equals the grating period for its first order).
    """
    period_cam_px = cfg.pattern.grating_period_px * cfg.modulator.pitch_um / cfg.camera.pitch_um
    x = np.arange(cols.start, cols.stop)
    window = np.hanning(x.size)
    profile = np.asarray(image, float)[:, cols].mean(axis=0)
    return np.sum(window * profile * np.exp(-2j * np.pi * x / period_cam_px))


@pytest.fixture(scope="session")
def fake_gige():
    """Aravis's simulated GigE Vision camera on loopback (tests/genicam_cams.py); killed at the end of the session."""
    from genicam_cams import FakeGigE
    server = FakeGigE()
    yield server
    server.kill()
