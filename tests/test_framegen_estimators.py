"""weighted-lsq against the Cramér–Rao bound on frames from an independent generator (framegen.py).

framegen is an analytic split-screen model written for these tests (Gaussian beams with their own centres and
sizes, a soft tilted split edge, stray light, chirped or curved fringes, a coherent ghost, an EMVA 1288 sensor with
clipping), not the bench simulator the estimators were tuned on. The bound (framegen.frame_bound_rad) is the
Fisher information of the fringe phase from the band's pixels, var_i = mean_i / K + read^2 (+1/12 ADU^2 rounding;
EMVA Standard 1288, REFERENCES.md "Camera photon transfer"), with a background scale and a fringe amplitude scale
as nuisance parameters (S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory, 1993, ch. 3,
from memory).
"""

import json
import math

import numpy as np
import pytest
from scipy import integrate, special

import framegen as fg
from analysis.band import Band
from analysis.carrier import find_carrier
from analysis.fringe import WEIGHTED_ORDER, estimate, fourier, lsq_model, weighted_lsq

KINDS = fg.kinds()
METHOD = "weighted-lsq"
# Frames a kind: 6 levels x 34 draws = 204, so the scatter's variance is known to 10 % (sqrt(2 / 204)); the large
# frames take 3 levels x 24 (15 % on the variance) to keep the file's run time near half a minute on one core.
DRAWS = {"1200x1920": 24}


def weighted_estimator(kind):
    """make_estimator for framegen.trial: band = the whole crop, carrier found once on the first frame."""
    def make(crop):
        band = Band(0, crop.shape[1], 0, crop.shape[0])
        carrier = find_carrier(crop, max_period_px=max(crop.shape) / 2)
        model = lsq_model(band, carrier)
        return lambda c: estimate(c, band, carrier, METHOD, kind.sensor.offset_adu, kind.sensor.full_scale, model)
    return make


def test_bound_is_kays_closed_form_on_a_plain_sinusoid():
    """A sinusoid of known frequency over whole periods in white Gaussian noise: var >= 2 sigma^2 / (N A^2) (Kay
    1993, Example 3.4, from memory; REFERENCES.md), with offset and amplitude estimated alongside (over whole
    periods they cost nothing). N = 100, A^2 / (2 sigma^2) = 10 is REFERENCES.md's worked number, 0.0316 rad."""
    n, amp, sigma, phi = 100, math.sqrt(20.0), 1.0, 0.4
    theta = 2 * np.pi * 0.1 * np.arange(n) + phi
    bound = fg.phase_bound_rad(-amp * np.sin(theta), [np.ones(n), np.cos(theta)], np.full(n, 1 / sigma**2))
    assert bound == pytest.approx(math.sqrt(2 * sigma**2 / (n * amp**2)), rel=1e-9)
    assert bound == pytest.approx(0.0316, abs=1e-4)


def test_bound_is_the_shot_noise_formula_for_poisson_fringes():
    """Shot-noise-limited fringes I0 (1 + V cos(theta + phi)) over whole periods with N_ph photo-electrons:
    var >= 1 / (N_ph (1 - sqrt(1 - V^2))) (REFERENCES.md, derived from the Fisher information), for V = 0.3 and
    0.95; the Poisson information is 1 / mean per pixel."""
    n, i0 = 6400, 250.0
    theta = 2 * np.pi * np.arange(n) / 64 + 0.9  # 64 samples a period: the sum is then the formula's integral
    for vis in (0.3, 0.95):
        mean = i0 * (1 + vis * np.cos(theta))
        bound = fg.phase_bound_rad(-i0 * vis * np.sin(theta), [np.ones(n), np.cos(theta)], 1 / mean)
        assert bound == pytest.approx(1 / math.sqrt(n * i0 * (1 - math.sqrt(1 - vis**2))), rel=1e-3)


