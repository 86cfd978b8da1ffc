"""``fringecal preview`` on a bench: the pattern goes to the panel's window and the frame comes from the configured
camera, as in a run (CI's two-monitor X server; the camera is the simulated one watching what the window shows)."""

import cv2
import numpy as np

from rig.cli import main
from xdisplay import panel_bench_toml, panel_display



def carrier(frame, period_px):
    """Complex amplitude of the fringes along x in the band's middle (columns 80..180, rows 60..140)."""
    profile = frame[60:140, 80:180].astype(float).mean(axis=0)
    x = np.arange(profile.size)
    return np.sum(np.hanning(x.size) * (profile - profile.mean()) * np.exp(-2j * np.pi * x / period_px))


def test_preview_on_the_panel_window_writes_the_cameras_frame(tmp_path, capsys):
    """The fringes move with the mirror gray by the simulated panel's true phase step (within 0.3 rad)."""
    from analysis.config import load_config
    from simulators.bench import Bench

    panel_display()
    config = tmp_path / "bench.toml"
    config.write_text(panel_bench_toml())
    frames = {}
    for gray in (0, 60):
        out, view = tmp_path / f"frame{gray}.png", tmp_path / f"view{gray}.png"
        assert main(["preview", "--config", str(config), "--mirror-gray", str(gray), "--out", str(out), "--view",
                     str(view)]) == 0
        frames[gray] = cv2.imread(str(out), cv2.IMREAD_UNCHANGED)
        assert frames[gray].dtype == np.uint16 and frames[gray].shape == (200, 256)
        assert cv2.imread(str(view), cv2.IMREAD_UNCHANGED).dtype == np.uint8
    period = 6 * 8.5 / 4.8  # the grating period seen at the camera: 6 panel px x 8.5 um / 4.8 um camera px
    moved = abs(np.angle(carrier(frames[60], period) / carrier(frames[0], period)))
    _, truth = Bench(load_config(config)).true_curve()
    assert abs(moved - abs(np.angle(np.exp(1j * (truth[60] - truth[0]))))) < 0.3
    assert "peak" in capsys.readouterr().out


def test_preview_with_a_live_camera_asks_for_the_laser_safety_acknowledgement(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("FRINGECAL_HOME", str(tmp_path / "home"))
    frames = tmp_path / "frames"
    frames.mkdir()
    image = (np.arange(256 * 200).reshape(200, 256) % 4000).astype(np.uint16)
    cv2.imwrite(str(frames / "g000.png"), image)
    config = tmp_path / "bench.toml"
    config.write_text(panel_bench_toml("replay", frames))
    out = tmp_path / "frame.png"
    assert main(["preview", "--config", str(config), "--out", str(out)]) == 2
    assert "--laser-safety-acknowledged" in capsys.readouterr().err and not out.exists()
    panel_display()
    assert main(["preview", "--config", str(config), "--out", str(out), "--laser-safety-acknowledged"]) == 0
    assert np.array_equal(cv2.imread(str(out), cv2.IMREAD_UNCHANGED), image)
    assert "LASER SAFETY" in capsys.readouterr().err
