"""Which paths are movies: files `reviewer info` would open, folders of frames, lists of paths."""

from __future__ import annotations

import os
from pathlib import Path

from reviewer.errors import BadInput

LIST_SUFFIXES = (".txt", ".lst", ".list")
FRAME_SUFFIXES = (".png", ".tif", ".tiff")
# what our own commands write beside a movie, never a movie itself
DERIVED = (".review", ".candidates.csv", ".events.csv", ".times.csv", ".truth.csv")
MIN_FRAMES = 2  # a folder needs at least this many numbered images to be a movie


def _single_page_tiff(path: Path) -> bool:
    """True for a TIFF whose first IFD is its last (a frame, not a stack): reads ~16 bytes."""
    import struct

    try:
        with open(path, "rb") as f:
            head = f.read(16)
            order = "<" if head[:2] == b"II" else ">"
            if head[2:4] in (b"*\0", b"\0*"):
                (ifd,) = struct.unpack(order + "I", head[4:8])
                f.seek(ifd)
                (n,) = struct.unpack(order + "H", f.read(2))
                f.seek(ifd + 2 + 12 * n)
                (nxt,) = struct.unpack(order + "I", f.read(4))
                return nxt == 0
            if head[2:4] in (b"+\0", b"\0+"):
                (ifd,) = struct.unpack(order + "Q", head[8:16])
                f.seek(ifd)
                (n,) = struct.unpack(order + "Q", f.read(8))
                f.seek(ifd + 8 + 20 * n)
                (nxt,) = struct.unpack(order + "Q", f.read(8))
                return nxt == 0
    except (OSError, struct.error):
        return False
    return False


def is_frame_folder(folder: Path) -> bool:
    """Numbered PNG/TIFF frames: at least MIN_FRAMES images, and TIFFs of one page each."""
    images = sorted(p for p in folder.iterdir() if p.is_file() and p.suffix.lower() in FRAME_SUFFIXES)
    if len(images) < MIN_FRAMES:
        return False
    tiffs = [p for p in images if p.suffix.lower() != ".png"]
    return all(_single_page_tiff(p) for p in tiffs[:2])


def _derived(path: Path) -> bool:
    name = path.name.lower()
    return name.startswith(".") or any(name.endswith(d) for d in DERIVED)


def _is_movie_file(path: Path) -> bool:
    suffix = path.suffix.lower()
    if suffix == ".json":  # a raw descriptor names its data file, which is listed itself
        return False
    from reviewer.movie.mrc import is_mrc
    from reviewer.movie.open import FILE_SUFFIXES

    return (suffix in FILE_SUFFIXES or is_mrc(path)) and not _derived(path)


def _from_list(path: Path) -> list[Path]:
    try:
        lines = path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeError) as exc:
        raise BadInput(f"{path}: cannot read the list of movies ({exc})") from None
    base = path.parent
    out = []
    for line in lines:
        line = line.strip()
        if line and not line.startswith("#"):
            p = Path(line).expanduser()
            out.append(p if p.is_absolute() else base / p)
    return out


def _walk(folder: Path, recursive: bool) -> list[Path]:
    if folder.suffix.lower() == ".zarr" or (folder / ".zarray").exists() or \
            (folder / "zarr.json").exists() or (folder / ".zgroup").exists():
        return [folder]
    if is_frame_folder(folder):
        return [folder]
    found: list[Path] = []
    try:
        entries = sorted(folder.iterdir())
    except OSError as exc:
        raise BadInput(f"{folder}: cannot list the folder ({exc.strerror or exc})") from None
    for p in entries:
        if _derived(p):
            continue
        if p.is_dir():
            if recursive:
                found += _walk(p, True)
        elif _is_movie_file(p):
            found.append(p)
    return found


def find_movies(paths: list[str | os.PathLike], recursive: bool = False) -> list[Path]:
    """Every movie named or found under `paths`, each once, in a stable order. A path that does
    not exist is still listed (its job then fails with a one-line error, like the others)."""
    out: list[Path] = []
    for raw in paths:
        p = Path(raw).expanduser()
        if p.is_dir():
            out += _walk(p, recursive)
        elif p.suffix.lower() in LIST_SUFFIXES and p.is_file():
            out += _from_list(p)
        else:
            out.append(p)
    seen, unique = set(), []
    for p in out:
        key = os.path.abspath(p)
        if key not in seen:
            seen.add(key)
            unique.append(p)
    return unique