def test_censored_information_against_numerical_integration():
    """Fisher information about the mean of a Gaussian reading censored at full scale, against E[score^2]
    integrated numerically (uncensored density plus the censored mass, score by finite differences of the log
    likelihood): the definition of the Fisher information (Kay 1993, ch. 3), no closed form used."""
    sigma, c = 3.0, 100.0
    for mu in (80.0, 97.0, 100.0, 104.0, 112.0):
        below, _ = integrate.quad(lambda y: ((y - mu) / sigma**2) ** 2 * np.exp(-0.5 * ((y - mu) / sigma) ** 2)
                                  / (sigma * math.sqrt(2 * math.pi)), -np.inf, c)
        tail = special.ndtr((mu - c) / sigma)
        d = 1e-4
        score = (math.log(special.ndtr((mu + d - c) / sigma)) - math.log(special.ndtr((mu - d - c) / sigma))) / (2 * d)
        expected = below + tail * score**2
        got = float(fg.censored_information(np.array(mu), np.array(sigma**2), c))
        assert got == pytest.approx(expected, rel=1e-4)


def test_generator_counts_follow_the_photon_transfer_relation():
    """framegen's sensor: over 300 draws the mean count of each pixel is offset + K electrons and the variance
    K (mean - offset) + K^2 read^2 + 1/12 (EMVA 1288), judged on pixels from dark to bright, low light included."""
    rng = np.random.default_rng(4)
    for name in ("clean", "low light"):
        kind = KINDS[name]
        e = fg.light_e(kind, kind.levels[0], band_only=True)[::7, ::11]
        stack = np.array([fg.draw(kind, e, rng) for _ in range(300)], dtype=np.float64)
        s = kind.sensor
        mean = s.offset_adu + s.gain_adu_per_e * e
        assert np.mean(stack.mean(axis=0) - mean) == pytest.approx(0.0, abs=0.02 * math.sqrt(np.mean(mean)))
        ratio = stack.var(axis=0, ddof=1) / s.variance_adu2(mean)
        assert np.mean(ratio) == pytest.approx(1.0, abs=0.02)


def test_noise_model_fitted_on_the_frame_matches_the_sensor():
    """weighted-lsq fits the photon-transfer line (K, floor) on each frame; given the sensor's true K = 0.25 ADU/e
    and floor K^2 read^2 + 1/12 instead, the phase moves by less than a tenth of its std and the stated std by
    less than 4 %, on a bright and on a low-light frame."""
    rng = np.random.default_rng(2)
    for name in ("clean", "low light"):
        kind = KINDS[name]
        s = kind.sensor
        crop = fg.draw(kind, fg.light_e(kind, kind.levels[1], band_only=True), rng)
        band = Band(0, crop.shape[1], 0, crop.shape[0])
        model = lsq_model(band, find_carrier(crop, max_period_px=max(crop.shape) / 2), WEIGHTED_ORDER)
        fitted = weighted_lsq(crop, model, s.offset_adu, s.full_scale)
        given = weighted_lsq(crop, model, s.offset_adu, s.full_scale,
                             noise=(s.gain_adu_per_e, (s.gain_adu_per_e * s.read_noise_e) ** 2 + 1 / 12))
        assert abs(fitted.phase_rad - given.phase_rad) < 0.1 * given.std_rad
        assert fitted.std_rad == pytest.approx(given.std_rad, rel=0.04)


# The issue asks for 1.2x. weighted-lsq reaches (seed 7, 204 frames a kind: +-5 % on these ratios) 1.06 low
# light, 1.07 chirped, 1.12 drift, 1.13 clean, 1.15 gray-dependent amplitude, 1.17 4 pi and steep, 1.18 vibration,
# 1.20 clipped crests. Weights that follow the fringes reach 1.02-1.16x on every kind but break the phase's
# covariance on structured frames (see weighted_lsq), so they are not used.
LIMIT = 1.2


