"""Lookup tables from phase curves: interpolation, window choice, reach, exports and the efficiency they give."""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
import scipy.io
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.interpolate import PchipInterpolator

from analysis.config import load_config, replace
from analysis.lut import build_lut, isotonic, monotone_cubic
from analysis.patterns import blazed_phase, phase_to_gray
from configs import DEFAULT_SIM
from rig.atomic import write_atomic
from rig.output.lut_files import FILE_NAMES, metadata, read_lut_folder, write_lut_folder
from simulators.response import PanelResponse

TWO_PI = 2 * math.pi


def true_curve(**changes):
    """Gray levels and the simulated panel's true phase (rad) for the demo config with ``changes``."""
    cfg = replace(load_config(DEFAULT_SIM), **changes) if changes else load_config(DEFAULT_SIM)
    resp = PanelResponse(cfg.simulator.response, cfg.modulator.bit_depth, cfg.laser.wavelength_nm,
                         cfg.geometry.incidence_deg)
    return resp.curve()


def local_half_step(phase, gray):
    """Half the larger phase step (rad) either side of each gray: the most a nearest-gray choice can miss by."""
    steps = np.abs(np.diff(phase))
    left = np.concatenate([[0.0], steps])[gray]
    right = np.concatenate([steps, [0.0]])[gray]
    return 0.5 * np.maximum(left, right)


@pytest.mark.parametrize("config", ["tweezers-1064.toml", "tweezers-780.toml"])
def test_table_linearises_the_curve_it_came_from_to_within_quantisation(config):
    """Applied to its own (noise-free) curve, every entry lands within half a local gray step of its target."""
    cfg = load_config(DEFAULT_SIM.parent / config)
    resp = PanelResponse(cfg.simulator.response, 8, cfg.laser.wavelength_nm, cfg.geometry.incidence_deg)
    gray, phase = resp.curve()
    lut = build_lut(gray, phase, bit_depth=8)
    # The table's first target sits exactly on a gray: entry 0 of a rising table, the last entry of a falling one
    # (its table is read backwards).
    ref = 0 if lut.direction == "rising" else -1
    achieved = phase[lut.gray] - phase[lut.gray[ref]]
    error = achieved - (lut.target_phase_rad - lut.target_phase_rad[ref])
    assert np.all(np.abs(error) <= local_half_step(phase, lut.gray) + 1e-6)
    # The report's figures are those of the table on this curve.
    assert lut.worst_quantisation_rad == pytest.approx(np.abs(error).max(), abs=1e-6)
    assert lut.rms_quantisation_rad == pytest.approx(np.sqrt(np.mean(error**2)), abs=1e-6)
    assert lut.rms_linearity_rad <= lut.rms_quantisation_rad + 1e-6
    # The simulated panel's phase falls with gray (sign convention: phase added to the field), so its table runs from
    # high grays to low ones.
    assert lut.direction == "falling" and np.all(np.diff(lut.gray) <= 0), "a falling curve gives a non-increasing table"


def test_noise_is_smoothed_not_copied_into_the_table():
    """With 20 mrad of noise per gray the table's true residual stays near the quantisation floor."""
    gray, phase = true_curve()
    noisy = phase + np.random.default_rng(3).normal(0.0, 0.02, phase.size)
    lut = build_lut(gray, noisy, np.full(phase.size, 0.02), bit_depth=8)
    clean = build_lut(gray, phase, bit_depth=8)
    error = phase[lut.gray] - phase[lut.gray[0]] - lut.target_phase_rad
    assert np.sqrt(np.mean((error - error.mean()) ** 2)) < 0.02
    assert np.sqrt(np.mean((error - error.mean()) ** 2)) < 1.5 * clean.rms_quantisation_rad
    assert lut.uncertainty_rad == pytest.approx(0.02)


def test_sparse_measurement_is_interpolated_between_measured_grays():
    """Every 8th gray measured: the table still picks unmeasured grays, within a step of the dense table's choice."""
    gray, phase = true_curve()
    sparse = build_lut(gray[::8], phase[::8], bit_depth=8)
    dense = build_lut(gray, phase, bit_depth=8)
    assert not set(sparse.gray.tolist()) <= set(gray[::8].tolist())
    assert np.abs(sparse.gray - dense.gray).max() <= 2


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0.1, 10.0), min_size=2, max_size=29), st.lists(st.floats(-5.0, 5.0), min_size=30,
                                                                          max_size=30))
