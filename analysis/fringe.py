"""Fringe phase estimators on a band of a frame, and exposure figures.

Every estimator models the band as I = B + Re[C exp(i theta)], theta = 2 pi (fx (x - xc) + fy (y - yc)) with
(xc, yc) the band centre, and reports the phase of C (rad), so all of them agree on what "the phase" is:
- ``cosine-fit``: offset + amplitude cos(2 pi s / p + phi) fitted by nonlinear least squares to a profile along
  the carrier (the classic; the profile is the band averaged across the fringes, or one line of it).
- ``fourier``: the Fourier-transform method of Takeda, Ina and Kobayashi (JOSA 72, 156, 1982): keep the carrier
  lobe, transform back, average the complex signal over the band (weights = local amplitude).
- ``carrier-lsq``: linear least squares over every band pixel at the known carrier, with background B and complex
  envelope C both low-order polynomials, so envelope variation, small chirp or rotation and stray light are part
  of the model rather than a bias; the band edges the carrier crosses are tapered by a smooth window. Clipped
  pixels are left out exactly (a low-rank update of the normal equations).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage, optimize

from analysis.band import Band
from analysis.carrier import Carrier

CLIP_SMOOTH_PX = 15  # pixels averaged along the fringes to judge which crests reach full scale
CLIP_MARGIN_ADU_FRACTION = 0.02  # crests within this fraction of full scale (about 3 noise sigmas) are left out too
POLY_ORDER = 2  # total degree of the background and envelope polynomials of carrier-lsq
TAPER_PERIODS = 3.0  # carrier-lsq window: raised-cosine ramps this many fringe periods wide at the knife edges
NOISE_STRIDE = 8  # pixel_noise_var filters every 8th line: 1/8 of a band still gives the variance to ~1 %
NOISE_LINES = 64  # ... but never fewer lines than this (small bands), for the same precision
NEAR_LINE_PX = 16  # the single-line cosine fit takes its noise from the lines this close to its own
EDGE_PERIODS = 2.5  # the Fourier method's wrap-around error has decayed below 1e-3 this far from a band edge


@dataclass(frozen=True)
class PhaseEstimate:
    """Fringe phase of one frame: phase (rad, wrapped to (-pi, pi]), amplitude (ADU), visibility, uncertainty (rad)."""

    phase_rad: float
    amplitude_adu: float
    contrast: float
    std_rad: float


@dataclass(frozen=True)
class Exposure:
    """Exposure figures of a band: fraction of full scale reached (99.9th percentile above dark), clipped pixels."""

    peak_fraction: float
    saturated_px: int

    @property
    def underexposed(self) -> bool:
        """True when the brightest fringes use less than a quarter of the camera's range."""
        return self.peak_fraction < 0.25


def exposure(image: np.ndarray, band: Band, full_scale: int, dark_adu: float = 0.0) -> Exposure:
    """Exposure figures of ``image`` inside ``band`` for a camera of ``full_scale`` counts."""
    crop = np.asarray(image)[band.slices]
    peak = float(np.percentile(crop, 99.9))
    return Exposure((peak - dark_adu) / (full_scale - dark_adu), int(np.count_nonzero(crop >= full_scale)))


@dataclass(frozen=True)
class LsqModel:
    """Precomputed carrier-lsq fit for one band and carrier: separable basis, window and normal equations.

    Each basis image is a sum of products v_q(y) u_p(x) of 1-D functions (Legendre polynomials times the carrier's
    cosine or sine along that axis), so the moments V^T I U of a frame give A^T W I for every basis image at the
    cost of one small matrix product per frame. The window W = wy(y) wx(x) is folded into u and v.
    """

    band: Band
    carrier: Carrier
    u: np.ndarray        # (width, n_u) x functions times the x window
    v: np.ndarray        # (height, n_v) y functions times the y window
    wx: np.ndarray       # (width,) x window
    wy: np.ndarray       # (height,) y window
    combo: np.ndarray    # (n_params, n_v, n_u): basis image k = sum combo[k] * v(y) u(x)
    normal: np.ndarray   # A^T W A
    normal2: np.ndarray  # A^T W^2 A, for the covariance of a weighted fit
    inverse: np.ndarray  # (A^T W A)^-1
    solve: np.ndarray    # (n_params, n_v * n_u): params = solve @ moments
    mean_weights: np.ndarray  # window-weighted band mean of each basis polynomial
    n_background: int