@pytest.mark.parametrize("name", [k for k in KINDS if k != "ghost"])
def test_weighted_estimator_near_the_bound_with_honest_std(name):
    """On every kind but the ghost weighted-lsq's rms error (one offset removed; any error that depends on the
    phase or the brightness stays in) is within 1.2x the bound, and the stated std is within 0.8-1.25 of the
    actual scatter."""
    kind = KINDS[name]
    if name in DRAWS:
        kind = fg.replace(kind, levels=kind.levels[:3])
    result = fg.trial(kind, weighted_estimator(kind), DRAWS.get(name, 34), np.random.default_rng(7))
    assert result.ratio <= LIMIT
    assert 0.8 <= result.honesty <= 1.25


def test_coherent_ghost_is_systematic_and_the_stated_std_is_the_noise():
    """A cover-glass ghost (6 % of the mirror beam's field) adds a constant phasor at the carrier: an error that
    repeats with the phase (cyclic error, corrected elsewhere from all levels). Its noise part stays within 2x the
    bound, and the stated std describes that noise part, not the cyclic error."""
    kind = KINDS["ghost"]
    result = fg.trial(kind, weighted_estimator(kind), 34, np.random.default_rng(8))
    assert result.noise_ratio < 2.0
    assert 0.8 <= result.honesty <= 1.25
    # A leak phasor r times the signal's shifts the phase by arg(1 + r exp(i delta)), at most arcsin r either way:
    # r = 0.06 / 0.97 at the mirror beam's peak (more where it falls off), so the six levels spread by about
    # 2 arcsin r = 0.124 rad, the error the cyclic correction must remove and the stated std must not claim.
    r = kind.ghost / kind.coherence
    assert result.spread_rad == pytest.approx(2 * math.asin(r), rel=0.3)


def takeda_reference(image, fx, fy):
    """Takeda, Ina and Kobayashi, JOSA 72, 156 (1982), as written there: 2-D FFT, keep the +1 lobe (here the
    frequencies within half the carrier of it), inverse FFT, remove the carrier, angle. Returns the wrapped phase
    map (rad), with the carrier's phase zero at the image centre."""
    h, w = image.shape
    spec = np.fft.fft2(image)
    ky, kx = np.fft.fftfreq(h)[:, None], np.fft.fftfreq(w)[None, :]
    lobe = np.hypot(kx - fx, ky - fy) < 0.5 * math.hypot(fx, fy)
    analytic = np.fft.ifft2(spec * lobe)
    y, x = np.mgrid[:h, :w]
    theta = 2 * np.pi * (fx * (x - (w - 1) / 2) + fy * (y - (h - 1) / 2))
    return np.angle(analytic * np.exp(-1j * theta))


def test_fourier_method_agrees_with_a_plain_takeda_reference():
    """The `fourier` estimator against takeda_reference on framegen frames (clean kind, noise-free counts, six
    phases): the reference's phase map averaged (as a unit phasor) away from the edges, where the FFT's
    wrap-around spoils it, agrees with the estimator within 5 mrad, and both follow the truth's steps."""
    kind = KINDS["clean"]
    carrier = None
    got, ref = [], []
    for level in kind.levels:
        crop = kind.sensor.offset_adu + kind.sensor.gain_adu_per_e * fg.light_e(kind, level, band_only=True)
        carrier = carrier or find_carrier(crop, max_period_px=max(crop.shape) / 2)
        band = Band(0, crop.shape[1], 0, crop.shape[0])
        got.append(fourier(crop, band, carrier, kind.sensor.offset_adu).phase_rad)
        phase_map = takeda_reference(crop, carrier.fx, carrier.fy)
        inner = phase_map[30:-30, 30:-30]
        ref.append(float(np.angle(np.mean(np.exp(1j * inner)))))
    truth = np.array([lv.phase_rad for lv in kind.levels])
    diff = np.angle(np.exp(1j * (np.array(got) - np.array(ref))))
    assert np.max(np.abs(diff)) < 5e-3
    steps = np.angle(np.exp(1j * (np.array(got) - truth)))
    assert np.ptp(steps) < 5e-3


