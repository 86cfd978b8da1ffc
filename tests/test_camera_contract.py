"""One contract every camera backend passes (simulated, opencv on a recording written by cv2, replay of a folder,
a lab's own module:Class, and genicam on Aravis's simulated camera in process and over GigE Vision on loopback),
plus each backend's own cases and its one-line errors (genicam's in tests/test_genicam.py)."""

import csv
import time

import cv2
import numpy as np
import pytest

from analysis.config import replace
from analysis.frame import Frame
from analysis.patterns import Rect
from rig.cli import main
from rig.devices.cameras import OpenCVCamera, ReplayCamera, UnsupportedSetting, open_camera
from rig.devices.protocols import Camera
from rig.errors import UsageError
from simulators.bench import Bench
from simulators.devices import SimCamera

W, H = 80, 60


def frames_12bit(n, seed=0):
    rng = np.random.default_rng(seed)
    return [rng.integers(0, 4096, (H, W)).astype(np.uint16) for _ in range(n)]


def settings(cfg, **changes):
    base = {"camera.width_px": W, "camera.height_px": H, "camera.bit_depth": 12}
    base.update({f"camera.{k}": v for k, v in changes.items()})
    return replace(cfg, **base).camera


@pytest.fixture
def image_sequence(tmp_path):
    images = frames_12bit(5)
    for i, img in enumerate(images):
        assert cv2.imwrite(str(tmp_path / f"cam{i:03d}.png"), img)
    return tmp_path / "cam%03d.png", images


@pytest.fixture
def replay_folder(tmp_path):
    folder = tmp_path / "replay"
    folder.mkdir()
    images = frames_12bit(4, seed=1)
    with open(folder / "manifest.csv", "w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(["gray", "file"])
        for i, (gray, img) in enumerate(zip([0, 64, 128, 0], images)):
            cv2.imwrite(str(folder / f"f{i}.png"), img)
            writer.writerow([gray, f"f{i}.png"])
    return folder, images


@pytest.fixture(params=["sim", "opencv", "replay", "module", "genicam-in-process", "genicam-gige-loopback"])
def camera(request, small_cfg, image_sequence, replay_folder):
    kind = request.param
    if kind == "sim":
        cam = SimCamera(Bench(small_cfg))
    elif kind == "opencv":
        cam = open_camera(settings(small_cfg, backend="opencv", device=str(image_sequence[0])))
    elif kind == "replay":
        cam = open_camera(settings(small_cfg, backend="replay", device=str(replay_folder[0])))
    elif kind == "module":
        cam = open_camera(settings(small_cfg, backend="toy_camera:ToyCamera"))
    else:
        from genicam_cams import FAKE_ID, require_aravis
        require_aravis()
        device = FAKE_ID if kind == "genicam-in-process" else request.getfixturevalue("fake_gige").ensure_running()
        cam = open_camera(settings(small_cfg, backend="genicam", device=device, bit_depth=16))
    yield cam
    cam.close()


# --- the contract ---------------------------------------------------------------------------------------------
def test_satisfies_the_protocol_and_delivers_frames_with_metadata(camera):
    assert isinstance(camera, Camera)
    frames = [camera.grab(timeout_s=2.0) for _ in range(3)]
    for f in frames:
        assert isinstance(f, Frame) and f.complete
        assert f.image.dtype == np.uint16 and f.image.shape == (camera.height_px, camera.width_px)
        assert f.bit_depth == camera.bit_depth and f.image.max() <= f.full_scale
        assert f.exposure_s == camera.exposure_s and f.gain_db == camera.gain_db
    assert [f.sequence for f in frames] == sorted({f.sequence for f in frames})
    assert all(b.timestamp_s >= a.timestamp_s for a, b in zip(frames, frames[1:]))


def test_close_twice_then_grab_is_a_connection_error(camera):
    camera.close()
    camera.close()
    with pytest.raises(ConnectionError):
        camera.grab(timeout_s=1.0)


def test_exposure_is_taken_or_refused_by_name(camera):
    if isinstance(camera, OpenCVCamera):  # a recording has no exposure to set
        with pytest.raises(UnsupportedSetting, match="camera.exposure_s"):
            camera.exposure_s = 0.0021
        return
    camera.exposure_s = 0.0021
    assert camera.exposure_s == pytest.approx(0.0021, abs=1e-6)
    assert camera.grab(timeout_s=2.0).exposure_s == camera.exposure_s
    with pytest.raises(ValueError, match="exposure_s"):
        camera.exposure_s = 0.0


# --- opencv -----------------------------------------------------------------------------------------------------
def test_opencv_image_sequence_keeps_16_bit_counts_in_order(small_cfg, image_sequence):
    pattern, images = image_sequence
    cam = OpenCVCamera(settings(small_cfg, backend="opencv", device=str(pattern)))
    try:
        got = [cam.grab(timeout_s=2.0) for _ in images]
        assert all(np.array_equal(f.image, img) for f, img in zip(got, images))
        assert not cam.exposure_timestamps
        before = time.monotonic()
        with pytest.raises(ConnectionError, match="no more frames"):
            cam.grab(timeout_s=2.0)
        assert time.monotonic() - before < 2.0
    finally:
        cam.close()


def test_opencv_video_written_by_cv2_comes_back_as_gray(small_cfg, tmp_path):
    path = tmp_path / "clip.avi"
    rng = np.random.default_rng(3)
    images = [rng.integers(0, 256, (H, W)).astype(np.uint8) for _ in range(4)]
    writer = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*"FFV1"), 25, (W, H), isColor=False)
    for img in images:
        writer.write(img)
    writer.release()
    cam = OpenCVCamera(settings(small_cfg, backend="opencv", device=str(path), bit_depth=8))
    try:
        got = [cam.grab(timeout_s=2.0).image for _ in images]
        assert all(np.array_equal(g, img) for g, img in zip(got, images))  # FFV1 is lossless
    finally:
        cam.close()


