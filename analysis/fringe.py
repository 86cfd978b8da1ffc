"""Fringe phase estimators on a band of a frame, and exposure figures.

Every estimator models the band as I = B + Re[C exp(i theta)], theta = 2 pi (fx (x - xc) + fy (y - yc)) with
(xc, yc) the band centre, and reports the phase of C (rad), so all of them agree on what "the phase" is:
- ``cosine-fit``: offset + amplitude cos(2 pi s / p + phi) fitted by nonlinear least squares to a profile along
  the carrier (the classic; the profile is the band averaged across the fringes, or one line of it).
- ``fourier``: the Fourier-transform method of Takeda, Ina and Kobayashi (JOSA 72, 156, 1982): keep the carrier
  lobe, transform back, average the complex signal over the band (weights = local amplitude).
- ``carrier-lsq``: linear least squares over every band pixel at the known carrier, with background B and complex
  envelope C both low-order polynomials, so envelope variation, small chirp or rotation and stray light are part
  of the model rather than a bias. Clipped pixels are left out exactly (a low-rank update of the normal equations).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from analysis.band import Band
from analysis.carrier import Carrier

POLY_ORDER = 2  # total degree of the background and envelope polynomials of carrier-lsq
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
    """Precomputed carrier-lsq fit for one band and carrier: separable basis and the normal-equation solve.

    Each basis image is a sum of products v_q(y) u_p(x) of 1-D functions (Legendre polynomials times the carrier's
    cosine or sine along that axis), so the moments V^T I U of a frame give A^T I for every basis image at the cost
    of one small matrix product per frame.
    """

    band: Band
    carrier: Carrier
    u: np.ndarray        # (width, n_u) x functions
    v: np.ndarray        # (height, n_v) y functions
    combo: np.ndarray    # (n_params, n_v, n_u): basis image k = sum combo[k] * v(y) u(x)
    normal: np.ndarray   # A^T A
    inverse: np.ndarray  # (A^T A)^-1
    solve: np.ndarray    # (n_params, n_v * n_u): params = solve @ moments
    mean_weights: np.ndarray  # band mean of each basis polynomial
    n_background: int


def lsq_model(band: Band, carrier: Carrier, order: int = POLY_ORDER) -> LsqModel:
    """Build the carrier-lsq model for ``band`` at ``carrier`` with polynomials of total degree ``order``."""
    def axis(n, f):
        s = np.arange(n) - (n - 1) / 2
        legendre = np.polynomial.legendre.legvander(s / max((n - 1) / 2, 1), order)  # (n, order + 1)
        arg = 2 * np.pi * f * s
        funcs = np.concatenate([legendre, legendre * np.cos(arg)[:, None], legendre * np.sin(arg)[:, None]], axis=1)
        return funcs, legendre.mean(axis=0)

    u, mu = axis(band.width, carrier.fx)
    v, mv = axis(band.height, carrier.fy)
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
    normal = np.einsum("pba,qcd,bc,ad->pq", combo, combo, v.T @ v, u.T @ u, optimize=True)
    flat = combo.reshape(combo.shape[0], -1)
    mean_weights = np.array([mu[a] * mv[b] for a, b in terms])
    inverse = np.linalg.inv(normal)
    return LsqModel(band, carrier, u, v, combo, normal, inverse, inverse @ flat, mean_weights, n_bg)


def carrier_lsq(image: np.ndarray, model: LsqModel, dark_adu: float = 0.0, clip_adu: float | None = None
                ) -> PhaseEstimate:
    """Phase by linear least squares over the band at the model's carrier (see the module docstring).

    Pixels at or above ``clip_adu`` are excluded from the fit. The uncertainty is the parameter covariance
    sigma^2 (A^T A)^-1 with sigma^2 from the residual sum of squares.
    """
    crop = np.asarray(image)[model.band.slices].astype(np.float64)
    moments = (model.v.T @ crop @ model.u).ravel()
    n = crop.size
    sum_sq = float(np.vdot(crop, crop))
    at_i = model.combo.reshape(model.combo.shape[0], -1) @ moments
    if clip_adu is not None and crop.max() >= clip_adu:
        # Leave clipped pixels out: subtract their rows of A from A^T I and A^T A (exact, cheap for a few).
        ys, xs = np.nonzero(crop >= clip_adu)
        rows = np.einsum("pba,cb,ca->cp", model.combo, model.v[ys], model.u[xs], optimize=True)
        values = crop[ys, xs]
        at_i = at_i - rows.T @ values
        inverse = np.linalg.inv(model.normal - rows.T @ rows)
        params = inverse @ at_i
        n -= ys.size
        sum_sq -= float(values @ values)
    else:
        params = model.solve @ moments
        inverse = model.inverse
    nb = model.n_background
    w = model.mean_weights
    background = float(params[:nb] @ w)
    c_re = float(params[nb::2] @ w)
    c_im = -float(params[nb + 1::2] @ w)  # Re[C e^{i theta}] = Re C cos theta - Im C sin theta
    amplitude = math.hypot(c_re, c_im)
    rss = max(sum_sq - float(params @ at_i), 0.0)
    sigma2 = rss / max(n - params.size, 1)
    grad = np.zeros(params.size)
    # d phase = (Re C d Im C - Im C d Re C) / |C|^2
    grad[nb::2] = -c_im * w / max(amplitude**2, 1e-300)
    grad[nb + 1::2] = -c_re * w / max(amplitude**2, 1e-300)
    std = math.sqrt(max(sigma2 * float(grad @ inverse @ grad), 0.0))
    return PhaseEstimate(math.atan2(c_im, c_re), amplitude, amplitude / max(background - dark_adu, 1e-9), std)


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
    Jacobian, sigma^2 (J^T J)^-1.
    """
    crop = np.asarray(image)[band.slices].astype(np.float64)
    along_x = abs(carrier.fx) >= abs(carrier.fy)
    if line is None:
        profile = crop.mean(axis=0 if along_x else 1)
    else:
        index = line - (band.y0 if along_x else band.x0)
        profile = crop[index, :] if along_x else crop[:, index]
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
    dof = max(profile.size - 4, 1)
    sigma2 = float(fit.fun @ fit.fun) / dof
    try:
        cov = np.linalg.inv(fit.jac.T @ fit.jac) * sigma2
        std = math.sqrt(max(cov[3, 3], 0.0))
    except np.linalg.LinAlgError:
        std = math.inf
    phase = math.remainder(phi, 2 * math.pi)
    return PhaseEstimate(phase, float(amp), float(amp) / max(offset - dark_adu, 1e-9), std)


METHODS = ("carrier-lsq", "fourier", "cosine-fit")
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
