"""Fringe band: the rectangle where the two beams overlap with fringes of one uniform period.

The local fringe amplitude comes from Fourier filtering the carrier lobe (the analytic signal of Takeda, Ina and
Kobayashi, JOSA 72, 156, 1982); it is thresholded, the largest connected region kept and reduced to a rectangle.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from analysis.carrier import Carrier, NoFringesError, find_carrier
from analysis.patterns import Rect

MIN_CONTRAST = 0.05      # below this visibility no estimator gives a useful phase
AMPLITUDE_FRACTION = 0.3  # band pixels have at least this fraction of the peak local fringe amplitude
PERIOD_TOLERANCE = 0.1   # band pixels have a local frequency within this fraction of the carrier
HARMONIC_RATIO = 0.5     # where the twice-carrier beat is this strong the grating's +1/-1 orders overlap
FREQUENCY_WINDOW_PERIODS = 2  # the local frequency is averaged over this many fringe periods before the test


Band = Rect  # the fringe band is an image rectangle, the same kind of value as a panel rectangle


@dataclass(frozen=True)
class BandSurvey:
    """What the band finder (or a check of a given band) measured.

    ``fringe_count`` is how many fringes cross the band; ``period_spread`` the amplitude-weighted rms deviation of
    the local fringe frequency from the carrier, as a fraction of it (0 for perfectly uniform fringes);
    ``contrast`` the median fringe visibility inside the band.
    """

    band: Band
    carrier: Carrier
    fringe_count: float
    period_spread: float
    contrast: float


@dataclass(frozen=True)
class LocalFringes:
    """Fourier-filtered maps of one image: complex fringe signal at the carrier and at twice it, local mean."""

    fringe: np.ndarray    # complex, I ~ mean + 2 Re(fringe)
    harmonic: np.ndarray  # complex, the same at twice the carrier
    mean: np.ndarray      # local mean (ADU)


def local_fringes(image: np.ndarray, carrier: Carrier) -> LocalFringes:
    """Fourier-filter ``image`` around the carrier, twice the carrier and zero frequency.

    Gaussian lobes of standard deviation a third of the carrier frequency keep the lobes apart and blur the maps
    by about half a fringe period.
    """
    img = np.asarray(image, dtype=np.float64)
    h, w = img.shape
    spec = np.fft.fft2(img)
    fy = np.fft.fftfreq(h)[:, None]
    fx = np.fft.fftfreq(w)[None, :]
    s2 = 2 * (carrier.frequency / 3) ** 2

    def lobe(n):
        return np.exp(-((fx - n * carrier.fx) ** 2 + (fy - n * carrier.fy) ** 2) / s2)

    return LocalFringes(np.fft.ifft2(spec * lobe(1)), np.fft.ifft2(spec * lobe(2)), np.fft.ifft2(spec * lobe(0)).real)


def find_band(frames, dark_adu: float = 0.0, carrier: Carrier | None = None) -> BandSurvey:
    """Find the fringe band of split-screen frames and survey it.

    ``frames`` is one image or a sequence of images of the same scene at different mirror grays. Band pixels carry
    fringes of at least AMPLITUDE_FRACTION of the peak local amplitude, a local frequency (averaged over
    FREQUENCY_WINDOW_PERIODS periods) within PERIOD_TOLERANCE of the carrier and no strong beat at twice the carrier (the grating's +1 and -1 orders overlapping). Next to
    the band, the grating's zero and first orders make fringes of the same period whose phase does not follow the
    mirror gray; given several frames, pixels whose fringes moved less than half as much as the most mobile ones
    are dropped. The largest connected region left is reduced to the rectangle of its rows and columns that are at
    least half covered, less one fringe period at each edge, where the filter blurs the knife edge of the split.
    Raises NoFringesError when the visibility in the brightest region is below MIN_CONTRAST.
    """
    stack = [np.asarray(f, dtype=np.float64) for f in (frames if isinstance(frames, (list, tuple)) else [frames])]
    if len({f.shape for f in stack}) != 1:
        raise ValueError("frames: expected images of one size")
    img = stack[0]
    carrier = carrier or find_carrier(img)
    maps = local_fringes(img, carrier)
    amp = 2 * np.abs(maps.fringe)
    above_dark = np.maximum(maps.mean - dark_adu, 1e-9)
    bright = above_dark >= 0.5 * above_dark.max()
    best = float(np.percentile(amp[bright] / above_dark[bright], 95))
    if best < MIN_CONTRAST:
        raise NoFringesError(f"no fringes: contrast {best:.2f} below {MIN_CONTRAST} in the brightest region; "
                             "check polarisation and overlap")
    # The local frequency, amplitude-weighted over two periods: pixel to pixel it jitters where weak stray orders
    # beat with the fringes (crosstalk and a polarisation error together), which would cut the band into pieces.
    size = int(np.ceil(FREQUENCY_WINDOW_PERIODS * carrier.period_px))
    local_f = (ndimage.uniform_filter(_local_frequency(maps.fringe, carrier) * amp, size)
               / np.maximum(ndimage.uniform_filter(amp, size), 1e-12))
    uniform = np.abs(local_f - carrier.frequency) <= PERIOD_TOLERANCE * carrier.frequency
    mask = (amp >= AMPLITUDE_FRACTION * amp.max()) & uniform & (2 * np.abs(maps.harmonic) < HARMONIC_RATIO * amp)
    if len(stack) > 1:
        mask &= _moving(stack, maps.fringe, carrier, mask)
    labels, n = ndimage.label(mask)
    if n == 0:
        raise NoFringesError("no fringes: no region of uniform fringes found; check polarisation and overlap")
    sizes = np.bincount(labels.ravel())[1:]
    region = labels == (1 + int(np.argmax(sizes)))
    rows, cols = region.sum(axis=1), region.sum(axis=0)
    ys = np.flatnonzero(rows >= 0.5 * rows.max())
    xs = np.flatnonzero(cols >= 0.5 * cols.max())
    margin = int(np.ceil(carrier.period_px))
    band = Band(int(xs[0]) + margin, int(xs[-1]) + 1 - margin, int(ys[0]) + margin, int(ys[-1]) + 1 - margin)
    if band.width < 4 * carrier.period_px or band.height < 4:
        raise NoFringesError(f"no fringes: the fringe band is only {max(band.width, 0)}x{max(band.height, 0)} px, "
                             f"expected at least four periods ({4 * carrier.period_px:.0f} px) wide")
    return survey_band(img, band, dark_adu, maps=maps)


def _moving(stack: list[np.ndarray], first: np.ndarray, carrier: Carrier, mask: np.ndarray) -> np.ndarray:
    """Pixels whose fringe phase, against the first frame, moved at least half as far as the most mobile ones."""
    move = np.zeros(first.shape)
    for img in stack[1:]:
        turn = local_fringes(img, carrier).fringe * np.conj(first)
        move = np.maximum(move, np.abs(1 - turn / np.maximum(np.abs(turn), 1e-12)))
    top = np.percentile(move[mask], 95) if mask.any() else 0.0
    # Below ~0.3 rad of motion anywhere the frames cannot tell the band from the grating side: keep the mask.
    if top < 0.3:
        return np.ones_like(mask)
    return move >= 0.5 * top


def survey_band(image: np.ndarray, band: Band, dark_adu: float = 0.0, maps: LocalFringes | None = None) -> BandSurvey:
    """Carrier, fringe count, period uniformity and contrast inside a given band (e.g. a user's ROI)."""
    img = np.asarray(image, dtype=np.float64)
    band.check_inside(img.shape)
    carrier = find_carrier(img[band.slices], max_period_px=max(band.width, band.height) / 2)
    if maps is None:
        maps = local_fringes(img, carrier)
    fringe = maps.fringe[band.slices]
    amp = 2 * np.abs(fringe)
    local_f = _local_frequency(fringe, carrier)
    spread = float(np.sqrt(np.average((local_f / carrier.frequency - 1) ** 2, weights=amp)))
    contrast = float(np.median(amp / np.maximum(maps.mean[band.slices] - dark_adu, 1e-9)))
    count = band.width * abs(carrier.fx) + band.height * abs(carrier.fy)
    return BandSurvey(band, carrier, float(count), spread, contrast)


def _local_frequency(fringe: np.ndarray, carrier: Carrier) -> np.ndarray:
    """Local fringe frequency (cycles/px) from the gradient of the analytic signal's phase."""
    gx = np.angle(fringe[:, 1:] * np.conj(fringe[:, :-1]))
    gy = np.angle(fringe[1:, :] * np.conj(fringe[:-1, :]))
    gx = np.pad(gx, ((0, 0), (0, 1)), mode="edge")
    gy = np.pad(gy, ((0, 1), (0, 0)), mode="edge")
    return np.hypot(gx, gy) / (2 * np.pi)
