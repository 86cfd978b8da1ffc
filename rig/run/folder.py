"""The run folder: what ran, with what, and everything it measured.

    run.json        config snapshot, versions, host, times, devices, exposure, tuned pair, band, status
    config.toml     the same config as a file, to run the same bench again with --config
    journal.jsonl   one line per analysed frame and per finished unit (rig.run.journal)
    frames/         16-bit PNG crops of the fringe band (gNNN-fNNNNN.png), unless --no-frames
    manifest.csv    gray,file,time_s of the saved crops in acquisition order (so `fringecal analyze` reads them)
    phase.csv, analysis.json, phase.png, tune.csv, tune.png, truth.csv (simulator runs)

Whole-file writes are atomic (rig.atomic); the journal is appended line by line.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import platform
import socket
import sys
from pathlib import Path

import cv2
import numpy as np

from analysis.config import as_dict, to_toml
from rig.atomic import write_atomic, write_whole
from rig.errors import UsageError, writing_to
from rig.output.results import now_iso, versions
from rig.output.runs import CROP_MARGIN_PERIODS
from rig.run.lock import WriterLock

# run.json keys a resumed run needs
RESUME_KEYS = ("config", "config_source", "devices")

class RunFolder:
    """One run's folder; ``info`` mirrors run.json and is rewritten atomically by ``update``."""

    def __init__(self, path: Path, info: dict, save_frames: bool = True):
        self.path = Path(path)
        self.info = info
        self.save_frames = save_frames
        self.frames_dir = self.path / "frames"
        self.crop = None  # (rows, cols) slices of saved crops
        self.lock = None

    def _hold(self, what: str) -> None:
        """Become the folder's only writer (rig.run.lock), and where a crash is reported (rig.errors)."""
        self.lock = WriterLock(self.path, what)

    @classmethod
    def create(cls, path: str | Path, cfg, command: list[str], devices: dict, save_frames: bool = True):
        """Make a new run folder; refuse one that already holds a run (nothing measured is overwritten)."""
        path = Path(path)
        if (path / "run.json").exists():
            raise UsageError(f"--out: {path} already holds a run; resume it with --resume {path} or pick a new folder")
        if path.exists() and not path.is_dir():
            raise UsageError(f"--out: {path} exists and is not a folder; pick a new folder")
        if path.exists() and any(path.iterdir()):
            raise UsageError(f"--out: {path} exists and is not empty; pick a new folder")
        if not path.parent.is_dir():
            raise UsageError(f"--out: folder {path.parent} does not exist")
        try:
            path.mkdir(exist_ok=True)
        except OSError as err:
            raise UsageError(f"--out: cannot create the run folder {path} ({err.strerror})") from None
        info = {"fringecal_run": 1, "status": "running", "command": command, "config_source": cfg.source,
                "config": as_dict(cfg), "versions": versions(), "host": socket.gethostname(),
                "platform": platform.platform(), "started": now_iso(), "ended": None,
                "wavelength_nm": cfg.laser.wavelength_nm, "devices": devices, "sessions": 1, "warnings": [],
                "sweep_began": False}
        folder = cls(path, info, save_frames)
        folder._hold("--out")
        writing_to(folder)
        if save_frames:
            folder.frames_dir.mkdir(exist_ok=True)
        folder.write_info()
        write_atomic(path / "config.toml", to_toml(cfg).encode())
        return folder

    @classmethod
    def open(cls, path: str | Path):
        """Open an existing run folder for resuming, as its only writer."""
        path = Path(path)
        if not (path / "run.json").is_file():
            raise UsageError(f"--resume: {path} holds no run.json; expected a run folder written by fringecal")
        folder = cls(path, {}, save_frames=(path / "frames").is_dir())
        folder._hold("--resume")
        try:
            folder.info = cls._read_info(path)
        except BaseException:
            folder.release()
            raise
        folder.info["sessions"] = folder.info.get("sessions", 1) + 1
        writing_to(folder)
        return folder

    @staticmethod
    def _read_info(path: Path) -> dict:
        """run.json of a run to resume; UsageError naming it when it is missing or damaged."""
        file = path / "run.json"
        try:
            info = json.loads(file.read_text(encoding="utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as err:
            raise UsageError(f"--resume: {file} is damaged ({err})") from None
        if not isinstance(info, dict) or info.get("fringecal_run") != 1:
            raise UsageError(f"--resume: {file} is not a fringecal run file")
        missing = [key for key in RESUME_KEYS if not isinstance(info.get(key), (dict, str))]
        if missing:
            raise UsageError(f"--resume: {file} is damaged: it lacks {', '.join(missing)}")
        return info

    def sweep_began(self) -> bool:
        """Whether the sweep stage began: the run can be resumed (older runs: band, pair and exposure recorded)."""
        return self.info.get("sweep_began", all(key in self.info for key in ("band", "pair", "exposure_s")))

    def mark_failed(self, message: str, status: str = "failed") -> None:
        """run.json ``status`` ("failed", or "interrupted") with ``message``, as rig.errors ends a command."""
        self.update(status=status, ended=now_iso(), message=message)

    def release(self) -> None:
        """Stop being the folder's writer (the lock also goes when the process ends)."""
        if self.lock is not None:
            self.lock.release()
            self.lock = None

    def write_info(self) -> None:
        write_atomic(self.path / "run.json", (json.dumps(self.info, indent=2, allow_nan=False) + "\n").encode())

    def update(self, **fields) -> None:
        """Set fields of run.json and rewrite it."""
        self.info.update(fields)
        self.write_info()

    def warn(self, message: str) -> None:
        self.info.setdefault("warnings", []).append(message)
        self.write_info()

    def set_crop(self, band, period_px: float, shape: tuple[int, int]) -> None:
        """Saved crops: the band plus CROP_MARGIN_PERIODS periods on each side, inside the sensor."""
        m = int(np.ceil(CROP_MARGIN_PERIODS * period_px))
        h, w = shape
        self.crop = (slice(max(band.y0 - m, 0), min(band.y1 + m, h)), slice(max(band.x0 - m, 0), min(band.x1 + m, w)))

    def on_frame(self, record: dict, frame, step) -> dict:
        """Save the frame's crop when the step keeps frames; add its file name to the journal record."""
        if self.save_frames and step.keep and self.crop is not None:
            name = f"g{step.gray:04d}-f{record['frame']:06d}.png"
            ok, png = cv2.imencode(".png", np.ascontiguousarray(frame.image[self.crop]),
                                   [cv2.IMWRITE_PNG_COMPRESSION, 1])
            if not ok:
                raise OSError(f"frame {record['frame']}: the PNG encoder failed")
            write_whole(self.frames_dir / name, png.tobytes())  # the journal names the file only once it is written
            record["file"] = f"frames/{name}"
        return record

    def write_csv(self, name: str, header: list[str], rows) -> Path:
        buf = io.StringIO()
        writer = csv.writer(buf, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)
        return write_atomic(self.path / name, buf.getvalue().encode())

    def write_manifest(self, frame_records: list[dict]) -> Path | None:
        """manifest.csv of the saved crops, in acquisition order."""
        rows = [(r["gray"], r["file"], r["t_s"]) for r in frame_records if r.get("file")]
        return self.write_csv("manifest.csv", ["gray", "file", "time_s"], rows) if rows else None


def default_run_dir(root: str | Path = "runs") -> Path:
    """runs/YYYYmmdd-HHMMSS under the working folder."""
    return Path(root) / dt.datetime.now().strftime("%Y%m%d-%H%M%S")


def command_line() -> list[str]:
    return ["fringecal", *sys.argv[1:]]