def test_monotone_cubic_matches_scipy_pchip(gaps, values):
    """Same interpolant as scipy.interpolate.PchipInterpolator (SciPy's Fritsch-Butland PCHIP) on any samples."""
    x = np.concatenate([[0.0], np.cumsum(gaps)])
    y = np.asarray(values[: x.size])
    x_new = np.linspace(x[0], x[-1], 301)
    np.testing.assert_allclose(monotone_cubic(x, y, x_new), PchipInterpolator(x, y)(x_new), rtol=1e-9, atol=1e-9)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0.0, 3.0), min_size=3, max_size=40))
def test_monotone_cubic_never_folds_back_on_rising_data(rises):
    """Fritsch and Carlson (SIAM J. Numer. Anal. 17, 238, 1980): monotone data give a monotone interpolant."""
    y = np.concatenate([[0.0], np.cumsum(rises)])
    x = np.arange(y.size, dtype=float)
    fine = monotone_cubic(x, y, np.linspace(0, x[-1], 2001))
    assert np.all(np.diff(fine) >= -1e-12)


def test_isotonic_fit_is_monotone_and_keeps_the_weighted_mean():
    """Pool-adjacent-violators: a non-decreasing fit whose weighted sum equals the data's; rising data untouched."""
    rng = np.random.default_rng(5)
    y = np.linspace(0, 1, 50) + rng.normal(0, 0.1, 50)
    w = rng.uniform(0.5, 2.0, 50)
    fit = isotonic(y, w)
    assert np.all(np.diff(fit) >= 0)
    assert np.sum(w * fit) == pytest.approx(np.sum(w * y))
    rising = np.sort(y)
    np.testing.assert_array_equal(isotonic(rising, w), rising)


@pytest.mark.parametrize("fine_first", [True, False])
def test_panel_with_more_than_the_range_gets_the_finest_window(fine_first):
    """A 3 pi curve made of a fine 2 pi stretch (about 200 grays) and a coarse pi stretch (about 56 grays), joined
    smoothly: the table uses the fine stretch, wherever it lies, and says which grays it chose."""
    gray = np.arange(256)
    edge = 200 if fine_first else 56
    fine, coarse = TWO_PI / 200, math.pi / 56
    # phase steps switch between the two sizes over a few grays around the edge
    blend = 0.5 * (1 + np.tanh((gray[:-1] + 0.5 - edge) / 2.0))
    steps = fine + (coarse - fine) * blend if fine_first else coarse + (fine - coarse) * blend
    phase = np.concatenate([[0.0], np.cumsum(steps)])
    lut = build_lut(gray, phase, bit_depth=8)
    expected = (0, 199) if fine_first else (56, 255)
    assert abs(lut.window[0] - expected[0]) <= 3 and abs(lut.window[1] - expected[1]) <= 3
    assert lut.distinct_grays >= 190
    assert any(f"{lut.window[0]}..{lut.window[1]}" in note for note in lut.notes)
    assert lut.worst_quantisation_rad <= 0.6 * fine


def test_panel_with_less_than_two_pi_builds_for_its_reach_and_says_so():
    """A thin cell (1.6 um) reaches about 1.1 pi: the default table spans that reach and warns; an explicit 2 pi is
    honoured with a warning and its unreachable targets get the last gray."""
    gray, phase = true_curve(**{"simulator.response.cell_gap_um": 1.6})
    reach = abs(phase[-1] - phase[0])
    assert reach < TWO_PI
    lut = build_lut(gray, phase, bit_depth=8)
    assert lut.range_rad == pytest.approx(reach, abs=1e-6)
    step = reach / lut.levels
    assert abs(phase[lut.gray[-1]] - phase[lut.gray[0]]) >= reach - 2 * step, "the table spans the whole reach"
    assert len(lut.warnings) == 1 and "reaches only" in lut.warnings[0]
    ref = 0 if lut.direction == "rising" else -1  # the entry whose target sits exactly on a gray
    error = phase[lut.gray] - phase[lut.gray[ref]] - (lut.target_phase_rad - lut.target_phase_rad[ref])
    assert np.all(np.abs(error) <= local_half_step(phase, lut.gray) + 1e-6)

    forced = build_lut(gray, phase, bit_depth=8, range_rad=TWO_PI)
    assert forced.range_rad == TWO_PI and "exceeds" in forced.warnings[0]
    beyond = forced.target_phase_rad > reach
    # The targets past the reach get the gray at the end of it (255): the table's last entries when the curve rises,
    # its first ones when it falls (a falling table is read backwards).
    assert np.all((forced.gray if forced.direction == "rising" else forced.gray[::-1])[beyond] == 255)
    assert forced.worst_quantisation_rad == pytest.approx(forced.target_phase_rad[-1] - reach, abs=0.01)


