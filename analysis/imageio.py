"""Folders of fringe images taken by any acquisition software: which file holds which gray, and reading them.

A folder is described either by ``manifest.csv`` with columns ``gray,file`` and optionally ``time_s`` (rows in
acquisition order; grays may repeat), or by file names that carry the gray, matched by a regular expression
with one group. Images are 8- or 16-bit PNG or TIFF (read unchanged) or 2-D ``.npy`` arrays.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

DEFAULT_NAME_PATTERN = r"g?(\d+)"  # matches the whole stem: g017.png, 017.tif
IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".npy")


class ImageFolderError(ValueError):
    """A folder, manifest or image cannot be used; the message names the file and what was expected."""


@dataclass(frozen=True)
class ImageRecord:
    """One image of a sweep: its gray level, file and acquisition time (s, None when unknown)."""

    gray: int
    path: Path
    time_s: float | None = None


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
    with manifest.open(newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
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
                raise ImageFolderError(f"{manifest}: line {line}: expected an integer gray and a number time_s, "
                                       f"got gray={row['gray']!r} time_s={row.get('time_s')!r}") from None
            if not row["file"]:
                raise ImageFolderError(f"{manifest}: line {line}: empty file name")
            records.append(ImageRecord(gray, manifest.parent / row["file"], time_s))
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
        img = cv2.imread(str(path), cv2.IMREAD_UNCHANGED)
        if img is None:
            raise ImageFolderError(f"{path}: not a readable PNG or TIFF image")
    if img.ndim != 2 or img.dtype.kind not in "uif":
        raise ImageFolderError(f"{path}: expected a single-channel (gray) image, got shape {img.shape} {img.dtype}")
    return img
