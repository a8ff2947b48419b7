"""A folder of numbered frame images (PNG via Pillow, TIFF via tifffile), in natural order."""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

import numpy as np
import tifffile
from PIL import Image, UnidentifiedImageError

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, Timing, companions, fingerprint_file
from reviewer.movie.pixels import RGB_NOTICE, output_dtype, to_frames

SUFFIXES = {".png": "PNG", ".tif": "TIFF", ".tiff": "TIFF"}
_DIGITS = re.compile(r"(\d+)")


def natural_key(name: str) -> tuple:
    """Sort key that orders embedded numbers by value: frame2 before frame10."""
    return tuple((0, int(part), "") if part.isdigit() else (1, 0, part.lower())
                 for part in _DIGITS.split(name) if part)


def _read_image(path: Path) -> np.ndarray:
    try:
        if path.suffix.lower() == ".png":
            with Image.open(path) as im:
                if im.mode == "P":
                    im = im.convert("RGBA" if "transparency" in im.info else "RGB")
                elif im.mode in ("LA", "PA"):
                    im = im.getchannel(0)
                elif im.mode == "1":
                    im = im.convert("L")
                return np.asarray(im)
        return tifffile.imread(path, key=0)
    except (OSError, ValueError, UnidentifiedImageError, tifffile.TiffFileError) as exc:
        raise BadInput(f"{path}: unreadable frame image ({str(exc).splitlines()[0][:80]})") from None


class FolderMovie(Movie):
    def __init__(self, folder: Path, files: list[Path], first: np.ndarray, fingerprint: str) -> None:
        self.files = files
        self.rgb = first.ndim == 3 and first.shape[-1] in (3, 4)
        if first.ndim != 2 and not self.rgb:
            raise BadInput(f"{files[0]}: frame image has shape {first.shape}; expected a 2-D image")
        notices = [RGB_NOTICE] if self.rgb else []
        try:
            out, note = (np.dtype(np.float32), None) if self.rgb else output_dtype(first.dtype, "frames")
        except ValueError as exc:
            raise BadInput(f"{files[0]}: {exc}") from None
        notices += [note] if note else []
        if len(files) == 1:
            notices.append("a single 2-D image: read as a 1-frame movie")
        self._frame_shape = first.shape
        kind = SUFFIXES[files[0].suffix.lower()]
        super().__init__(path=folder, n_frames=len(files), shape=(first.shape[0], first.shape[1]),
                         dtype=out, layout=f"folder of {len(files)} numbered {kind} frames",
                         timing=Timing(), fingerprint=fingerprint, notices=notices)

    def _read(self, start: int, stop: int) -> np.ndarray:
        frames = []
        for f in self.files[start:stop]:
            img = _read_image(f)
            if img.shape != self._frame_shape:
                raise BadInput(f"{f}: frame image is {img.shape}, the first frame is {self._frame_shape}")
            frames.append(img)
        return to_frames(np.stack(frames), self.dtype, self.rgb)


def list_frames(folder: Path) -> list[Path]:
    """The frame files of a folder: the most common image suffix, naturally sorted."""
    try:
        names = [p for p in folder.iterdir() if p.is_file() and not p.name.startswith(".")]
    except OSError as exc:
        raise BadInput(f"{folder}: cannot list folder ({exc.strerror})") from None
    by_kind: dict[str, list[Path]] = {}
    for p in names:
        if p.suffix.lower() in SUFFIXES:
            by_kind.setdefault(SUFFIXES[p.suffix.lower()], []).append(p)
    if not by_kind:
        raise BadInput(f"{folder}: folder holds no PNG or TIFF frame images")
    files = max(by_kind.values(), key=len)
    return sorted(files, key=lambda p: natural_key(p.name))


def fingerprint_folder(files: list[Path], folder: Path | None = None) -> str:
    """Cheap identity of a frame folder: names, sizes and mtimes (no frame contents), and the
    ``<folder>.times.csv`` when there is one."""
    h = hashlib.blake2b(digest_size=12)
    for f in files:
        st = f.stat()
        h.update(f"{f.name}:{st.st_size}:{st.st_mtime_ns};".encode())
    for extra in companions(folder if folder is not None else files[0]):
        h.update(fingerprint_file(extra).encode())
    return h.hexdigest()


def open_folder(folder: Path) -> Movie:
    files = list_frames(folder)
    first = _read_image(files[0])
    return FolderMovie(folder, files, first, fingerprint_folder(files, folder))