# Swanson, "Binary Optics Technology: The Theory and Design of Multi-Level Diffractive Optical Elements", MIT Lincoln
# Laboratory TR-854 (1989), first-order efficiency sinc^2(1/N) of an N-level staircase (values recalled from memory,
# they agree with [sin(pi/N)/(pi/N)]^2 to the digits shown).
SWANSON_EFFICIENCY = {2: 0.405, 3: 0.684, 4: 0.811, 8: 0.950, 16: 0.987}


@pytest.mark.parametrize("levels", sorted(SWANSON_EFFICIENCY))
def test_quantised_blazed_grating_through_a_table_has_the_staircase_efficiency(levels):
    """A blazed grating drawn through an N-level table of the simulated panel, its field exp(i phase(gray)) Fourier
    transformed: the first order carries sinc^2(1/N) of the power (Swanson, MIT Lincoln Laboratory TR-854, 1989)."""
    gray, phase = true_curve()
    lut = build_lut(gray, phase, bit_depth=8, levels=levels)
    period = 96  # divisible by every N here, and long enough that pixel sampling shifts eta by < 0.04 %
    width = 10 * period
    pattern = phase_to_gray(blazed_phase(width, 4, period), 8, lut.gray, lut.range_rad)
    spectrum = np.fft.fft(np.exp(1j * phase[pattern[0]]))
    power = np.abs(spectrum) ** 2
    efficiency = power[width // period] / power.sum()
    assert efficiency == pytest.approx(SWANSON_EFFICIENCY[levels], abs=0.003)


def test_every_export_reads_back_the_same_table(tmp_path):
    """lut.mat through scipy.io.loadmat (MATLAB's format as SciPy reads it), and the csv, json, npy and txt files."""
    gray, phase = true_curve()
    lut = build_lut(gray, phase, np.full(gray.size, 0.01), bit_depth=8)
    meta = metadata(lut, "phase.csv", "2024-01-01T00:00:00+00:00", 1064.0)
    written = write_lut_folder(tmp_path, lut, meta)
    assert sorted(p.name for p in written) == sorted(FILE_NAMES)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(FILE_NAMES), "no temporary files left behind"

    mat = scipy.io.loadmat(tmp_path / "lut.mat")
    np.testing.assert_array_equal(mat["gray"].ravel(), lut.gray)
    np.testing.assert_allclose(mat["target_phase_rad"].ravel(), lut.target_phase_rad)
    assert float(mat["range_rad"].squeeze()) == pytest.approx(TWO_PI)
    assert float(mat["wavelength_nm"].squeeze()) == 1064.0 and int(mat["bit_depth"].squeeze()) == 8

    np.testing.assert_array_equal(np.load(tmp_path / "lut.npy"), lut.gray)
    txt = np.loadtxt(tmp_path / "lut.txt", dtype=int)
    np.testing.assert_array_equal(txt, lut.gray)
    with (tmp_path / "lut.csv").open() as fh:
        rows = list(csv.DictReader(fh))
    assert [int(r["index"]) for r in rows] == list(range(lut.levels))
    np.testing.assert_array_equal([int(r["gray"]) for r in rows], lut.gray)
    np.testing.assert_allclose([float(r["target_phase_rad"]) for r in rows], lut.target_phase_rad, atol=1e-9)

    doc = json.loads((tmp_path / "lut.json").read_text())
    assert doc["wavelength_nm"] == 1064.0 and doc["source_file"] == "phase.csv"
    assert doc["uncertainty_rad"] == pytest.approx(0.01) and doc["window_gray"] == list(lut.window)
    stored = read_lut_folder(tmp_path)
    np.testing.assert_array_equal(stored.gray, lut.gray)
    assert stored.range_rad == lut.range_rad and stored.bit_depth == 8


def test_a_table_short_of_two_pi_carries_its_range_in_its_file_names_and_header(tmp_path):
    """A list of grays for 1.6 pi read as a 2 pi table is wrong everywhere: the bare files say their range in their
    names, lut.txt in a '#' line (numpy.loadtxt skips it), lut.json in its fields; a full table written later into
    the same folder removes the short one's files."""
    gray, phase = true_curve()
    short = phase * (1.6 * np.pi / phase[-1])
    lut = build_lut(gray, short, np.full(gray.size, 0.01), bit_depth=8)
    assert lut.short_of_two_pi
    write_lut_folder(tmp_path, lut, metadata(lut, "phase.csv", "2024-01-01T00:00:00+00:00", 1064.0))
    label = f"{1.6:.2f}pi"
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        ["lut.json"] + [f"lut-range-{label}.{ext}" for ext in ("csv", "npy", "mat", "txt")])
    text = (tmp_path / f"lut-range-{label}.txt").read_text()
    assert text.startswith("# ") and "SHORT OF 2 pi" in text.splitlines()[0]
    np.testing.assert_array_equal(np.loadtxt(tmp_path / f"lut-range-{label}.txt", dtype=int), lut.gray)
    doc = json.loads((tmp_path / "lut.json").read_text())
    assert doc["short_of_two_pi"] and doc["range_label"] == label and doc["files"][2] == f"lut-range-{label}.npy"
    full = build_lut(gray, phase, np.full(gray.size, 0.01), bit_depth=8)
    write_lut_folder(tmp_path, full, metadata(full, "phase.csv", "2024-01-01T00:00:00+00:00", 1064.0))
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(FILE_NAMES)


