"""``fringecal analyze`` end to end on simulated and hand-made folders, and its one-line errors."""

import csv
import json

import cv2
import numpy as np
import pytest

from analysis.config import replace
from analysis.fringe import REANALYSIS_METHOD
from conftest import split_for
from rig.cli import main
from synthetic import fringes


@pytest.fixture(scope="module")
def sim_folder(tmp_path_factory, small_cfg):
    """A simulated sweep (every 8th gray, reference gray 0 revisited every 8 levels) as 16-bit PNGs + manifest."""
    from simulators.bench import Bench
    from simulators.devices import SimCamera, SimScreen

    cfg = replace(small_cfg, **{"pattern.grating_high": 80})
    folder = tmp_path_factory.mktemp("sweep")
    bench = Bench(cfg)
    screen, cam = SimScreen(bench), SimCamera(bench)
    rows = []
    for i, g in enumerate(range(0, 256, 8)):
        for gray in ([0] if i % 8 == 0 and i else []) + [g]:
            screen.show(split_for(cfg, gray))
            bench.clock.sleep(0.05)
            frame = cam.grab()
            name = f"img{len(rows):03d}.png"
            cv2.imwrite(str(folder / name), frame.image)
            rows.append((gray, name, frame.timestamp_s))
    with (folder / "manifest.csv").open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(["gray", "file", "time_s"])
        writer.writerows(rows)
    return folder, bench.true_curve()[1]


def read_csv(path):
    with path.open() as fh:
        lines = list(csv.reader(fh))
    return lines[0], np.array(lines[1:], dtype=float)


def test_simulated_folder_end_to_end(sim_folder, tmp_path, capsys):
    """The three files are written; the curve matches the simulator's truth within 0.03 rad (offset-free) and
    the summary printed with --json is the one in analysis.json. A bare folder carries no sign probe, so the
    curve is made to rise; the simulated panel's truth falls, so it is compared flipped."""
    folder, truth = sim_folder
    out = tmp_path / "out"
    assert main(["analyze", str(folder), "--out", str(out), "--json", "--smooth", "--dark-adu", "40"]) == 0
    header, data = read_csv(out / "phase.csv")
    assert header == ["gray", "phase_rad", "phase_std_rad", "contrast", "n_frames"]
    grays = data[:, 0].astype(int)
    assert np.all(np.diff(grays) > 0) and grays[0] == 0
    err = data[:, 1] + truth[grays]
    assert np.sqrt(np.mean((err - err.mean()) ** 2)) < 0.03
    assert data[0, 4] == 4  # gray 0: the first frame and three drift references
    summary = json.loads((out / "analysis.json").read_text())
    assert json.loads(capsys.readouterr().out) == summary
    assert summary["method"] == REANALYSIS_METHOD and summary["drift"]["reference_visits"] == 4
    assert summary["carrier"]["period_px"] == pytest.approx(6 * 8.5 / 4.8, rel=0.01)
    assert summary["range_rad"] == pytest.approx(np.ptp(truth[grays]), abs=0.05)
    assert (out / "phase.png").stat().st_size > 1000


def test_methods_agree_and_user_roi_is_used(sim_folder, tmp_path):
    """With a given ROI every estimator gives the same curve within 0.05 rad, and the ROI is reported."""
    folder, _ = sim_folder
    curves = {}
    for method in ("carrier-lsq", "fourier", "cosine-fit"):
        out = tmp_path / method
        assert main(["analyze", str(folder), "--out", str(out), "--method", method, "--roi", "60:190,20:180"]) == 0
        curves[method] = read_csv(out / "phase.csv")[1][:, 1]
        roi = json.loads((out / "analysis.json").read_text())["roi"]
        assert (roi["x0"], roi["x1"], roi["y0"], roi["y1"], roi["automatic"]) == (60, 190, 20, 180, False)
    assert np.max(np.abs(curves["fourier"] - curves["carrier-lsq"])) < 0.05
    assert np.max(np.abs(curves["cosine-fit"] - curves["carrier-lsq"])) < 0.05


def hand_made(folder, grays, phases, names=None, manifest=True, dtype=np.uint8, **kw):
    folder.mkdir(exist_ok=True)
    names = names or [f"shot_{i}.png" for i in range(len(grays))]
    for name, p in zip(names, phases):
        img = np.clip(fringes(p, (64, 120), amplitude=80.0, background=120.0, **kw), 0, np.iinfo(dtype).max)
        cv2.imwrite(str(folder / name), img.astype(dtype))
    if manifest:
        (folder / "manifest.csv").write_text("gray,file\n" + "".join(f"{g},{n}\n" for g, n in zip(grays, names)))
    return folder


def test_hand_made_manifest_folder(tmp_path, capsys):
    """Eight-bit images listed in a manifest: phase steps written into them come back (sign auto: rising)."""
    grays = [0, 32, 64, 96, 128, 160]
    steps = [0.0, 0.5, 1.1, 1.9, 2.6, 3.4]
    folder = hand_made(tmp_path / "hand", grays, [-s for s in steps])
    assert main(["analyze", str(folder), "--out", str(tmp_path / "o")]) == 0
    _, data = read_csv(tmp_path / "o" / "phase.csv")
    np.testing.assert_allclose(data[:, 1], steps, atol=0.01)
    assert "no drift correction" in capsys.readouterr().err


