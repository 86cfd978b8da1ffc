"""The genicam camera backend against Aravis's own simulated cameras, in process and over GigE Vision on loopback:
settings read back, pixel formats and bit depth, a ROI set on the camera, timeouts, a vanished camera, finding and
listing cameras. (The shared camera contract runs on both in tests/test_camera_contract.py.)"""

import os
import time

import numpy as np
import pytest
from genicam_cams import FAKE_ID, GV_SERIAL, genicam_settings, require_aravis

from rig.errors import UsageError


@pytest.fixture(params=["in-process", "gige-loopback"])
def device(request, fake_gige):
    """The device string of one of Aravis's simulated cameras."""
    require_aravis()
    if request.param == "in-process":
        return FAKE_ID
    return fake_gige.ensure_running()


def open_genicam(cfg, device, **changes):
    from rig.devices.genicam import GenicamCamera
    return GenicamCamera(genicam_settings(cfg, device, **changes))


def test_genicam_exposure_and_gain_are_read_back_from_the_camera(small_cfg, device):
    cam = open_genicam(small_cfg, device)
    try:
        cam.exposure_s = 0.00375
        cam.gain_db = 4.0
        # read back through the features themselves, not the values the backend remembers
        assert cam._cam.get_exposure_time() == pytest.approx(3750.0, abs=1.0)
        assert cam._cam.get_gain() == pytest.approx(4.0)
        assert "exposure 3750.0 us" in cam.describe_settings()
        frame = cam.grab(timeout_s=2.0)
        assert frame.exposure_s == pytest.approx(0.00375, abs=1e-6) and frame.gain_db == 4.0
        # the simulated camera's gain is GainRaw, integer steps: what the device took is reported, not what was asked
        cam.gain_db = 2.6
        assert cam.gain_db == cam._cam.get_gain() and cam.gain_unit == "raw steps (GainRaw)"
        with pytest.raises(ValueError, match="exposure_s expected 1e-05 to 10 s for this camera"):
            cam.exposure_s = 5e-6
        with pytest.raises(ValueError, match="gain_db expected 0 to 10"):
            cam.gain_db = 12.0
    finally:
        cam.close()


@pytest.mark.parametrize("bits, fmt", [(8, "Mono8"), (16, "Mono16")])
def test_genicam_mono8_and_mono16_frames_carry_their_bit_depth(small_cfg, device, bits, fmt):
    cam = open_genicam(small_cfg, device, bit_depth=bits)
    try:
        assert f", {fmt}," in cam.describe_settings()
        raw, _ = cam._do_grab(2.0)
        assert raw.dtype == (np.uint8 if bits == 8 else np.dtype("<u2")) and raw.shape == (60, 80)
        frames = [cam.grab(timeout_s=2.0) for _ in range(3)]
        for f in frames:
            assert f.bit_depth == bits and f.full_scale == 2**bits - 1
            assert f.image.dtype == np.uint16 and f.image.max() <= f.full_scale
        if bits == 16:  # counts beyond 8 bits: the 16-bit format is not 8-bit data in a wider container
            assert max(int(f.image.max()) for f in frames) > 255
    finally:
        cam.close()


def test_genicam_bit_depth_the_camera_lacks_is_refused_naming_the_setting(small_cfg):
    require_aravis()
    with pytest.raises(UsageError, match=r"camera.bit_depth: .*offers Mono8, Mono16 .*got 12 bits"):
        open_genicam(small_cfg, FAKE_ID, bit_depth=12)


def test_genicam_grab_times_out_on_a_slow_camera(small_cfg):
    """In process, free running at 2 frames/s: a 0.1 s wait ends in TimeoutError, the camera still answering."""
    require_aravis()
    cam = open_genicam(small_cfg, FAKE_ID)
    try:
        cam._cam.set_frame_rate(2.0)
        # frames queued or scheduled at the old 25 frames/s come first; a 2 frames/s frame is 0.5 s after another
        previous = cam.grab(timeout_s=2.0).timestamp_s
        while (frame := cam.grab(timeout_s=2.0)).timestamp_s - previous < 0.4:
            previous = frame.timestamp_s
        before = time.monotonic()
        with pytest.raises(TimeoutError, match="no frame within 0.1 s"):
            cam.grab(timeout_s=0.1)
        assert 0.09 < time.monotonic() - before < 0.5
        assert cam.grab(timeout_s=2.0).sequence == frame.sequence + 1  # the camera goes on
    finally:
        cam.close()


def test_genicam_software_trigger_gives_one_frame_per_grab_over_gige(small_cfg, fake_gige):
    """Over GigE Vision the simulated camera honours TriggerMode=On, TriggerSource=Software: each grab triggers one
    exposure, which starts after the call, and no other frame is made."""
    address = fake_gige.ensure_running()
    cam = open_genicam(small_cfg, address, trigger="software")
    try:
        for _ in range(3):
            time.sleep(0.1)  # a free-running camera would have made two or three frames meanwhile
            before = time.monotonic()
            frame = cam.grab(timeout_s=2.0)
            assert frame.timestamp_s - frame.exposure_s / 2 >= before - 0.005
            assert frame.timestamp_s <= time.monotonic()
        assert cam._stream.timeout_pop_buffer(300_000) is None  # nothing untriggered
        assert [cam.grab(timeout_s=2.0).sequence for _ in range(2)] == [3, 4]
    finally:
        cam.close()