def lsq_model(band: Band, carrier: Carrier, order: int = POLY_ORDER, taper_periods: float = TAPER_PERIODS
              ) -> LsqModel:
    """Build the carrier-lsq model for ``band`` at ``carrier``: polynomials of total degree ``order``, and a
    raised-cosine taper ``taper_periods`` fringe periods wide (at most a quarter of the band) at the two band edges
    that the carrier crosses."""
    along_x = abs(carrier.fx) >= abs(carrier.fy)

    def axis(n, f, tapered):
        s = np.arange(n) - (n - 1) / 2
        legendre = np.polynomial.legendre.legvander(s / max((n - 1) / 2, 1), order)  # (n, order + 1)
        arg = 2 * np.pi * f * s
        funcs = np.concatenate([legendre, legendre * np.cos(arg)[:, None], legendre * np.sin(arg)[:, None]], axis=1)
        window = _taper(n, min(taper_periods * carrier.period_px, n / 4)) if tapered else np.ones(n)
        return funcs, window, window @ legendre / window.sum()

    u, wx, mu = axis(band.width, carrier.fx, along_x)
    v, wy, mv = axis(band.height, carrier.fy, not along_x)
    k = order + 1
    one, cos, sin = 0, k, 2 * k  # offsets of the plain, cosine and sine blocks in u and v
    terms = [(a, b) for a in range(k) for b in range(k) if a + b <= order]
    n_bg = len(terms)
    combo = np.zeros((3 * n_bg, v.shape[1], u.shape[1]))
    for j, (a, b) in enumerate(terms):
        combo[j, one + b, one + a] = 1.0
        # cos(ax + by) = cos ax cos by - sin ax sin by ; sin(ax + by) = sin ax cos by + cos ax sin by
        combo[n_bg + 2 * j, cos + b, cos + a] = 1.0
        combo[n_bg + 2 * j, sin + b, sin + a] = -1.0
        combo[n_bg + 2 * j + 1, cos + b, sin + a] = 1.0
        combo[n_bg + 2 * j + 1, sin + b, cos + a] = 1.0

    def gram(py, px):
        return np.einsum("pba,qcd,bc,ad->pq", combo, combo, v.T @ (py[:, None] * v), u.T @ (px[:, None] * u),
                         optimize=True)

    normal, normal2 = gram(wy, wx), gram(wy**2, wx**2)
    flat = combo.reshape(combo.shape[0], -1)
    mean_weights = np.array([mu[a] * mv[b] for a, b in terms])
    inverse = np.linalg.inv(normal)
    return LsqModel(band, carrier, u * wx[:, None], v * wy[:, None], wx, wy, combo, normal, normal2, inverse,
                    inverse @ flat, mean_weights, n_bg)


def _taper(n: int, width: float) -> np.ndarray:
    """Window of n samples: 1 inside, a raised cosine over ``width`` samples at each end."""
    ramp = np.clip((np.minimum(np.arange(n), np.arange(n)[::-1]) + 0.5) / max(width, 1e-9), 0.0, 1.0)
    return 0.5 - 0.5 * np.cos(np.pi * ramp)


