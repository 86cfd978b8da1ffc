"""The simulated panel's 2-D phase with a cell-gap variation, unwrapped by a reference library."""

import numpy as np
import pytest
from skimage.restoration import unwrap_phase

from analysis.config import replace
from simulators.bench import Bench


def test_unwrapped_panel_phase_is_the_cell_gap_map_times_the_curve(small_cfg):
    """The retardance scales with the local cell gap, so the field the panel reflects at gray g carries
    phi(g) t(x, y) (D. Engstrom et al., Opt. Express 21, 16086 (2013): a smooth non-uniformity of the phase
    response). The wrapped phase of the bench's panel field, unwrapped by scikit-image's reliability-sorting
    unwrapper (M. A. Herraez et al., Appl. Opt. 41, 7437 (2002)), must be that smooth map, and its mean over the
    strip the band sees must be the sampled truth."""
    cfg = replace(small_cfg, **{"simulator.response.thickness_variation": 0.1, "simulator.timing.vibration_urad": 0.0})
    bench = Bench(cfg)
    m = cfg.modulator
    maps = {}
    for gray in (255, 0):
        bench.show(np.full((m.height_px, m.width_px), gray, np.uint16))
        bench.clock.sleep(0.5)
        field = bench.panel_field(bench.clock.now())
        lit = np.abs(field) > 0.05 * np.abs(field).max()
        maps[gray] = unwrap_phase(np.ma.masked_array(np.angle(field), ~lit))
    delay = (maps[0] - maps[255]).filled(np.nan)  # phi(0) - phi(255) > 0 at every pixel, 2 pi ambiguity aside
    delay += 2 * np.pi * np.round((np.nanmedian(-bench.true_curve()[1][255] - delay)) / (2 * np.pi))
    lit = np.isfinite(delay)
    curve_range = -float(bench.response.phase_rad(255))
    expected = curve_range * bench.thickness
    assert np.max(np.abs(delay[lit] - expected[lit])) < 1e-3
    assert np.ptp(delay[lit]) == pytest.approx(curve_range * np.ptp(bench.thickness[lit]), rel=1e-3)
    weight = bench.sampled_weight()
    sampled = np.sum(np.where(lit, delay, 0) * weight) / np.sum(weight * lit)
    assert sampled == pytest.approx(-bench.sampled_true_curve()[1][255], abs=2e-3)