def test_names_carry_the_gray(tmp_path):
    """Without a manifest, g017.png / 017.tif style names give the gray; a custom pattern works too."""
    folder = hand_made(tmp_path / "named", [0, 17, 40], [0.0, -0.4, -0.9], names=["g000.png", "g017.png", "040.tif"],
                       manifest=False, dtype=np.uint16)
    assert main(["analyze", str(folder), "--out", str(tmp_path / "o")]) == 0
    _, data = read_csv(tmp_path / "o" / "phase.csv")
    assert list(data[:, 0].astype(int)) == [0, 17, 40]
    np.testing.assert_allclose(data[:, 1], [0.0, 0.4, 0.9], atol=0.01)
    other = hand_made(tmp_path / "custom", [0, 9], [0.0, -0.3], names=["lvl-0-a.png", "lvl-9-a.png"], manifest=False)
    assert main(["analyze", str(other), "--out", str(tmp_path / "o2"), "--name-pattern", r"lvl-(\d+)-a"]) == 0


def test_saturated_frames_are_a_warning_listing_grays(tmp_path, capsys):
    """Frames clipped at 255 in an 8-bit file: analysis goes on and the warning names the grays."""
    folder = hand_made(tmp_path / "sat", [0, 50, 100], [0.0, -0.3, -0.6])
    img = cv2.imread(str(folder / "shot_1.png"), cv2.IMREAD_UNCHANGED)
    img[30, 40:44] = 255
    cv2.imwrite(str(folder / "shot_1.png"), img)
    assert main(["analyze", str(folder), "--out", str(tmp_path / "o")]) == 0
    err = capsys.readouterr().err
    assert "saturated frames" in err and "grays 50;" in err
    assert any("saturated" in w for w in json.loads((tmp_path / "o" / "analysis.json").read_text())["warnings"])


def one_line_error(capsys, argv, match):
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "Traceback" not in err
    assert err.startswith("fringecal: error: ")
    assert match in err, err


def test_bad_input_is_one_line_and_exit_2(tmp_path, capsys):
    """Empty folder, unreadable and mixed-size images, a manifest without gray/file, grays outside the bit depth,
    a missing reference gray, no fringes, a bad ROI: one line on stderr, exit code 2."""
    out = str(tmp_path / "o")
    empty = tmp_path / "empty"
    empty.mkdir()
    one_line_error(capsys, ["analyze", str(empty), "--out", out], "no manifest.csv and no image named by gray")

    broken = hand_made(tmp_path / "broken", [0, 10], [0.0, 0.2])
    (broken / "shot_1.png").write_bytes(b"not an image")
    one_line_error(capsys, ["analyze", str(broken), "--out", out], "shot_1.png: not a readable PNG or TIFF image")

    mixed = hand_made(tmp_path / "mixed", [0, 10], [0.0, 0.2])
    cv2.imwrite(str(mixed / "shot_1.png"), np.zeros((32, 32), np.uint8))
    one_line_error(capsys, ["analyze", str(mixed), "--out", out], "expected a 120x64 px image like the others")

    nocol = hand_made(tmp_path / "nocol", [0, 10], [0.0, 0.2])
    (nocol / "manifest.csv").write_text("level,image\n0,shot_0.png\n")
    one_line_error(capsys, ["analyze", str(nocol), "--out", out], "expected columns gray,file[,time_s], missing gray,file")

    high = hand_made(tmp_path / "high", [0, 300], [0.0, 0.2])
    one_line_error(capsys, ["analyze", str(high), "--out", out], "gray 300: expected gray levels in [0, 255]")
    assert main(["analyze", str(high), "--out", out, "--bit-depth", "10"]) == 0
    capsys.readouterr()

    noref = hand_made(tmp_path / "noref", [5, 10], [0.0, 0.2])
    one_line_error(capsys, ["analyze", str(noref), "--out", out], "--reference-gray: no image at gray 0")

    flat = tmp_path / "flat"
    flat.mkdir()
    rng = np.random.default_rng(0)
    for g in (0, 10):
        cv2.imwrite(str(flat / f"g{g:03d}.png"), (120 + rng.normal(0, 2, (64, 120))).astype(np.uint8))
    one_line_error(capsys, ["analyze", str(flat), "--out", out], "below 0.05 in the brightest region; check polarisation")

    good = hand_made(tmp_path / "good", [0, 10], [0.0, 0.2])
    one_line_error(capsys, ["analyze", str(good), "--out", out, "--roi", "10:500,0:64"], "--roi")
    one_line_error(capsys, ["analyze", str(good), "--out", out, "--roi", "a:b"], "--roi: expected x0:x1,y0:y1")


@pytest.mark.parametrize("direction, turn", [("falling", 1.0), ("rising", -1.0)])
def test_direction_sets_which_way_the_curve_runs(sim_folder, tmp_path, direction, turn):
    """--direction: the simulated panel's delay falls with gray (the project's sign convention, README), so told
    "falling" the curve matches the truth as it is; told "rising" it is its mirror image. Either is recorded."""
    folder, truth = sim_folder
    out = tmp_path / direction
    assert main(["analyze", str(folder), "--out", str(out), "--dark-adu", "40", "--direction", direction]) == 0
    _, data = read_csv(out / "phase.csv")
    err = data[:, 1] - turn * truth[data[:, 0].astype(int)]
    assert np.sqrt(np.mean((err - err.mean()) ** 2)) < 0.03
    assert json.loads((out / "analysis.json").read_text())["direction"] == direction