def carrier_lsq(image: np.ndarray, model: LsqModel, dark_adu: float = 0.0, clip_adu: float | None = None
                ) -> PhaseEstimate:
    """Phase by windowed linear least squares over the band at the model's carrier (see the module docstring).

    The phase is that of the window-weighted band mean of the fitted envelope C. The window tapers the band edges
    that the carrier crosses: those are the images of the split's knife edges, where light diffracted past the
    edge (the grating's zero order among it) beats with the first order at the carrier with a phase that does not
    follow the mirror gray, and a hard cut there would weigh the oscillating tail of that light at full strength.
    Pixels at or above ``clip_adu`` are excluded from the fit. The uncertainty is the parameter covariance
    sigma^2 N^-1 (A^T W^2 A) N^-1 with sigma^2 the pixel noise variance measured by pixel_noise_var, not from the
    fit's residual: on bright frames that residual is mostly fine structure of the beams the smooth envelope does
    not follow (the same in every frame, so not noise).
    """
    crop = np.asarray(image)[model.band.slices].astype(np.float64)
    moments = (model.v.T @ crop @ model.u).ravel()
    normal2 = model.normal2
    if clip_adu is not None and crop.max() >= clip_adu:
        # Leave out the pixels that clip and those noise could have clipped, judged on the frame averaged along the
        # fringes (CLIP_SMOOTH_PX pixels): that follows each fringe's crest but not the noise, so the pixels left
        # out change little from frame to frame (a set that jitters with the noise carries the beams' fine
        # structure into the fit). Then subtract their rows of A from A^T W I, A^T W A and A^T W^2 A (exact, cheap
        # for a few). Rows from the windowed u, v carry the window once; dividing by it gives the plain rows.
        along_rows = 0 if abs(model.carrier.fx) >= abs(model.carrier.fy) else 1
        smooth = ndimage.uniform_filter1d(crop, CLIP_SMOOTH_PX, axis=along_rows, mode="nearest")
        ys, xs = np.nonzero((smooth >= clip_adu - CLIP_MARGIN_ADU_FRACTION * (clip_adu - dark_adu))
                            | (crop >= clip_adu))
        weighted = np.einsum("pba,cb,ca->cp", model.combo, model.v[ys], model.u[xs], optimize=True)
        w = model.wy[ys] * model.wx[xs]
        rows = weighted / np.maximum(w, 1e-300)[:, None]
        at_i = model.combo.reshape(model.combo.shape[0], -1) @ moments - weighted.T @ crop[ys, xs]
        inverse = np.linalg.inv(model.normal - weighted.T @ rows)
        normal2 = normal2 - weighted.T @ weighted
        params = inverse @ at_i
    else:
        params = model.solve @ moments
        inverse = model.inverse
    nb = model.n_background
    w = model.mean_weights
    background = float(params[:nb] @ w)
    c_re = float(params[nb::2] @ w)
    c_im = -float(params[nb + 1::2] @ w)  # Re[C e^{i theta}] = Re C cos theta - Im C sin theta
    amplitude = math.hypot(c_re, c_im)
    grad = np.zeros(params.size)
    # d phase = (Re C d Im C - Im C d Re C) / |C|^2
    grad[nb::2] = -c_im * w / max(amplitude**2, 1e-300)
    grad[nb + 1::2] = -c_re * w / max(amplitude**2, 1e-300)
    sens = inverse @ grad
    sigma2 = pixel_noise_var(crop, model.carrier, model.wx, model.wy)
    std = math.sqrt(max(sigma2 * float(sens @ normal2 @ sens), 0.0))
    return PhaseEstimate(math.atan2(c_im, c_re), amplitude, amplitude / max(background - dark_adu, 1e-9), std)