def test_atomic_write_keeps_the_old_file_when_the_rename_fails(tmp_path, monkeypatch):
    """A failed write leaves the previous content and no temporary file."""
    target = tmp_path / "lut.txt"
    write_atomic(target, b"old\n")
    write_atomic(target, b"new\n")
    assert target.read_bytes() == b"new\n"

    def broken(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr("rig.atomic.os.replace", broken)
    with pytest.raises(OSError):
        write_atomic(target, b"half")
    assert target.read_bytes() == b"new\n"
    assert [p.name for p in tmp_path.iterdir()] == ["lut.txt"]


@pytest.mark.parametrize("gray, phase, field", [
    ([0], [0.0], "gray"),
    ([0, 5, 3], [0.0, 1.0, 2.0], "gray"),
    ([0, 300], [0.0, 1.0], "gray"),
    ([0, 1, 2], [1.0, 0.5, 1.0], "phase_rad"),
    ([0, 1], [0.0, math.nan], "phase_rad"),
])
def test_unusable_curves_are_refused_naming_the_field(gray, phase, field):
    """A table needs two or more ascending, in-range grays and a finite phase that rises or falls."""
    with pytest.raises(ValueError, match=field):
        build_lut(np.array(gray), np.array(phase), bit_depth=8)


def test_a_curve_against_the_stated_direction_is_refused():
    """A falling curve stated to rise (or an unknown direction word) is refused naming the field."""
    with pytest.raises(ValueError, match="phase_rad: expected a rising curve"):
        build_lut(np.array([0, 1, 2]), np.array([1.0, 0.5, 0.0]), bit_depth=8, direction="rising")
    with pytest.raises(ValueError, match="direction"):
        build_lut(np.array([0, 1, 2]), np.array([0.0, 0.5, 1.0]), bit_depth=8, direction="up")


def s_curve(g, reach_rad):
    """A smooth S-shaped response (rad) from 0 to ``reach_rad`` over grays 0..255."""
    x = np.asarray(g, float) / 255
    return reach_rad * (3 * x**2 - 2 * x**3) * 0.7 + reach_rad * 0.3 * x


@pytest.mark.parametrize("direction", ["rising", "falling"])
@pytest.mark.parametrize("reach_pi", [2.3, 1.4])
def test_table_makes_the_wanted_ramp_whichever_way_the_curve_runs(direction, reach_pi):
    """A ramp of wanted phase psi(x) = 2 pi x / 37 drawn through the table: the panel's phase at the chosen grays
    equals psi + const (mod 2 pi) within half a table step (phase_to_gray's floor) plus half a local gray step,
    for a rising and a falling curve (sign convention: a table maps psi to the gray with phi = psi + const). A panel
    short of 2 pi does so over its range, and its table says it is short."""
    gray = np.arange(256)
    s = 1 if direction == "rising" else -1
    phase = s * s_curve(gray, reach_pi * math.pi)
    lut = build_lut(gray, phase, np.full(256, 1e-3), bit_depth=8)
    assert lut.direction == direction
    x = np.arange(2000)
    wanted = 2 * np.pi * x / 37
    if reach_pi < 2:
        assert lut.short_of_two_pi and lut.range_label == "1.40pi"
        assert "SHORT OF 2 pi" in lut.header_line() and direction in lut.header_line()
        keep = np.mod(wanted, 2 * np.pi) < lut.range_rad * (1 - 1 / lut.levels)
        x, wanted = x[keep], wanted[keep]
    else:
        assert not lut.short_of_two_pi and lut.range_label == "2pi" and "(mod 2 pi)" in lut.header_line()
    made = phase[phase_to_gray(wanted, 8, lut.gray, lut.range_rad)]
    diff = np.angle(np.exp(1j * (made - wanted)))
    diff = np.angle(np.exp(1j * (diff - np.angle(np.mean(np.exp(1j * diff))))))
    local = local_half_step(s * phase, phase_to_gray(wanted, 8, lut.gray, lut.range_rad))
    assert np.all(np.abs(diff) <= 0.5 * lut.range_rad / lut.levels + local + 1e-3)
    # Without the direction the table would run the wrong way: the same check fails by radians.
    if direction == "falling":
        wrong = phase[phase_to_gray(wanted, 8, lut.gray[::-1], lut.range_rad)]
        assert np.abs(np.angle(np.exp(1j * (wrong - wanted - (made - wanted).mean())))).max() > 1


def test_a_dip_is_recorded_and_the_stated_error_follows_the_measured_curve():
    """A curve with a 0.3 rad dip (falling from gray 120 to 135), measured at 2 mrad: the table records one dip,
    warns of it, and its worst stated error is the measured curve's deviation (near the true worst error of the
    table on that curve within 20 %, over 5 noise draws), not only the quantisation on the smoothed curve (which
    understates it by a third or more in some draws: 45 against 77 mrad)."""
    gray = np.arange(256)
    # The S-curve rises about 0.57 rad over grays 120..135; a triangle 0.87 rad deep there makes it fall 0.3 rad.
    phase = s_curve(gray, 2.3 * math.pi) - 0.87 * np.clip(1 - np.abs(gray - 135) / 15, 0, 1)
    understated = 0
    for seed in range(5):
        noisy = phase + np.random.default_rng(seed).normal(0, 0.002, 256)
        lut = build_lut(gray, noisy, np.full(256, 0.002), bit_depth=8)
        assert len(lut.dips) == 1 and 115 <= lut.dips[0].from_gray <= 125 and 130 <= lut.dips[0].to_gray <= 140
        assert lut.dips[0].depth_rad == pytest.approx(0.3, abs=0.02)
        assert any("falls against" in w for w in lut.warnings)
        true_error = phase[lut.gray] - phase[lut.gray[0]] - lut.target_phase_rad
        true_worst = np.abs(true_error - true_error.mean()).max()
        assert lut.worst_error_rad == pytest.approx(true_worst, rel=0.2)
        understated += lut.worst_quantisation_rad < 0.75 * true_worst
    assert understated >= 2


def test_lut_metadata_fields_are_json_ready():
    """The fields lut.json takes from a table survive json: direction, convention, range label, header, dips."""
    gray = np.arange(256)
    lut = build_lut(gray, -s_curve(gray, 1.4 * math.pi), np.full(256, 1e-3), bit_depth=8)
    doc = json.loads(json.dumps(lut.metadata_fields()))
    assert doc["direction"] == "falling" and doc["short_of_two_pi"] and doc["range_label"] == "1.40pi"
    assert "exp(+i phi" in doc["phase_convention"] and doc["dips"] == []