def test_genicam_timestamps_map_onto_the_monotonic_clock(small_cfg, device):
    """Frames stamped by the camera land on time.monotonic within a frame period of their arrival, in order."""
    cam = open_genicam(small_cfg, device)
    try:
        stamps, arrivals = [], []
        for _ in range(6):
            stamps.append(cam.grab(timeout_s=2.0).timestamp_s)
            arrivals.append(time.monotonic())
        lag = np.array(arrivals) - np.array(stamps)
        assert np.all(np.diff(stamps) > 0)
        assert np.all(lag >= 0) and np.all(lag < 0.2)  # 25 frames/s: queued frames are at most a few periods old
    finally:
        cam.close()


def test_genicam_finds_by_serial_or_address_and_names_what_it_found(small_cfg, fake_gige):
    Aravis = require_aravis()
    from rig.devices.genicam import open_aravis_camera
    address = fake_gige.ensure_running()
    gige = open_aravis_camera(address)  # an address is opened directly, without discovery
    assert gige.is_gv_device() and gige.get_device_serial_number() == GV_SERIAL
    del gige
    Aravis.disable_interface("GigEVision")  # discovery by serial stays off the network: the in-process camera only
    try:
        cam = open_aravis_camera("1")  # the in-process camera's serial number
        assert not cam.is_gv_device() and cam.get_model_name() == "Fake" and cam.get_device_serial_number() == "1"
        with pytest.raises(UsageError) as err:
            open_aravis_camera("no-such-camera")
    finally:
        Aravis.enable_interface("GigEVision")
    assert "camera.device" in str(err.value) and FAKE_ID in str(err.value) and "\n" not in str(err.value)


def test_genicam_camera_that_vanishes_raises_connection_error(small_cfg, fake_gige):
    """Killing the GigE Vision camera's process: the next grab finds no frame, the camera does not answer, and
    that is a ConnectionError (fatal), not a timeout (retried)."""
    cam = open_genicam(small_cfg, fake_gige.ensure_running())
    try:
        cam.grab(timeout_s=2.0)
        fake_gige.kill()
        with pytest.raises(ConnectionError, match="does not answer"):
            for _ in range(20):
                cam.grab(timeout_s=0.5)
    finally:
        cam.close()


class SimCameraPacedByGigE:
    """The simulated bench's camera with each frame paced by a frame of the GigE Vision camera on loopback: when
    that camera vanishes, this one does too, through the genicam backend's own fault path. ``kill_when()`` is asked
    before each grab whether to kill the GigE Vision camera's process now."""

    def __init__(self, sim_camera, gige_camera, server, kill_when):
        self.sim, self.gige, self.server, self.kill_when = sim_camera, gige_camera, server, kill_when
        self.width_px, self.height_px, self.bit_depth = sim_camera.width_px, sim_camera.height_px, sim_camera.bit_depth
        self.gain_db = sim_camera.gain_db

    @property
    def exposure_s(self):
        return self.sim.exposure_s

    @exposure_s.setter
    def exposure_s(self, value):
        self.sim.exposure_s = value

    def grab(self, timeout_s=1.0):
        if self.kill_when():
            self.server.kill()
        self.gige.grab(timeout_s=timeout_s)
        return self.sim.grab(timeout_s)

    def close(self):
        self.sim.close()
        self.gige.close()