def pixel_noise_var(crop: np.ndarray, carrier: Carrier, wx: np.ndarray | None = None, wy: np.ndarray | None = None
                    ) -> float:
    """Temporal noise variance (ADU^2) of a band's pixels, from one frame, weighted by the window squared.

    Along the image axis nearer the fringes' direction the fringe signal is a sinusoid of low frequency f on a
    smooth background; the 4-tap filter (1 - z)(1 - 2 cos(2 pi f) z + z^2) removes a constant, a linear trend and
    that sinusoid exactly, so what passes is the pixel noise (times the filter's power gain) plus the curvature
    of the envelopes, which is negligible over four pixels. Every NOISE_STRIDE-th line across (at least NOISE_LINES
    lines) is enough: the variance needs only about 1 % precision. Lines are weighted by the window squared, as
    they enter the phase's variance, so noise that grows with brightness (shot noise) is counted where the fit
    listens. NaN for a crop fewer than four pixels long down the fringes.
    """
    along_x = abs(carrier.fx) >= abs(carrier.fy)
    if crop.shape[0 if along_x else 1] < 4:
        return math.nan
    stride = max(1, min(NOISE_STRIDE, crop.shape[1 if along_x else 0] // NOISE_LINES))
    # A contiguous copy of the sampled lines, with the filter running down axis 0.
    lines = np.ascontiguousarray(crop[:, ::stride] if along_x else crop[::stride, :].T, dtype=np.float64)
    across = wx if along_x else wy
    weight = np.ones(lines.shape[1]) if across is None else across[::stride] ** 2
    k = 1 + 2 * math.cos(2 * math.pi * (carrier.fy if along_x else carrier.fx))
    out = lines[:-3] - lines[3:]  # taps (1, -k, k, -1)
    out += k * (lines[2:-1] - lines[1:-2])
    power = float(np.einsum("ij,ij->j", out, out) @ weight) / (out.shape[0] * max(float(weight.sum()), 1e-300))
    return power / (2 + 2 * k**2)


def fourier(image: np.ndarray, band: Band, carrier: Carrier, dark_adu: float = 0.0) -> PhaseEstimate:
    """Phase by the Fourier-transform method (Takeda, Ina and Kobayashi 1982) over the band.

    The lobe is a Gaussian of standard deviation a third of the carrier frequency. The complex signal is summed
    over the band less EDGE_PERIODS periods at each edge, where the transform's wrap-around corrupts it. The
    uncertainty is that of a lock-in sum, sqrt(2 sigma^2 N) / |sum|, with sigma^2 the white-noise variance.
    """
    crop = np.asarray(image)[band.slices].astype(np.float64)
    h, w = crop.shape
    spec = np.fft.fft2(crop)
    fy = np.fft.fftfreq(h)[:, None]
    fx = np.fft.fftfreq(w)[None, :]
    s2 = 2 * (carrier.frequency / 3) ** 2
    lobe = np.exp(-((fx - carrier.fx) ** 2 + (fy - carrier.fy) ** 2) / s2)
    low = np.exp(-(fx**2 + fy**2) / s2)
    analytic = np.fft.ifft2(spec * lobe)
    m = int(math.ceil(EDGE_PERIODS * carrier.period_px))
    my = m if h > 4 * m else 0
    inner = (slice(my, h - my), slice(m, w - m))
    yy, xx = np.mgrid[:h, :w]
    theta = 2 * np.pi * (carrier.fx * (xx - (w - 1) / 2) + carrier.fy * (yy - (h - 1) / 2))
    # The analytic signal is C/2 e^{i theta}: rotate the carrier out to get C/2 at each pixel.
    envelope = 2 * analytic[inner] * np.exp(-1j * theta[inner])
    total = envelope.sum()
    background = np.fft.ifft2(spec * low).real[inner]
    # White-noise variance from the spectrum far from every lobe: the wrap-around leakage of the signal stays in
    # the lobes' neighbourhood and would inflate a residual-based estimate.
    far = np.ones_like(lobe, dtype=bool)
    for n in range(-3, 4):
        far &= np.exp(-((fx - n * carrier.fx) ** 2 + (fy - n * carrier.fy) ** 2) / (4 * s2)) < 1e-3
    sigma2 = float(np.mean(np.abs(spec[far]) ** 2)) / crop.size if far.any() else math.nan
    n = envelope.size
    amplitude = float(np.abs(total)) / n
    std = math.sqrt(sigma2 * n * 2) / max(float(np.abs(total)), 1e-300)
    return PhaseEstimate(float(np.angle(total)), amplitude,
                         amplitude / max(float(background.mean()) - dark_adu, 1e-9), std)


def cosine_fit(image: np.ndarray, band: Band, carrier: Carrier, dark_adu: float = 0.0, line: int | None = None
               ) -> PhaseEstimate:
    """Phase by a nonlinear least-squares fit of offset + amplitude cos(2 pi s / p + phi) to a profile.

    The profile runs along the carrier's main axis (x for |fx| >= |fy|): the band averaged across that axis, or
    only ``line`` (a row or column index of the image) as in the classic single-line practice. The period p is
    fitted too, starting from the carrier; s is measured from the band centre. The uncertainty comes from the
    Jacobian, sigma^2 (J^T J)^-1, with sigma^2 the profile's noise from pixel_noise_var (over the band, or the
    lines within NEAR_LINE_PX of ``line``) rather than the fit's residual, which the beams' fine structure
    dominates on bright frames.
    """
    crop = np.asarray(image)[band.slices].astype(np.float64)
    along_x = abs(carrier.fx) >= abs(carrier.fy)
    if line is None:
        profile = crop.mean(axis=0 if along_x else 1)
        noise_var = pixel_noise_var(crop, carrier) / crop.shape[0 if along_x else 1]
    else:
        index = line - (band.y0 if along_x else band.x0)
        profile = crop[index, :] if along_x else crop[:, index]
        near = slice(max(index - NEAR_LINE_PX, 0), index + NEAR_LINE_PX + 1)
        noise_var = pixel_noise_var(crop[near, :] if along_x else crop[:, near], carrier)
    f0 = carrier.fx if along_x else carrier.fy
    s = np.arange(profile.size) - (profile.size - 1) / 2
    # Linear least squares at the carrier's frequency gives a starting point inside the right basin.
    design = np.column_stack([np.ones_like(s), np.cos(2 * np.pi * f0 * s), np.sin(2 * np.pi * f0 * s)])
    (b0, c0, s0), *_ = np.linalg.lstsq(design, profile, rcond=None)

    def residual(p):
        offset, amp, freq, phi = p
        return offset + amp * np.cos(2 * np.pi * freq * s + phi) - profile

    start = (b0, math.hypot(c0, s0), f0, math.atan2(-s0, c0))
    fit = optimize.least_squares(residual, start, method="lm")
    offset, amp, _, phi = fit.x
    if amp < 0:
        amp, phi = -amp, phi + math.pi
    try:
        cov = np.linalg.inv(fit.jac.T @ fit.jac) * noise_var
        std = math.sqrt(max(cov[3, 3], 0.0))
    except np.linalg.LinAlgError:
        std = math.inf
    phase = math.remainder(phi, 2 * math.pi)
    return PhaseEstimate(phase, float(amp), float(amp) / max(offset - dark_adu, 1e-9), std)


METHODS = ("carrier-lsq", "fourier", "cosine-fit")
# The analysis benchmark's best: least error against the simulator's truth, nearest the bound, honest
# uncertainty, and the only estimator fast enough for every frame of a live sweep.
DEFAULT_METHOD = "carrier-lsq"


def estimate(image: np.ndarray, band: Band, carrier: Carrier, method: str = DEFAULT_METHOD, dark_adu: float = 0.0,
             clip_adu: float | None = None, model: LsqModel | None = None) -> PhaseEstimate:
    """Phase of one frame by the estimator named ``method`` (one of METHODS).

    ``model`` (from lsq_model) saves rebuilding the carrier-lsq basis for every frame of a sweep.
    """
    if method == "carrier-lsq":
        return carrier_lsq(image, model or lsq_model(band, carrier), dark_adu, clip_adu)
    if method == "fourier":
        return fourier(image, band, carrier, dark_adu)
    if method == "cosine-fit":
        return cosine_fit(image, band, carrier, dark_adu)
    raise ValueError(f"method: expected one of {', '.join(METHODS)}, got {method!r}")
