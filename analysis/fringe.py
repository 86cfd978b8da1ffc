"""Fringe phase estimators on a band of a frame, and exposure figures.

Every estimator models the band as I = B + Re[C exp(i theta)], theta = 2 pi (fx (x - xc) + fy (y - yc)) with
(xc, yc) the band centre, and reports the phase of C (rad), so all of them agree on what "the phase" is:
- ``cosine-fit``: offset + amplitude cos(2 pi s / p + phi) fitted by nonlinear least squares to a profile along
  the carrier (the profile is the band averaged across the fringes, or one image row or column of it).
- ``fourier``: the Fourier-transform method of Takeda, Ina and Kobayashi (JOSA 72, 156, 1982): keep the carrier
  lobe, transform back, average the complex signal over the band (weights = local amplitude).
- ``carrier-lsq``: linear least squares over every band pixel at the known carrier, with background B and complex
  envelope C both low-order polynomials, so envelope variation, small chirp or rotation and stray light are part
  of the model rather than a bias; the band edges the carrier crosses are tapered by a smooth window. Clipped
  pixels are left out exactly (a low-rank update of the normal equations).
- ``weighted-lsq``: the same model with degree-4 envelopes at a carrier refined for chirp and curvature, every
  pixel weighted by the inverse of its fringe-averaged variance from the photon-transfer relation, clipped pixels
  left out on the model; 1.0-1.25x the Cramér–Rao bound on frames the project did not make (tests/framegen.py).
The least-squares estimators also report the band's background level; with amplitude and phase that is the
frame's complex fringe amplitude (PhaseEstimate.fringe_adu), what a cyclic-error fit over all levels works on.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage, optimize

from analysis.band import Band
from analysis.carrier import Carrier

CLIP_SMOOTH_PX = 15  # pixels averaged along the fringes to judge which crests reach full scale
CLIP_MARGIN_ADU_FRACTION = 0.02  # crests within this fraction of full scale (about 3 noise sigmas) are left out too
POLY_ORDER = 2  # total degree of the background and envelope polynomials of carrier-lsq
WEIGHTED_ORDER = 4  # ... of weighted-lsq: beams that fall to a third of their peak across the band need degree 4
TAPER_PERIODS = 3.0  # carrier-lsq window: raised-cosine ramps this many fringe periods wide at the knife edges
REFINE_PASSES = 1  # weighted-lsq's refits of the carrier's linear and quadratic phase before weighting
CLIP_SIGMAS = 3.0  # weighted-lsq leaves out pixels whose model mean is this many noise sigmas from full scale
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
    background_adu: float = math.nan  # band-mean background level (ADU, dark included) where the method fits one

    @property
    def fringe_adu(self) -> complex:
        """Complex fringe amplitude (ADU): amplitude and phase in one number, as a cyclic-error fit wants them."""
        return self.amplitude_adu * complex(math.cos(self.phase_rad), math.sin(self.phase_rad))


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
    order: int
    x_funcs: np.ndarray  # (width, n_u) the x functions without the window
    y_funcs: np.ndarray  # (height, n_v) the y functions without the window
    extra_x: np.ndarray  # (width,) carrier phase (rad) beyond 2 pi fx x: chirp, curvature (weighted-lsq)
    extra_y: np.ndarray  # (height,)


def lsq_model(band: Band, carrier: Carrier, order: int = POLY_ORDER, taper_periods: float = TAPER_PERIODS
              ) -> LsqModel:
    """Build the carrier-lsq model for ``band`` at ``carrier``: polynomials of total degree ``order``, and a
    raised-cosine taper ``taper_periods`` fringe periods wide (at most a quarter of the band) at the two band edges
    that the carrier crosses."""
    along_x = abs(carrier.fx) >= abs(carrier.fy)

    def window(n, tapered):
        return _taper(n, min(taper_periods * carrier.period_px, n / 4)) if tapered else np.ones(n)

    return _model(band, carrier, order, window(band.width, along_x), window(band.height, not along_x),
                  np.zeros(band.height), np.zeros(band.width))


def _model(band: Band, carrier: Carrier, order: int, wx: np.ndarray, wy: np.ndarray, extra_y: np.ndarray,
           extra_x: np.ndarray) -> LsqModel:
    """LsqModel with windows wx, wy and carrier phase 2 pi (fx x + fy y) + extra_y(y) + extra_x(x) (rad)."""
    u = axis_functions(band.width, carrier.fx, order, extra_x)
    v = axis_functions(band.height, carrier.fy, order, extra_y)
    mu, mv = wx @ u[:, :order + 1] / wx.sum(), wy @ v[:, :order + 1] / wy.sum()
    combo = _combo(order)
    n_bg = combo.shape[0] // 3
    terms = [(a, b) for a in range(order + 1) for b in range(order + 1) if a + b <= order]
    def gram(py, px):
        gv, gu = v.T @ (py[:, None] * v), u.T @ (px[:, None] * u)
        return _contract(lambda b, c, a, d: gv[b, c] * gu[a, d], combo)

    normal, normal2 = gram(wy, wx), gram(wy**2, wx**2)
    flat = combo.reshape(combo.shape[0], -1)
    mean_weights = np.array([mu[a] * mv[b] for a, b in terms])
    inverse = np.linalg.inv(normal)
    return LsqModel(band, carrier, u * wx[:, None], v * wy[:, None], wx, wy, combo, normal, normal2, inverse,
                    inverse @ flat, mean_weights, n_bg, order, u, v, extra_x, extra_y)


def axis_functions(n: int, f: float, order: int, extra_rad: np.ndarray | None = None) -> np.ndarray:
    """(n, 3 (order + 1)) functions along one axis of n px: Legendre polynomials up to ``order`` on [-1, 1], and
    the same times the cosine and the sine of the carrier 2 pi f s (+ ``extra_rad``), s from the axis centre."""
    s = np.arange(n) - (n - 1) / 2
    legendre = np.polynomial.legendre.legvander(s / max((n - 1) / 2, 1), order)  # (n, order + 1)
    arg = 2 * np.pi * f * s if extra_rad is None else 2 * np.pi * f * s + extra_rad
    return np.concatenate([legendre, legendre * np.cos(arg)[:, None], legendre * np.sin(arg)[:, None]], axis=1)


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
    params, inverse, normal2 = _lsq_params(crop, model, dark_adu, clip_adu)
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
    return PhaseEstimate(math.atan2(c_im, c_re), amplitude, amplitude / max(background - dark_adu, 1e-9), std,
                         background)


def weighted_lsq(image: np.ndarray, model: LsqModel, dark_adu: float = 0.0, clip_adu: float | None = None,
                 noise: tuple[float, float] | None = None) -> PhaseEstimate:
    """Phase (rad) by least squares over the band with each pixel weighted by its inverse noise variance.

    Three steps. (1) carrier-lsq's unweighted fit gives a model mean mu_i of every pixel, fringes included, and a
    complex envelope whose phase map, fitted with linear and quadratic terms along x and y, refines the carrier:
    a small frequency error, a chirp or curved fringes are then part of the basis instead of a phase the
    polynomial envelope must follow. (2) Each pixel's variance follows the photon-transfer relation (EMVA 1288)
    var_i = K (mu_i - dark) + floor, with K and the floor given as ``noise`` = (K ADU/e, floor ADU^2) or fitted on
    this frame to the pixel noise that the 4-tap filter of pixel_noise_var lets through, against mu_i. Pixels
    whose mean lies within CLIP_SIGMAS noise sigmas of ``clip_adu`` are left out: judged on the model, the set
    does not jitter with the noise. (3) Background and complex envelope are fitted again with weights
    window / var_i, var_i from the fitted background (the variance averaged over a fringe). Weights that follow
    the fringes too (crests noisier than troughs) would reach the bound on high-contrast fringes, 1.0-1.16x on
    tests/framegen.py's kinds, but they make the fit depend on the fringe phase wherever the envelopes miss fine
    structure of the beams: on the bench simulator's frames that was a 5 mrad error that changes with the gray.

    The phase is that of the envelope's window-weighted band mean, taken against the model's carrier, as
    carrier-lsq's: a fixed linear functional of the envelope, so frames of one sweep share one reference whatever
    their brightness, and light at the carrier that the mirror gray does not touch (a cover-glass ghost) adds one
    constant phasor, which the cyclic correction removes exactly. (Weighting the mean by |C| as well came no
    nearer the bound on tests/framegen.py's kinds, and with a ghost |C| turns with the phase: a 3 mrad error the
    correction cannot see.) The uncertainty is the Fisher information of the weighted
    fit, N^-1 (A^T W^2 V A) N^-1 with N = A^T W A (the window makes it a sandwich).
    """
    crop = np.asarray(image)[model.band.slices].astype(np.float64)
    h, w = crop.shape
    order, nb = model.order, model.n_background
    base = model
    for _ in range(REFINE_PASSES):
        params, _, _ = _lsq_params(crop, model, dark_adu, clip_adu)
        extra_y, extra_x = _phase_terms(params, model)
        model = _model(model.band, model.carrier, order, model.wx, model.wy, model.extra_y + extra_y,
                       model.extra_x + extra_x)
    params, _, _ = _lsq_params(crop, model, dark_adu, clip_adu)
    mean = _model_image(params, model.combo, model.y_funcs, model.x_funcs)
    u, v = model.x_funcs, model.y_funcs
    extra_y, extra_x = model.extra_y - base.extra_y, model.extra_x - base.extra_x
    var, gain, floor = _variance_model(crop, mean, model.carrier, dark_adu, noise)
    # Weights from the variance averaged over a fringe (the background's): they do not move with the fringes, so
    # the fit stays a fixed linear map of the frame for a given brightness and a phase shift of the fringes moves
    # the result by exactly that shift, whatever fine structure the envelopes miss.
    bg_image = _model_image(np.where(np.arange(params.size) < nb, params, 0.0), model.combo, model.y_funcs,
                              model.x_funcs)
    smooth = np.maximum(gain * (bg_image - dark_adu) + floor, var.min())
    window = model.wy[:, None] * model.wx[None, :]
    weight = window / smooth
    if clip_adu is not None:
        weight[mean + CLIP_SIGMAS * np.sqrt(var) >= clip_adu] = 0.0
    combo = model.combo
    flat = combo.reshape(combo.shape[0], -1)
    at_i = flat @ (v.T @ (weight * crop) @ u).ravel()
    normal = _weighted_gram(weight, combo, v, u)
    normal2 = _weighted_gram(weight**2 * var, combo, v, u)  # A^T W V W A: the variance with the fringes in it
    try:
        inverse = np.linalg.inv(normal)
    except np.linalg.LinAlgError:
        # Nothing left to weigh (a frame of noise, or one clipped all over): the unweighted fit says what it can.
        return carrier_lsq(image, base, dark_adu, clip_adu)
    params = inverse @ at_i
    # The phase functional on a coarse grid (it weighs smooth fields: 64 samples an axis are plenty).
    gy, gx = _grid(h, 64), _grid(w, 64)
    k = order + 1
    terms = [(a, b) for a in range(k) for b in range(k) if a + b <= order]
    legendre = np.stack([v[gy, b][:, None] * u[gx, a][None, :] for a, b in terms])  # (n_terms, gy, gx)
    coef = params[nb::2] - 1j * params[nb + 1::2]
    envelope = np.tensordot(coef, legendre, axes=1)
    turn = np.exp(1j * (extra_y[gy][:, None] + extra_x[gx][None, :]))
    lam = model.wy[gy][:, None] * model.wx[gx][None, :] * np.ones(envelope.shape)
    hvec = np.tensordot(legendre, lam * turn, axes=([1, 2], [0, 1]))  # L = sum_j coef_j h_j
    total = complex(coef @ hvec)
    # Re L and Im L as real linear forms in the parameters, for the gradient of the phase.
    re_form, im_form = np.zeros(params.size), np.zeros(params.size)
    re_form[nb::2], re_form[nb + 1::2] = hvec.real, hvec.imag
    im_form[nb::2], im_form[nb + 1::2] = hvec.imag, -hvec.real
    grad = (total.real * im_form - total.imag * re_form) / max(abs(total) ** 2, 1e-300)
    sens = inverse @ grad
    std = math.sqrt(max(float(sens @ normal2 @ sens), 0.0))
    amplitude = abs(total) / max(float(lam.sum()), 1e-300)
    background = float(params[:nb] @ model.mean_weights)
    return PhaseEstimate(float(np.angle(total)), amplitude, amplitude / max(background - dark_adu, 1e-9), std,
                         background)


def _grid(n: int, samples: int) -> np.ndarray:
    """At most ``samples`` indices spread evenly over 0..n-1."""
    return np.linspace(0, n - 1, min(n, samples)).round().astype(int)


def _model_image(params: np.ndarray, combo: np.ndarray, v: np.ndarray, u: np.ndarray) -> np.ndarray:
    """The fitted model sum_k params_k A_k as an image, from the separable basis (v(y), u(x) without window)."""
    return v @ np.tensordot(params, combo, axes=1) @ u.T


def _phase_terms(params: np.ndarray, model: LsqModel) -> tuple[np.ndarray, np.ndarray]:
    """Linear and quadratic phase (rad) along y and along x that the fitted envelope shows, as extra carrier phase.

    The envelope's phase, sampled on a coarse grid and weighted by |C|^2, is fitted with a constant, s, t and the
    second Legendre polynomials of s and t (s, t on [-1, 1]); the constant stays with the envelope.
    """
    nb, k = model.n_background, model.order + 1
    h, w = model.band.height, model.band.width
    gy, gx = _grid(h, 32), _grid(w, 32)
    terms = [(a, b) for a in range(k) for b in range(k) if a + b <= model.order]
    coef = params[nb::2] - 1j * params[nb + 1::2]
    ly, lx = model.y_funcs[:, :k], model.x_funcs[:, :k]
    envelope = sum(c * ly[gy, b][:, None] * lx[gx, a][None, :] for c, (a, b) in zip(coef, terms))
    mean = np.sum(np.abs(envelope) * envelope)
    phase = np.angle(envelope * np.conj(mean) / max(abs(mean), 1e-300))
    t, s = ly[:, 1], lx[:, 1]
    p2 = lambda z: 1.5 * z**2 - 0.5
    ty, sx = t[gy][:, None] * np.ones(gx.size), s[gx][None, :] * np.ones((gy.size, 1))
    design = np.stack([np.ones_like(ty), sx, ty, p2(sx), p2(ty)], axis=-1).reshape(-1, 5)
    sw = np.abs(envelope).ravel()
    fit, *_ = np.linalg.lstsq(design * sw[:, None], phase.ravel() * sw, rcond=None)
    return fit[2] * t + fit[4] * p2(t), fit[1] * s + fit[3] * p2(s)


def _variance_model(crop: np.ndarray, mean: np.ndarray, carrier: Carrier, dark_adu: float,
                    noise: tuple[float, float] | None) -> tuple[np.ndarray, float, float]:
    """Pixel variance (ADU^2) K (mean - dark) + floor, with (K, floor) given or fitted on this frame (see weighted_lsq);
    returns the variance image, K and the floor.

    The fit regresses the squared output of pixel_noise_var's 4-tap filter, over its power gain, on the same taps'
    power-weighted model mean, every NOISE_STRIDE-th line: both sides are averages over the same four pixels, so
    a variance that changes along the filter is no bias. The result is kept above a tenth of its mean.
    """
    if noise is None:
        along_x = abs(carrier.fx) >= abs(carrier.fy)
        stride = max(1, min(NOISE_STRIDE, crop.shape[1 if along_x else 0] // NOISE_LINES))
        lines = crop[:, ::stride] if along_x else crop[::stride, :].T
        mus = (mean[:, ::stride] if along_x else mean[::stride, :].T) - dark_adu
        k = 1 + 2 * math.cos(2 * math.pi * (carrier.fy if along_x else carrier.fx))
        gain = 2 + 2 * k**2
        out = lines[:-3] - lines[3:] + k * (lines[2:-1] - lines[1:-2])
        level = (mus[:-3] + mus[3:] + k**2 * (mus[1:-2] + mus[2:-1])) / gain
        power = out**2 / gain
        n, sx, sy = level.size, float(level.sum()), float(power.sum())
        sxx, sxy = float(np.vdot(level, level)), float(np.vdot(level, power))
        det = n * sxx - sx * sx
        slope = (n * sxy - sx * sy) / det if det > 0 else 0.0
        slope = max(slope, 0.0)
        noise = (slope, (sy - slope * sx) / n)
    var = noise[0] * (mean - dark_adu) + noise[1]
    # Noise-free images (tests, models) have no variance to speak of: any positive floor gives the same fit.
    typical = noise[0] * (float(mean.mean()) - dark_adu) + noise[1]
    return np.maximum(var, max(0.1 * typical, 1e-12 * float(mean.mean()) ** 2, 1e-300)), noise[0], noise[1]


def _weighted_gram(weight: np.ndarray, combo: np.ndarray, v: np.ndarray, u: np.ndarray) -> np.ndarray:
    """A^T diag(W) A for a weight image W (h, w), through the separable basis.

    A^T W A [j, k] = sum combo[j, b, a] combo[k, c, d] sum_yx W v_b v_c u_a u_d. Each product u_a u_d of one
    axis is a Legendre polynomial of twice the degree times 1, cos, sin, cos 2 or sin 2 of the carrier
    (_product_map): the weights meet those few functions in one matrix product per axis.
    """
    order = combo.shape[1] // 3 - 1
    pairs, table = _product_map(order)
    t = table @ (_product_functions(v, order).T @ (weight @ _product_functions(u, order))) @ table.T
    lookup = np.zeros((3 * order + 3, 3 * order + 3), dtype=int)
    lookup[pairs[0], pairs[1]] = lookup[pairs[1], pairs[0]] = np.arange(pairs[0].size)
    return _contract(lambda b, c, a, d: t[lookup[b, c], lookup[a, d]], combo)


def _product_functions(f: np.ndarray, order: int) -> np.ndarray:
    """(n, 5 (2 order + 1)) functions P_m, P_m cos, P_m sin, P_m cos 2, P_m sin 2 (m <= 2 order) of an axis whose
    axis_functions are ``f`` (column 1 is the Legendre P_1, the coordinate; columns k and 2k the cosine and sine)."""
    k = order + 1
    legendre = np.polynomial.legendre.legvander(f[:, 1], 2 * order)
    c, s = f[:, k:k + 1], f[:, 2 * k:2 * k + 1]
    return np.concatenate([legendre, legendre * c, legendre * s, legendre * (c * c - s * s), legendre * (2 * c * s)],
                          axis=1)


@functools.lru_cache(maxsize=8)
def _product_map(order: int) -> tuple[tuple[np.ndarray, np.ndarray], np.ndarray]:
    """Pairs (p <= q) of axis functions and the table expressing each product f_p f_q in _product_functions.

    Legendre products by legmul; cos^2 = (1 + cos 2) / 2, sin^2 = (1 - cos 2) / 2, cos sin = sin 2 / 2.
    """
    k, m = order + 1, 2 * order + 1
    pairs = np.triu_indices(3 * k)
    table = np.zeros((pairs[0].size, 5 * m))
    # (block of p, block of q) -> [(block of the product function, factor)]; blocks 0 = 1, 1 = cos, 2 = sin.
    trig = {(0, 0): [(0, 1.0)], (0, 1): [(1, 1.0)], (0, 2): [(2, 1.0)], (1, 1): [(0, 0.5), (3, 0.5)],
            (2, 2): [(0, 0.5), (3, -0.5)], (1, 2): [(4, 0.5)]}
    for row, (p, q) in enumerate(zip(*pairs)):
        (bp, i), (bq, j) = divmod(int(p), k), divmod(int(q), k)
        poly = np.polynomial.legendre.legmul(np.eye(k)[i], np.eye(k)[j])
        for block, factor in trig[(min(bp, bq), max(bp, bq))]:
            table[row, block * m:block * m + poly.size] += factor * poly
    return pairs, table


@functools.lru_cache(maxsize=8)
def _combo(order: int) -> np.ndarray:
    """combo[k, b, a]: basis image k = sum_ba combo[k, b, a] v_b(y) u_a(x), for polynomials of total degree
    ``order``: background terms first, then cosine and sine terms of each envelope polynomial in turn."""
    k = order + 1
    one, cos, sin = 0, k, 2 * k  # offsets of the plain, cosine and sine blocks in u and v
    terms = [(a, b) for a in range(k) for b in range(k) if a + b <= order]
    n_bg = len(terms)
    combo = np.zeros((3 * n_bg, 3 * k, 3 * k))
    for j, (a, b) in enumerate(terms):
        combo[j, one + b, one + a] = 1.0
        # cos(ax + by) = cos ax cos by - sin ax sin by ; sin(ax + by) = sin ax cos by + cos ax sin by
        combo[n_bg + 2 * j, cos + b, cos + a] = 1.0
        combo[n_bg + 2 * j, sin + b, sin + a] = -1.0
        combo[n_bg + 2 * j + 1, cos + b, sin + a] = 1.0
        combo[n_bg + 2 * j + 1, sin + b, cos + a] = 1.0
    combo.flags.writeable = False
    return combo


@functools.lru_cache(maxsize=8)
def _sparse_combo(order: int) -> tuple[np.ndarray, np.ndarray]:
    """The (at most two) nonzero entries of each basis image's combo: indices (n, 2, [b, a]) and values (n, 2)."""
    combo = _combo(order)
    n = combo.shape[0]
    idx, val = np.zeros((n, 2, 2), dtype=int), np.zeros((n, 2))
    for j in range(n):
        for r, (b, a) in enumerate(np.argwhere(combo[j])):
            idx[j, r], val[j, r] = (b, a), combo[j, b, a]
    return idx, val


