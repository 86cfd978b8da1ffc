"""Per-frame analysis during a run: exposure figures always, fringe phase and contrast once the band is known."""

from __future__ import annotations

import numpy as np

from analysis.band import Band, find_band
from analysis.carrier import Carrier, NoFringesError
from analysis.fringe import DEFAULT_METHOD, estimate, exposure, lsq_model
from rig.run.steps import FrameResult

PROFILE_POINTS = 64  # samples of the fringe profile sent to the dashboard


class FrameAnalyzer:
    """Turns frames into FrameResults; ``locate`` fixes the fringe band and carrier for the rest of the run."""

    def __init__(self, full_scale: int, dark_adu: float, method: str = DEFAULT_METHOD):
        self.full_scale = full_scale
        self.dark_adu = dark_adu
        self.method = method
        self.band: Band | None = None
        self.carrier: Carrier | None = None
        self._model = None

    def locate(self, images: list[np.ndarray], band: Band | None = None):
        """Find (or take) the band from frames at several mirror grays; return the band survey."""
        survey = find_band(list(images), self.dark_adu)
        self.use(band or survey.band, survey.carrier)
        return survey

    def use(self, band: Band, carrier: Carrier) -> None:
        """Measure inside ``band`` at ``carrier`` from now on."""
        self.band, self.carrier = band, carrier
        self._model = lsq_model(band, carrier) if self.method == "carrier-lsq" else None

    def __call__(self, image: np.ndarray, gray: int, purpose: str, t_s: float, sequence: int) -> FrameResult:
        if self.band is None:
            peak = float(np.percentile(image, 99.9))
            return FrameResult(gray, purpose, t_s, sequence, (peak - self.dark_adu) / (self.full_scale - self.dark_adu),
                               int(np.count_nonzero(image >= self.full_scale)))
        expo = exposure(image, self.band, self.full_scale, self.dark_adu)
        try:
            est = estimate(image, self.band, self.carrier, self.method, self.dark_adu, clip_adu=self.full_scale,
                           model=self._model)
        except NoFringesError:
            return FrameResult(gray, purpose, t_s, sequence, expo.peak_fraction, expo.saturated_px, contrast=0.0)
        return FrameResult(gray, purpose, t_s, sequence, expo.peak_fraction, expo.saturated_px, est.phase_rad,
                           est.std_rad, est.contrast, est.amplitude_adu,
                           None if not np.isfinite(est.background_adu) else est.background_adu)

    def profile(self, image: np.ndarray) -> list[float]:
        """The band averaged along the fringes, resampled to PROFILE_POINTS values (for the dashboard)."""
        if self.band is None:
            return []
        crop = np.asarray(image, np.float32)[self.band.slices]
        axis = 0 if abs(self.carrier.angle_deg) < 45 else 1
        line = crop.mean(axis=axis)
        n = min(line.size, PROFILE_POINTS)
        return [float(v) for v in line[:n]]
