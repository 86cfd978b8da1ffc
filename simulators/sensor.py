"""Camera sensor: irradiance to counts with shot noise, read noise, full well, black level and ADC clipping.

The model is the linear one of the EMVA 1288 standard: mean electrons = QE * photons, counts = electrons / K + offset,
so that the temporal variance (ADU^2) is mean_above_offset / K + (read_noise_e / K)^2, K in e-/ADU.

Spatial non-uniformity, also after EMVA 1288, fixed per camera (drawn once from the bench seed, the same in every
frame): each pixel's photo-electrons are multiplied by a gain 1 + PRNU z_1, a dark offset DSNU z_2 (e-) is added, and
dark current (e-/s, times the exposure) adds charge with its own shot noise; a few hot pixels have a much larger dark
current. z_1, z_2 are standard normal maps. Per pixel the photon transfer stays linear:
var(ADU) = (mean_ADU - offset_ADU - DSNU_ADU) / K + (read_noise_e / K)^2.

Noise draws: where a pixel expects at least ``EXACT_BELOW_E`` electrons, shot and read noise are drawn together as
one normal variate of variance mean + read^2 (the normal approximation to Poisson, whose skewness 1/sqrt(mean) is
below 0.16 there); below it the shot noise is an exact Poisson draw. Each frame's draws come from generators seeded by (bench seed,
frame key), so a frame is reproducible on its own (a resumed simulated run sees the noise an uninterrupted one saw);
normal variates are drawn in two threads.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np

EXACT_BELOW_E = 40.0


class Sensor:
    """Turns expected photo-electrons into a uint16 frame; ``noise`` is a config ``[simulator.noise]`` section."""

    def __init__(self, noise, bit_depth: int, seed: int):
        self.noise = noise
        self.bit_depth = bit_depth
        self.full_scale = 2**bit_depth - 1
        self.seed = seed
        self._maps: dict[tuple[int, ...], tuple[np.ndarray | None, np.ndarray | None, np.ndarray | None]] = {}
        self._pool = ThreadPoolExecutor(max_workers=2, thread_name_prefix="sensor-noise")

    def e_per_adu(self, gain_db: float) -> float:
        """Conversion gain K (e-/ADU) at analogue gain ``gain_db``."""
        return self.noise.e_per_adu / 10 ** (gain_db / 20)

    def _standard_normal(self, n: int, gens) -> np.ndarray:
        out = np.empty(n, np.float32)
        half = n // 2
        parts = ((gens[0], out[:half]), (gens[1], out[half:]))
        list(self._pool.map(lambda p: p[0].standard_normal(dtype=np.float32, out=p[1]), parts))
        return out

    def fixed_pattern(self, shape: tuple[int, ...]) -> tuple[np.ndarray | None, np.ndarray | None,
                                                              np.ndarray | None]:
        """Per-pixel gain (relative), dark offset (e-) and dark current (e-/s) of a sensor of ``shape``, flattened;
        None where that non-uniformity is off. Drawn once from the bench seed."""
        if shape not in self._maps:
            n = self.noise
            size = int(np.prod(shape))
            rng = np.random.default_rng([self.seed, 3])
            gain = (1.0 + n.prnu * rng.standard_normal(size)).astype(np.float32) if n.prnu else None
            offset = (n.dsnu_e * rng.standard_normal(size)).astype(np.float32) if n.dsnu_e else None
            dark = None
            if n.dark_current_e_per_s or n.hot_pixels:
                dark = np.full(size, n.dark_current_e_per_s, np.float32)
                dark[rng.choice(size, size=min(n.hot_pixels, size), replace=False)] = n.hot_pixel_e_per_s
            self._maps[shape] = (gain, offset, dark)
        return self._maps[shape]

    def expose(self, electrons_mean: np.ndarray, gain_db: float, key: int = 0, noiseless: bool = False,
               exposure_s: float = 0.0) -> np.ndarray:
        """Counts (uint16, same shape) for expected photo-electrons per pixel during ``exposure_s`` (s).

        Frames with the same ``key`` get the same noise; ``noiseless`` gives the rounded mean.
        """
        n = self.noise
        shape = electrons_mean.shape
        gain, offset, dark = self.fixed_pattern(shape)
        mean = electrons_mean.astype(np.float32, copy=True).ravel()
        if gain is not None:
            mean *= gain
        if dark is not None and exposure_s > 0:
            mean += dark * np.float32(exposure_s)
        np.minimum(mean, 4 * n.full_well_e, out=mean)
        if noiseless:
            electrons = mean.copy()
        else:
            gens = [np.random.Generator(np.random.SFC64(s))
                    for s in np.random.SeedSequence([self.seed, key]).spawn(3)]
            z = self._standard_normal(mean.size, gens)
            electrons = mean + np.float32(n.read_noise_e**2)
            np.sqrt(electrons, out=electrons)
            electrons *= z
            electrons += mean
            low = np.flatnonzero(mean < EXACT_BELOW_E)
            if low.size:
                shot = gens[2].poisson(mean[low]).astype(np.float32)
                electrons[low] = shot + np.float32(n.read_noise_e) * z[low]
        if offset is not None:
            electrons += offset
        # counts = round(min(e, full well) / K + offset), clipped to the ADC's range: the full well is a clip in
        # counts too, so one clip does both; adding 0.5 and truncating rounds (half up)
        adu = electrons
        per_e = 1.0 / self.e_per_adu(gain_db)
        adu *= np.float32(per_e)
        adu += np.float32(n.dark_offset_adu + 0.5)
        top = min(self.full_scale + 0.49, n.full_well_e * per_e + n.dark_offset_adu + 0.5)
        np.clip(adu, 0, np.float32(top), out=adu)
        return adu.astype(np.uint16).reshape(shape)