def analyze_framegen(tmp_path, kind, draws, rng):
    """``fringecal analyze`` (its default estimator) on ``draws`` frames of each of ``kind``'s levels, written as
    .npy files with a manifest (gray 40 i for level i), the band given as --roi. Returns phase.csv's rows
    (gray, phase, std) and the truth: each level's fringe phase above level 0's."""
    from rig.cli import main
    folder = tmp_path / kind.name.replace(" ", "-")
    folder.mkdir()
    rows = ["gray,file,time_s"]
    for i, level in enumerate(kind.levels):
        electrons = fg.light_e(kind, level)
        for j in range(draws):
            name = f"l{i}-{j:02d}.npy"
            np.save(folder / name, fg.draw(kind, electrons, rng))
            rows.append(f"{40 * i},{name},{len(rows)}")
    (folder / "manifest.csv").write_text("\n".join(rows) + "\n")
    x0, x1, y0, y1 = kind.band
    out = tmp_path / "out"
    assert main(["analyze", str(folder), "--out", str(out), "--roi", f"{x0}:{x1},{y0}:{y1}", "--sign", "+1",
                 "--dark-adu", str(kind.sensor.offset_adu), "--bit-depth", "8"]) == 0
    table = np.loadtxt(out / "phase.csv", delimiter=",", skiprows=1, usecols=(0, 1, 2))
    truth = np.array([lv.phase_rad - kind.levels[0].phase_rad for lv in kind.levels])
    return table, truth


@pytest.mark.parametrize("name", ["clean", "low light", "chirped period", "gray-dependent amplitude", "ghost"])
def test_analyze_command_is_near_the_bound_with_honest_std(tmp_path, capsys, name):
    """The `fringecal analyze` command, default options, on framegen frames: each level's pixel-noise part of the
    stated std (analysis.json's budget) is within 1.25x of the bound for the mean of its frames, and, one common
    offset removed (the curve is relative to one level, whose own error moves all the others alike), the levels
    agree with the truth to a chi-square per degree of freedom between 0.05 and 3 with the whole stated std (the
    0.2nd and 99.9th percentiles of chi-square with 5 degrees of freedom over 5 are 0.05 and 4.1; achieved 0.31 to
    1.91 over seeds 11-13). The whole stated std is within 2x of the bound (achieved 1.17x to 1.74x): an
    over-stated std fails as an under-stated one does (six levels once stated 28 mrad with 0.2 mrad of noise, and
    5.6 rad where the amplitude changed with gray). With the ghost (6 % of the mirror beam's field, a cyclic error
    of +-62 mrad) the cyclic correction must make the levels honest too; its noise part may reach 2x the bound
    there (issue 12). Where the light changes from level to level the leak cannot be told from it, and the command
    says so on stderr."""
    kind = KINDS[name]
    draws = 16
    table, truth = analyze_framegen(tmp_path, kind, draws, np.random.default_rng(11))
    assert table.shape == (len(kind.levels), 3)
    err = np.angle(np.exp(1j * (table[:, 1] - truth)))
    std = table[:, 2]
    bounds = np.array([fg.frame_bound_rad(kind, lv) for lv in kind.levels]) / math.sqrt(draws)
    budget = json.loads((tmp_path / "out" / "analysis.json").read_text())["budget_per_level"]
    limit = 2.0 if name == "ghost" else 1.25  # issue 12: within 2x with a coherent ghost
    assert np.all(np.array([row["pixel_noise_rad"] for row in budget]) <= limit * bounds)
    assert np.all(std <= 2.0 * bounds)
    offset = np.average(err, weights=std**-2)
    assert 0.05 < np.sum(((err - offset) / std) ** 2) / (err.size - 1) < 3.0
    said = capsys.readouterr().err
    assert ("warning: cyclic error not assessed" in said) == (name == "gray-dependent amplitude")
