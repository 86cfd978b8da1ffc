"""Folders of fringe images taken by any acquisition software: which file holds which gray, and reading them.

A folder is described either by ``manifest.csv`` with columns ``gray,file`` and optionally ``time_s`` (rows in
acquisition order; grays may repeat), or by file names that carry the gray, matched by a regular expression
with one group. Images are 8- or 16-bit PNG or TIFF (read unchanged) or 2-D ``.npy`` arrays.
"""

from __future__ import annotations

import csv
import os
import re
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

DEFAULT_NAME_PATTERN = r"g?(\d+)"  # matches the whole stem: g017.png, 017.tif
IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".npy")
MIN_SIDE_PX = 8  # the smallest image side the fringe analysis takes


class ImageFolderError(ValueError):
    """A folder, manifest or image cannot be used; the message names the file and what was expected."""


@dataclass(frozen=True)
class ImageRecord:
    """One image of a sweep: its gray level, file and acquisition time (s, None when unknown)."""

    gray: int
    path: Path
    time_s: float | None = None
    where: str = ""  # where the gray was read, for messages: a manifest line or the file name

    def __post_init__(self):
        if not self.where:
            object.__setattr__(self, "where", str(self.path))


def list_images(folder: str | Path, name_pattern: str = DEFAULT_NAME_PATTERN) -> list[ImageRecord]:
    """Images of a folder in acquisition order: the manifest's rows, or matching file names sorted by gray."""
    folder = Path(folder)
    if not folder.is_dir():
        raise ImageFolderError(f"{folder}: expected a folder of images")
    manifest = folder / "manifest.csv"
    if manifest.exists():
        return _read_manifest(manifest)
    try:
        pattern = re.compile(name_pattern)
    except re.error as err:
        raise ImageFolderError(f"--name-pattern: not a valid regular expression ({err})") from None
    if pattern.groups != 1:
        raise ImageFolderError(f"--name-pattern: expected exactly one group for the gray, got {pattern.groups}")
    records = []
    for path in sorted(folder.iterdir()):
        if path.suffix.lower() not in IMAGE_SUFFIXES:
            continue
        match = pattern.fullmatch(path.stem)
        if match and match.group(1) is not None and match.group(1).isdigit():
            records.append(ImageRecord(int(match.group(1)), path))
    if not records:
        raise ImageFolderError(f"{folder}: no manifest.csv and no image named by gray (pattern {name_pattern!r}, "
                               f"files {', '.join(IMAGE_SUFFIXES)})")
    return sorted(records, key=lambda r: (r.gray, r.path.name))


def _read_manifest(manifest: Path) -> list[ImageRecord]:
    try:  # utf-8-sig: a spreadsheet may save the file with a byte-order mark
        text = manifest.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as err:
        raise ImageFolderError(f"{manifest}: expected CSV text in UTF-8, found byte 0x{err.object[err.start]:02x} "
                               f"at offset {err.start}") from None
    reader = csv.DictReader(text.splitlines())
    columns = [c.strip() for c in (reader.fieldnames or [])]
    missing = [c for c in ("gray", "file") if c not in columns]
    if missing:
        raise ImageFolderError(f"{manifest}: expected columns gray,file[,time_s], missing {','.join(missing)}")
    records = []
    for line, row in enumerate(reader, start=2):
        row = {k.strip(): (v or "").strip() for k, v in row.items() if k is not None}
        try:
            gray = int(row["gray"])
            time_s = float(row["time_s"]) if row.get("time_s") else None
        except ValueError:
            raise ImageFolderError(f"{manifest} line {line}: expected an integer gray and a number time_s, "
                                   f"got gray={row['gray']!r} time_s={row.get('time_s')!r}") from None
        if gray < 0 or time_s is not None and not np.isfinite(time_s):
            raise ImageFolderError(f"{manifest} line {line}: expected a gray level >= 0 and a finite time_s, "
                                   f"got gray={row['gray']!r} time_s={row.get('time_s')!r}")
        if not row["file"]:
            raise ImageFolderError(f"{manifest} line {line}: empty file name")
        records.append(ImageRecord(gray, manifest.parent / row["file"], time_s, f"{manifest} line {line}"))
    if not records:
        raise ImageFolderError(f"{manifest}: expected at least one row after the header")
    timed = [r.time_s is not None for r in records]
    if any(timed) and not all(timed):
        raise ImageFolderError(f"{manifest}: time_s must be given on every row or on none")
    return records


def read_image(path: str | Path) -> np.ndarray:
    """A 2-D image (counts) from PNG/TIFF (8 or 16 bit, unchanged) or .npy; ImageFolderError if unusable."""
    import cv2

    path = Path(path)
    if not path.exists():
        raise ImageFolderError(f"{path}: no such image file")
    if path.suffix.lower() == ".npy":
        try:
            img = np.load(path, allow_pickle=False)
        except (ValueError, OSError) as err:
            raise ImageFolderError(f"{path}: not a readable .npy array ({err})") from None
    else:
        img, said = _quietly(lambda: cv2.imread(str(path), cv2.IMREAD_UNCHANGED))
        if img is None:
            reason = f" ({said.splitlines()[0]})" if said else ""
            raise ImageFolderError(f"{path}: not a readable PNG or TIFF image{reason}")
    if img.ndim != 2 or img.dtype.kind not in "uif":
        raise ImageFolderError(f"{path}: expected a single-channel (gray) image, got shape {img.shape} {img.dtype}")
    if min(img.shape) < MIN_SIDE_PX:
        raise ImageFolderError(f"{path}: expected an image of at least {MIN_SIDE_PX}x{MIN_SIDE_PX} px, "
                               f"got {img.shape[1]}x{img.shape[0]}")
    if img.dtype.kind == "f" and not np.all(np.isfinite(img)):
        row, col = np.argwhere(~np.isfinite(img))[0]
        raise ImageFolderError(f"{path}: expected finite pixel values, got {img[row, col]} at row {row}, "
                               f"column {col}")
    return img


def _quietly(decode):
    """Run ``decode``, keeping what the C image libraries print on stderr (libpng's complaints) off the terminal;
    return its result and that text."""
    with tempfile.TemporaryFile() as sink:
        saved = os.dup(2)
        try:
            os.dup2(sink.fileno(), 2)
            result = decode()
        finally:
            os.dup2(saved, 2)
            os.close(saved)
        sink.seek(0)
        return result, sink.read().decode("utf-8", "replace").strip()