def test_genicam_camera_killed_during_a_sweep_stops_the_run_with_exit_3_and_it_resumes(
        small_cfg, fake_gige, tmp_path, capsys, monkeypatch):
    """The GigE Vision camera's process is killed once the sweep has finished three levels: the run stops with
    exit 3 and a one-line message naming the camera, the run folder keeps every finished level, and
    ``sweep --resume`` (here with the simulated camera alone) finishes exactly the levels that were left."""
    import json

    import simulators.devices
    from conftest import small_config_file

    from rig.cli import main
    from rig.devices.genicam import GenicamCamera
    from analysis.config import load_config
    from rig.output.runs import read_journal
    from rig.run.steps import sweep_units

    address = fake_gige.ensure_running()
    levels = list(range(0, 256, 16))
    cfg_path = small_config_file(tmp_path, **{"sweep.levels": levels, "camera.grab_timeout_s": 0.5})
    events = tmp_path / "events.jsonl"

    def sweep_units_done():
        if not events.exists():
            return 0
        lines = [json.loads(line) for line in events.read_text().splitlines()]
        starts = [i for i, e in enumerate(lines) if e["event"] == "stage" and e["name"] == "sweep"]
        return sum(1 for e in lines[starts[0]:] if e["event"] == "unit") if starts else 0

    real_sim_camera = simulators.devices.SimCamera

    def paced(bench):
        gige = GenicamCamera(genicam_settings(small_cfg, address, width_px=16, height_px=16, bit_depth=8))
        gige._cam.set_frame_rate(200.0)
        return SimCameraPacedByGigE(real_sim_camera(bench), gige, fake_gige, lambda: sweep_units_done() >= 3)

    monkeypatch.setattr(simulators.devices, "SimCamera", paced)
    run = tmp_path / "run"
    code = main(["sweep", "--sim", "--config", str(cfg_path), "--out", str(run), "--pair", "0:80",
                 "--events", str(events)])
    assert code == 3
    err = capsys.readouterr().err.splitlines()
    assert err[0].startswith("fringecal: error: camera: GenICam camera Aravis Fake")
    assert "does not answer" in err[0] and "Traceback" not in "\n".join(err)
    info = json.loads((run / "run.json").read_text())
    assert info["status"] == "failed" and "camera" in info["message"]
    done = read_journal(run / "journal.jsonl").checkpoints()
    assert 3 <= len(done) < len(levels)

    monkeypatch.setattr(simulators.devices, "SimCamera", real_sim_camera)
    assert main(["sweep", "--resume", str(run)]) == 0
    after = read_journal(run / "journal.jsonl").checkpoints()
    scale_gray = json.loads((run / "run.json").read_text())["scale_gray"]
    assert done < after and len(after) == len(sweep_units(load_config(cfg_path), scale_gray=scale_gray))
    assert json.loads((run / "run.json").read_text())["status"] == "complete"


def test_genicam_roi_is_set_on_the_camera_not_cropped_afterwards(small_cfg, device):
    """A ROI shrinks what the camera sends (its payload) and moves its offsets; frames are the ROI's size; clearing
    it restores the whole configured window."""
    from analysis.patterns import Rect
    cam = open_genicam(small_cfg, device, bit_depth=8)
    try:
        whole = cam._cam.get_region()
        full_payload = cam._cam.get_payload()
        cam.roi = Rect(10, 42, 6, 30)
        region = cam._cam.get_region()
        assert (region.x - whole.x, region.y - whole.y, region.width, region.height) == (10, 6, 32, 24)
        assert cam._cam.get_payload() == 32 * 24 < full_payload
        frame = cam.grab(timeout_s=2.0)
        assert frame.image.shape == (24, 32)
        cam.roi = None
        assert cam._cam.get_region() == whole and cam.grab(timeout_s=2.0).image.shape == (60, 80)
        with pytest.raises(ValueError, match="outside"):
            cam.roi = Rect(0, 81, 0, 60)
    finally:
        cam.close()


def test_genicam_cameras_command_lists_cameras_and_the_configured_ones_settings(tmp_path, capsys):
    from conftest import small_config_file

    from rig.cli import main
    Aravis = require_aravis()
    cfg = small_config_file(tmp_path, **{"camera.backend": "genicam", "camera.device": FAKE_ID, "camera.bit_depth": 16,
                                         "camera.width_px": 80, "camera.height_px": 60, "camera.exposure_s": 0.002})
    Aravis.disable_interface("GigEVision")  # no discovery broadcast from the tests: the in-process camera only
    try:
        assert main(["cameras", "--simulated", "--config", str(cfg)]) == 0
    finally:
        Aravis.enable_interface("GigEVision")
    out = capsys.readouterr().out
    assert f"{FAKE_ID}: Aravis Fake, serial 1" in out
    assert "camera.device 'Fake_1' is GenICam camera Aravis Fake 1: exposure 2000.0 us" in out
    assert "Mono16, 80x60 at (984, 994)" in out  # centred on the 2048x2048 sensor


@pytest.mark.parametrize("bits", [10, 12])
def test_genicam_mono10_and_mono12_buffers_keep_their_counts(bits):
    """Aravis's simulated cameras offer only Mono8 and Mono16, so the unpacked 10- and 12-bit formats (PFNC: two
    bytes a pixel, little-endian, high bits zero) are checked on a buffer built here."""
    from rig.devices.genicam import GenicamCamera

    counts = np.random.default_rng(bits).integers(0, 2**bits, (6, 9)).astype("<u2")

    class Buffer:
        def get_image_width(self):
            return 9

        def get_image_height(self):
            return 6

        def get_data(self):
            return counts.tobytes()

    cam = object.__new__(GenicamCamera)  # only the pixel unpacking, no camera
    cam.bit_depth, cam.name = bits, "test camera"
    image = cam._image(Buffer())
    assert image.dtype == np.dtype("<u2") and np.array_equal(image, counts)


def test_shared_device_tests_run_on_one_worker(request):
    """This file serves a simulated GigE camera on a fixed address: under pytest-xdist its tests carry the shared
    devices' group in their id (xdist's loadgroup then sends them all to one worker), else two workers' cameras would
    claim the same port (seen: read_memory timeouts)."""
    assert request.node.get_closest_marker("xdist_group").args == ("shared-devices",)
    if os.environ.get("PYTEST_XDIST_WORKER"):
        assert request.node.nodeid.endswith("@shared-devices")