def _contract(moments, combo: np.ndarray) -> np.ndarray:
    """sum combo[j, b, a] combo[k, c, d] T[b, c, a, d] with T given as ``moments``(b, c, a, d) on index arrays.

    Each basis image has at most two nonzero combo entries, so four gathers of (n, n) moments do it.
    """
    n = combo.shape[0]
    idx, val = _sparse_combo(combo.shape[1] // 3 - 1)
    out = np.zeros((n, n))
    for r in range(2):
        for q in range(2):
            out += val[:, r, None] * val[None, :, q] * moments(idx[:, r, 0, None], idx[None, :, q, 0],
                                                              idx[:, r, 1, None], idx[None, :, q, 1])
    return out

def _lsq_params(crop: np.ndarray, model: LsqModel, dark_adu: float, clip_adu: float | None
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """carrier-lsq's windowed fit of a band crop: parameters, (A^T W A)^-1 and A^T W^2 A (clipped pixels left out)."""
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
        idx, val = _sparse_combo(model.order)
        weighted = (model.v[ys][:, idx[:, :, 0]] * model.u[xs][:, idx[:, :, 1]] * val).sum(axis=2)
        w = model.wy[ys] * model.wx[xs]
        rows = weighted / np.maximum(w, 1e-300)[:, None]
        at_i = model.combo.reshape(model.combo.shape[0], -1) @ moments - weighted.T @ crop[ys, xs]
        inverse = np.linalg.inv(model.normal - weighted.T @ rows)
        normal2 = normal2 - weighted.T @ weighted
        params = inverse @ at_i
    else:
        params = model.solve @ moments
        inverse = model.inverse
    return params, inverse, normal2


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
    only ``line`` (a row or column index of the image): a cosine fit to one image row. The period p is
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


METHODS = ("weighted-lsq", "carrier-lsq", "fourier", "cosine-fit")
# Live sweeps: an honest uncertainty and fast enough for every frame. weighted-lsq comes nearer the bound
# (benchmarks/bench_analysis.py: 0.40 against 0.51 mrad RMS at nominal light, 0.41 against 0.93 with clipped
# crests; 1.03-1.25x the Cramer-Rao bound on tests/framegen.py's frames, where this one reaches 1.3-1.7x) but is ten
# times slower, so it is the default where time is not short: re-analysing saved frames (`fringecal analyze`).
DEFAULT_METHOD = "carrier-lsq"
REANALYSIS_METHOD = "weighted-lsq"
# When to choose each: the --method help is built from these lines.
METHOD_NOTES = {
    "weighted-lsq": "least squares with each pixel weighted by its noise; nearest the Cramer-Rao bound but ten "
                    "times slower: for re-analysing saved frames",
    "carrier-lsq": "least squares over every band pixel; an honest uncertainty and fast enough for live sweeps",
    "fourier": "Takeda's Fourier-transform method; for bands many fringes wide, to cross-check",
    "cosine-fit": "a cosine fit to the band's profile across the fringes; simple, to compare with a one-row analysis",
}


def estimate(image: np.ndarray, band: Band, carrier: Carrier, method: str = DEFAULT_METHOD, dark_adu: float = 0.0,
             clip_adu: float | None = None, model: LsqModel | None = None) -> PhaseEstimate:
    """Phase of one frame by the estimator named ``method`` (one of METHODS).

    ``model`` (from lsq_model) saves rebuilding the carrier-lsq basis for every frame of a sweep.
    """
    if method == "weighted-lsq":
        if model is None or model.order != WEIGHTED_ORDER:
            model = _cached_model(band, carrier, WEIGHTED_ORDER)
        return weighted_lsq(image, model, dark_adu, clip_adu)
    if method == "carrier-lsq":
        return carrier_lsq(image, model or _cached_model(band, carrier, POLY_ORDER), dark_adu, clip_adu)
    if method == "fourier":
        return fourier(image, band, carrier, dark_adu)
    if method == "cosine-fit":
        return cosine_fit(image, band, carrier, dark_adu)
    raise ValueError(f"method: expected one of {', '.join(METHODS)}, got {method!r}")


@functools.lru_cache(maxsize=4)
def _cached_model(band: Band, carrier: Carrier, order: int) -> LsqModel:
    """lsq_model for callers that pass none (or one of another order): a sweep reuses one band and carrier."""
    return lsq_model(band, carrier, order)