def test_opencv_refuses_exposure_it_cannot_set(small_cfg, image_sequence):
    cam = OpenCVCamera(settings(small_cfg, backend="opencv", device=str(image_sequence[0])))
    try:
        with pytest.raises(UnsupportedSetting, match=r"camera.exposure_s: .*does not let OpenCV set the exposure"):
            cam.exposure_s = 0.004
        with pytest.raises(UnsupportedSetting, match="camera.gain_db"):
            cam.gain_db = 6.0
    finally:
        cam.close()


def test_opencv_grab_times_out_on_a_slow_driver(small_cfg, image_sequence):
    cam = OpenCVCamera(settings(small_cfg, backend="opencv", device=str(image_sequence[0])))
    try:
        cam.grab(timeout_s=1.0)  # the probe frame
        real_read = cam._read_now
        release = __import__("threading").Event()

        def stuck_read():
            release.wait(5.0)
            return real_read()

        cam._read_now = stuck_read
        with pytest.raises(TimeoutError, match="no frame within 0.05 s"):
            cam.grab(timeout_s=0.05)
        release.set()
        assert cam.grab(timeout_s=2.0).sequence == 1  # the late frame is not lost
    finally:
        cam.close()


@pytest.mark.parametrize("changes, fragment", [
    ({"device": "/nonexistent/cam%03d.png"}, "camera.device: opencv cannot open"),
    ({"device": "57"}, "camera.device: opencv cannot open '57'"),
    ({"width_px": 64}, "camera.width_px/height_px: configured 64x60"),
])
def test_opencv_open_errors_name_the_setting(small_cfg, image_sequence, changes, fragment):
    opts = {"backend": "opencv", "device": str(image_sequence[0]), **changes}
    with pytest.raises(UsageError) as err:
        OpenCVCamera(settings(small_cfg, **opts))
    assert fragment in str(err.value) and "\n" not in str(err.value)


# --- replay and module:Class --------------------------------------------------------------------------------------
def test_replay_serves_the_manifest_in_order_and_starts_again(small_cfg, replay_folder):
    folder, images = replay_folder
    cam = ReplayCamera(settings(small_cfg, backend="replay", device=str(folder)))
    got = [cam.grab().image for _ in range(6)]
    assert all(np.array_equal(g, images[i % 4]) for i, g in enumerate(got))
    start = cam.clock.now()
    assert cam.grab().timestamp_s - cam.exposure_s / 2 >= start  # exposed after the call: never stale


def test_replay_roi_crops(small_cfg, replay_folder):
    folder, images = replay_folder
    cam = ReplayCamera(settings(small_cfg, backend="replay", device=str(folder)))
    cam.roi = Rect(10, 30, 5, 25)
    assert np.array_equal(cam.grab().image, images[0][5:25, 10:30])
    with pytest.raises(ValueError, match="outside"):
        cam.roi = Rect(0, 0, W + 1, H)


@pytest.mark.parametrize("backend, device, fragment", [
    ("replay", "", "camera.device: the replay camera needs the folder"),
    ("replay", "/nonexistent/folder", "camera.device: replay:"),
    ("no_such_module_x:Cam", "", "camera.backend: cannot import module 'no_such_module_x'"),
    ("toy_camera:Missing", "", "camera.backend: module 'toy_camera' has no class 'Missing'"),
    ("toy_camera:NotACamera", "", "is not a camera (missing width_px"),
])
def test_backend_errors_name_the_setting(small_cfg, backend, device, fragment):
    with pytest.raises(UsageError, match=fragment.replace("(", r"\(")):
        open_camera(settings(small_cfg, backend=backend, device=device))


def test_module_backend_is_used_as_given(small_cfg):
    cam = open_camera(settings(small_cfg, backend="toy_camera:ToyCamera"))
    cam.exposure_s = 0.00123456
    assert cam.exposure_s == 0.001235
    frame = cam.grab(timeout_s=1.0)
    assert frame.image[:, W // 2].min() == 2470
    cam.close()
    assert cam.released
